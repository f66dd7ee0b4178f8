"""Posterior draws by an ensemble sampler (``fit --sample N``), for when the Gaussian
(linearised) posterior is in doubt.

lmfit's ``emcee`` method over the fit's own problem
(:mod:`reconcile.inference.lmfit_problem`): the log-posterior is −½ × the whole MAP
objective (readings and prior rows; outside the hard bounds, none), so the draws are of
the same posterior the fit linearises. ``N`` is the number of steps of an ensemble of
``2P + 2`` walkers (P parameters), started in a small Gaussian cloud around the MAP
point (a tenth of the linearised posterior's spread); the first quarter of the steps is
discarded as burn-in. Reported per parameter in its own unit: the median and the 16/84 %
and 2.5/97.5 % quantiles; the mean acceptance fraction; the integrated autocorrelation
time (emcee's estimator). Warnings (common practice, as emcee's own documentation
advises): a chain shorter than 50 autocorrelation times, an acceptance fraction
outside 0.2–0.5.

Limits: ``N`` at most :data:`SAMPLE_LIMIT` steps, and the stored chain (steps × walkers
× parameters, 8 bytes each, plus the log-probabilities) within the memory budget
(:mod:`reconcile.engine.budget`); beyond either the command refuses (exit 2). Each step
costs one model evaluation per walker. emcee is the optional extra ``[sample]``.
"""

from __future__ import annotations

import contextlib
import importlib.util
import io
import math
from dataclasses import dataclass

import numpy as np

from reconcile.errors import InputError

__all__ = ["SAMPLE_LIMIT", "PosteriorSample", "check_sampling", "sample_posterior"]

SAMPLE_LIMIT = 20_000
QUANTILES = (2.5, 16.0, 50.0, 84.0, 97.5)
AUTOCORR_LENGTHS = 50  # chain length in autocorrelation times emcee's authors advise
ACCEPTANCE_RANGE = (0.2, 0.5)
START_SPREAD = 0.1


@dataclass(frozen=True)
class PosteriorSample:
    """Posterior quantiles per parameter key (own unit), and the chain's diagnostics."""

    steps: int
    walkers: int
    burn: int
    quantiles: dict[str, dict[str, float]]
    acceptance_fraction: float
    autocorrelation_steps: float | None
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {"steps": self.steps, "walkers": self.walkers, "burn": self.burn,
                "parameters": self.quantiles, "acceptance_fraction": self.acceptance_fraction,
                "autocorrelation_steps": self.autocorrelation_steps,
                "warnings": list(self.warnings)}


def check_sampling(steps: int) -> None:
    """Refuse ``--sample N`` over the limit, or without emcee installed (one line)."""
    if steps > SAMPLE_LIMIT:
        raise InputError(f"at most {SAMPLE_LIMIT} steps, got {steps}", key="--sample")
    if importlib.util.find_spec("emcee") is None:
        raise InputError("needs emcee, which is not installed: pip install 'reconcile[sample]'",
                         key="--sample")


def _check_memory(steps: int, walkers: int, size: int) -> None:
    from reconcile.engine.budget import MIB, budget_bytes

    need = steps * walkers * (size + 1) * 8
    if need > budget_bytes():
        raise InputError(
            f"{steps} steps of {walkers} walkers over {size} parameters need "
            f"{need / MIB:.0f} MiB, over the memory budget of {budget_bytes() / MIB:.0f} MiB "
            "(fewer steps, or a larger --memory / RECONCILE_MEMORY)", key="--sample")


def sample_posterior(fit, steps: int, *, seed: int = 0) -> PosteriorSample:
    """``steps`` steps of lmfit's emcee method from around the MAP point of ``fit``."""
    check_sampling(steps)
    space = fit.space
    walkers = 2 * space.size + 2
    _check_memory(steps, walkers, space.size)
    rng = np.random.default_rng(seed)
    cloud = rng.multivariate_normal(fit.x, fit.covariance * START_SPREAD**2, size=walkers,
                                    method="eigh")
    pos = np.clip(cloud, space.lower + 1e-12, space.upper - 1e-12)
    burn = steps // 4
    with contextlib.redirect_stdout(io.StringIO()):  # lmfit prints emcee's autocorr note
        result = fit.problem.minimizer.emcee(
            params=fit.minimizer_result.params, steps=steps, nwalkers=walkers, burn=burn,
            pos=pos, seed=seed, progress=False,
        )
    chain = np.asarray(result.chain)  # (steps − burn, walkers, P), internal coordinates
    flat = chain.reshape(-1, space.size)
    return PosteriorSample(
        steps=steps, walkers=walkers, burn=burn,
        quantiles=_quantiles(space, flat),
        acceptance_fraction=float(np.mean(result.acceptance_fraction)),
        autocorrelation_steps=(tau := _autocorrelation(chain)),
        warnings=_warnings(steps, tau, float(np.mean(result.acceptance_fraction))),
    )


def _quantiles(space, flat: np.ndarray) -> dict[str, dict[str, float]]:
    q = np.percentile(flat, QUANTILES, axis=0)
    out = {}
    for j, fp in enumerate(space.parameters):
        ext = [float(fp.to_external(v)) for v in q[:, j]]
        out[fp.key] = {"unit": fp.unit, "median": ext[2], "p16": ext[1], "p84": ext[3],
                       "p2_5": ext[0], "p97_5": ext[4]}
    return out


def _autocorrelation(chain: np.ndarray) -> float | None:
    """The largest integrated autocorrelation time over parameters (steps), emcee's
    estimator without its length check (that becomes our warning)."""
    from emcee.autocorr import integrated_time

    if chain.shape[0] < 2:
        return None
    tau = integrated_time(chain, tol=0, quiet=True)
    tau = float(np.max(tau))
    return tau if math.isfinite(tau) else None


def _warnings(steps: int, tau: float | None, acceptance: float) -> tuple[str, ...]:
    out = []
    if tau is None or steps - steps // 4 < AUTOCORR_LENGTHS * tau:
        shown = "unknown" if tau is None else f"{tau:.0f}"
        out.append(f"the chain is shorter than {AUTOCORR_LENGTHS} autocorrelation times "
                   f"(about {shown} steps each): take the quantiles as rough, or sample longer")
    low, high = ACCEPTANCE_RANGE
    if not low <= acceptance <= high:
        out.append(f"acceptance fraction {acceptance:.2f} is outside {low}–{high}: the "
                   "sampler moves poorly")
    return tuple(out)
