"""Which reading to take next: the one that most shrinks the spec quantities' uncertainty.

Under the linearised posterior (covariance C in internal coordinates), adding one
reading with sensitivity row h and standard uncertainty u shrinks the variance of a
quantity with gradient g by

    Δvar = (g·C·hᵀ)² / (h·C·hᵀ + u²)

(the rank-one Kalman/Bayes update of a Gaussian posterior). Candidates are every
reading of the catalogue (:func:`reconcile.inference.catalogue.readings_one_could_take`)
not yet taken, whatever it needs on the bench. Each is given its default uncertainty
(the registry's rule, :mod:`reconcile.model.quantities`). The score is the
mean relative reduction of the standard uncertainty over the spec quantities (or, with
no spec, over every fitted parameter), so quantities on different scales count alike.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reconcile.inference.catalogue import ReadingKey, reading_label, readings_one_could_take
from reconcile.inference.fitting import FitResult
from reconcile.inference.measure import SMALL_SIGNAL, MeasurementModel, Observation
from reconcile.data.readings import Reading, default_uncertainty
from reconcile.errors import InputError


@dataclass(frozen=True)
class Suggestion:
    quantity: str
    at: str
    uncertainty: float
    score: float
    before: dict[str, float]
    after: dict[str, float]
    frequency: float | None = None  # Hz; None for the board's [signal] frequency

    @property
    def label(self) -> str:
        return reading_label(self.quantity, self.at, self.frequency)

    def to_dict(self) -> dict:
        return {
            "quantity": self.quantity,
            "at": self.at,
            "frequency": self.frequency,
            "uncertainty": self.uncertainty,
            "expected_reduction": self.score,
            "stderr_before": self.before,
            "stderr_after": self.after,
        }


def candidate_readings(fit: FitResult) -> list[ReadingKey]:
    """Every reading of the catalogue not yet taken in ``fit``'s readings, as
    ``(quantity, at, frequency)`` (frequency None: the board's ``[signal] frequency``)."""
    taken = [(r.quantity, r.at, r.frequency) for r in fit.readings]
    return [e.key for e in readings_one_could_take(fit.board, taken=taken)]


def suggest_next(fit: FitResult, *, top: int = 3) -> list[Suggestion]:
    """The ``top`` most useful readings not yet taken, best first."""
    cands = candidate_readings(fit)
    if not cands:
        return []
    board = fit.board
    targets = [q for q in board.spec.targets if q in SMALL_SIGNAL]
    if board.signal.input and board.signal.output and targets:
        goal_obs = [Observation(q, "", 0.0, 1.0) for q in targets]
    else:
        goal_obs = []
    cand_obs = [Observation(q, at, 0.0, 1.0, frequency=f) for q, at, f in cands]
    model = MeasurementModel(board, cand_obs + goal_obs, fit.space)
    pred, jac = model.jacobian(fit.x)
    jac = np.where(np.isfinite(jac), jac, 0.0)
    c = fit.covariance
    h = jac[: len(cands)]
    if goal_obs:
        g = jac[len(cands) :]
        goal_names = targets
    else:  # no spec: every parameter counts
        g = np.eye(fit.space.size)
        goal_names = fit.space.keys
    var_g = np.einsum("ij,jk,ik->i", g, c, g)
    sd_g = np.sqrt(np.maximum(var_g, 1e-300))
    gch = g @ c @ h.T  # (G, K)
    hch = np.einsum("ij,jk,ik->i", h, c, h)
    out = []
    for k, (q, at, f) in enumerate(cands):
        proto = Reading.from_si(q, at, float(pred[k]))
        try:
            u = default_uncertainty(proto, board)
        except InputError:  # a zero reading with a purely relative default
            u = 1e-3
        dvar = gch[:, k] ** 2 / (hch[k] + u**2)
        sd_after = np.sqrt(np.maximum(var_g - dvar, 0.0))
        score = float(np.mean(1.0 - sd_after / sd_g))
        out.append(
            Suggestion(
                q,
                at,
                u,
                score,
                {
                    n: float(v)
                    for n, v in zip(goal_names, _external_sd(fit, goal_obs, sd_g), strict=True)
                },
                {
                    n: float(v)
                    for n, v in zip(goal_names, _external_sd(fit, goal_obs, sd_after), strict=True)
                },
                f,
            )
        )
    out.sort(key=lambda s: -s.score)
    return out[:top]


def _external_sd(
    fit: FitResult, goal_obs: list[Observation], sd_internal: np.ndarray
) -> np.ndarray:
    """Goal standard deviations in external units (spec quantities already are)."""
    if goal_obs:
        return sd_internal
    slopes = np.array(
        [p.external_slope(x) for p, x in zip(fit.space.parameters, fit.x, strict=True)]
    )
    return np.abs(slopes) * sd_internal
