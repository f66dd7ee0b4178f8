"""Which reading to take next: the one that most shrinks the spec quantities' uncertainty.

Under the linearised posterior (covariance C in internal coordinates), adding one
reading with sensitivity row h and standard uncertainty u shrinks the variance of a
quantity with gradient g by

    Δvar = (g·C·hᵀ)² / (h·C·hᵀ + u²)

(the rank-one Kalman/Bayes update of a Gaussian posterior). Candidates are every
reading of the catalogue (:func:`reconcile.inference.catalogue.readings_one_could_take`)
not yet taken, whatever it needs on the bench, and the gain at a few low-band test
frequencies (:func:`low_band_frequencies`: near the fitted board's low corner, a decade
below it, and at each capacitor's own term of it), which is where the coupling and
bypass capacitors show. Each is given its default uncertainty
(the registry's rule, :mod:`reconcile.model.quantities`). The score is the
mean relative reduction of the standard uncertainty over the spec quantities, the
corners ``[spec]`` limits among them (their gradients from the engine's gain rows:
:mod:`reconcile.analysis.corner_gradients`), or, with no spec, over every fitted
parameter, so quantities on different scales count alike.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from reconcile.analysis.corner_gradients import (
    CornerGoal,
    corner_gradients,
    corner_observations,
)
from reconcile.inference.catalogue import ReadingKey, reading_label, readings_one_could_take
from reconcile.inference.fitting import FitResult
from reconcile.inference.measure import SMALL_SIGNAL, MeasurementModel, Observation
from reconcile.data.readings import Reading, default_uncertainty
from reconcile.errors import InputError

if TYPE_CHECKING:
    from reconcile.engine.sweep import BoardSweep

MAX_LOW_BAND = 4
"""Low-band test frequencies the ranking scores a gain at, at most."""


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


def low_band_frequencies(response: BoardSweep | None) -> list[float]:
    """Test frequencies of the low band worth a gain reading, Hz: the fitted board's low
    corner, a decade below it, and each capacitor's own term of the corner
    (1/(2π·R·C), :class:`reconcile.engine.sweep.CapacitorShare`), rounded to two
    significant digits (what a generator is set to), at least a third of a decade
    apart, at most :data:`MAX_LOW_BAND` of them; none without a low corner."""
    if response is None or not math.isfinite(response.low_corner):
        return []
    f_low = response.low_corner
    out: list[float] = []
    for f in [f_low, f_low / 10.0, *(s.estimate_hz for s in response.shares)]:
        if not (math.isfinite(f) and f > 0):
            continue
        f = float(f"{f:.2g}")
        if all(abs(math.log10(f / g)) >= 1.0 / 3.0 for g in out):
            out.append(f)
    return out[:MAX_LOW_BAND]


def fitted_response(fit: FitResult) -> BoardSweep | None:
    """The fitted board's corners and capacitor shares (the engine's root-finding), or
    None for a board with no ``[signal]`` input and output."""
    board = fit.board
    if not (board.signal.input and board.signal.output):
        return None
    return fit.predicted_solution().sweep([board.signal.frequency])


def candidate_readings(fit: FitResult,
                       frequencies: Sequence[float] | None = None) -> list[ReadingKey]:
    """Every reading of the catalogue not yet taken in ``fit``'s readings, as
    ``(quantity, at, frequency)`` (frequency None: the board's ``[signal] frequency``),
    with the gain at each low-band test frequency too (``frequencies``; default
    :func:`low_band_frequencies` of the fitted board)."""
    if frequencies is None:
        frequencies = low_band_frequencies(fitted_response(fit))
    taken = [(r.quantity, r.at, r.frequency) for r in fit.readings]
    return [e.key for e in readings_one_could_take(fit.board, taken=taken,
                                                   frequencies=frequencies)
            if e.frequency is None or e.quantity == "gain"]


def _corner_goals(fit: FitResult, response: BoardSweep | None) -> list[CornerGoal]:
    """The corners ``[spec]`` limits that the fitted board has."""
    spec = fit.board.spec
    if response is None:
        return []
    wanted = (("low_corner", spec.low_corner_max, response.low_corner),
              ("high_corner", spec.high_corner_min, response.high_corner))
    return [CornerGoal(name, float(f)) for name, limit, f in wanted
            if limit is not None and math.isfinite(f) and f > 0]


def _goals(fit: FitResult, response: BoardSweep | None):
    """The goal observations, a function from their (predictions, Jacobian rows) to the
    goal gradients, and the goal names: the ``[spec]`` small-signal quantities and the
    spec'd corners (:mod:`reconcile.analysis.corner_gradients`); none with no spec."""
    board = fit.board
    targets = [q for q in board.spec.targets if q in SMALL_SIGNAL]
    if not (board.signal.input and board.signal.output):
        targets = []
    corners = _corner_goals(fit, response)
    obs = [Observation(q, "", 0.0, 1.0) for q in targets]
    if corners:
        obs += corner_observations(corners, response.midband_frequency)  # type: ignore[union-attr]

    def gradients(pred: np.ndarray, jac: np.ndarray) -> np.ndarray:
        rows = [jac[: len(targets)]]
        if corners:
            rows.append(corner_gradients(corners, pred[len(targets):], jac[len(targets):]))
        return np.vstack(rows)

    return obs, gradients, targets + [c.name for c in corners]


def suggest_next(fit: FitResult, *, top: int = 3) -> list[Suggestion]:
    """The ``top`` most useful readings not yet taken, best first."""
    response = fitted_response(fit)
    cands = candidate_readings(fit, low_band_frequencies(response))
    if not cands:
        return []
    board = fit.board
    goal_obs, gradients, goal_names = _goals(fit, response)
    cand_obs = [Observation(q, at, 0.0, 1.0, frequency=f) for q, at, f in cands]
    model = MeasurementModel(board, cand_obs + goal_obs, fit.space)
    pred, jac = model.jacobian(fit.x)
    jac = np.where(np.isfinite(jac), jac, 0.0)
    c = fit.covariance
    h = jac[: len(cands)]
    if goal_obs:
        g = gradients(pred[len(cands):], jac[len(cands):])
    else:  # no spec: every parameter counts
        g = np.eye(fit.space.size)
        goal_names = fit.space.keys
    var_g = np.einsum("ij,jk,ik->i", g, c, g)
    sd_g = np.sqrt(np.maximum(var_g, 1e-300))
    gch = g @ c @ h.T  # (G, K)
    hch = np.einsum("ij,jk,ik->i", h, c, h)
    before = dict(zip(goal_names, _external_sd(fit, bool(goal_obs), sd_g), strict=True))
    out = []
    for k, (q, at, f) in enumerate(cands):
        proto = Reading.from_si(q, at, float(pred[k]), frequency=f)
        try:
            u = default_uncertainty(proto, board)
        except InputError:  # a zero reading with a purely relative default
            u = 1e-3
        dvar = gch[:, k] ** 2 / (hch[k] + u**2)
        sd_after = np.sqrt(np.maximum(var_g - dvar, 0.0))
        score = float(np.mean(1.0 - sd_after / sd_g))
        after = _external_sd(fit, bool(goal_obs), sd_after)
        out.append(Suggestion(q, at, u, score, {n: float(v) for n, v in before.items()},
                              {n: float(v) for n, v in zip(goal_names, after, strict=True)},
                              f))
    out.sort(key=lambda s: -s.score)
    return out[:top]


def _external_sd(fit: FitResult, spec_goals: bool, sd_internal: np.ndarray) -> np.ndarray:
    """Goal standard deviations in external units (spec quantities and corners already
    are)."""
    if spec_goals:
        return sd_internal
    slopes = np.array(
        [p.external_slope(x) for p, x in zip(fit.space.parameters, fit.x, strict=True)]
    )
    return np.abs(slopes) * sd_internal
