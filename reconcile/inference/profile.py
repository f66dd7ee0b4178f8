"""Profile-likelihood intervals of fitted parameters (``fit --profile PARAM``).

Where the posterior is skewed (IS or beta near a bound, a value the readings barely
pin), the Gaussian ± σ of the linearised covariance can mislead. A profile interval
holds the parameter at trial values, refits every other one, and finds where the whole
MAP objective has risen by the χ² quantile of one degree of freedom for 1 σ and 2 σ
(68.27 % and 95.45 %): lmfit's ``conf_interval`` over the fit's own problem
(:mod:`reconcile.inference.lmfit_problem`), with that likelihood-ratio probability,
erf(√(Δχ²/2)), instead of lmfit's default F-test (the uncertainties are real, so the χ²
is not rescaled). The search runs in internal coordinates; the interval is reported in
the parameter's own unit (the coordinates are monotonic). An end the objective never
reaches before the hard bound is reported as open (None), with a note.
"""

from __future__ import annotations

import difflib
import math
import warnings
from dataclasses import dataclass

from reconcile.errors import InputError

__all__ = ["PROFILE_SIGMAS", "ProfileInterval", "check_profile_keys", "profile_intervals"]

PROFILE_SIGMAS = (1, 2)


@dataclass(frozen=True)
class ProfileInterval:
    """One parameter's profile interval in its own unit; None is an end left open."""

    key: str
    unit: str
    value: float
    sigma1: tuple[float | None, float | None]
    sigma2: tuple[float | None, float | None]
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {"value": self.value, "unit": self.unit, "sigma1": list(self.sigma1),
                "sigma2": list(self.sigma2), "notes": list(self.notes)}


def check_profile_keys(keys, known) -> None:
    """Refuse a key that is not a fitted parameter, naming the nearest ones."""
    known = list(known)
    for key in keys:
        if key not in known:
            near = difflib.get_close_matches(key, known, n=4, cutoff=0.4)
            hint = f"; near: {', '.join(near)}" if near else f"; fitted: {', '.join(known[:8])}"
            raise InputError(f"no fitted parameter {key!r}{hint}", key="--profile")


def _likelihood_ratio(best, new) -> float:
    """P(χ²₁ < Δχ²) = erf(√(Δχ²/2)): the probability lmfit's search inverts."""
    return math.erf(math.sqrt(max(new.chisqr - best.chisqr, 0.0) / 2.0))


def profile_intervals(fit, keys) -> dict[str, ProfileInterval]:
    """The 1 σ and 2 σ profile intervals of each of ``keys`` (parameter keys of
    ``fit``, a :class:`~reconcile.inference.fitting.FitResult`)."""
    import lmfit

    space = fit.space
    check_profile_keys(keys, space.keys)
    names = fit.names
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        ci = lmfit.conf_interval(
            fit.problem.minimizer, fit.minimizer_result,
            p_names=[names.name_of[k] for k in keys], sigmas=list(PROFILE_SIGMAS),
            prob_func=_likelihood_ratio,
        )
    out = {}
    for key in keys:
        fp = space.parameters[space.index(key)]
        lows, highs = _sides(ci[names.name_of[key]])
        notes = tuple(_note(str(w.message), names.name_of[key]) for w in caught
                      if names.name_of[key] in str(w.message))
        out[key] = ProfileInterval(
            key=key, unit=fp.unit, value=float(fp.to_external(fit.x[space.index(key)])),
            sigma1=(_external(fp, lows[0]), _external(fp, highs[0])),
            sigma2=(_external(fp, lows[1]), _external(fp, highs[1])), notes=notes,
        )
    return out


def _sides(rows) -> tuple[list[float], list[float]]:
    """lmfit's ``[(prob, value), ...]`` (low side outermost first, the best value with
    probability 0, the high side) as the low and high ends at 1 σ then 2 σ; an end
    lmfit's search could not find is NaN."""
    mid = next(i for i, (prob, _) in enumerate(rows) if prob == 0.0)
    lows = [v for _, v in rows[:mid]][::-1]
    highs = [v for _, v in rows[mid + 1:]]
    pad = [math.nan] * len(PROFILE_SIGMAS)
    return (lows + pad)[:len(PROFILE_SIGMAS)], (highs + pad)[:len(PROFILE_SIGMAS)]


def _external(fp, internal: float) -> float | None:
    if not math.isfinite(internal):
        return None
    return float(fp.to_external(internal))


def _note(message: str, name: str) -> str:
    if message.startswith("Bound reached"):
        return "the objective does not rise to 2 sigma before the hard bound on one side"
    return message.replace(name, "the parameter")
