"""The separating next reading of a diagnosis: the reading that best tells the leading
hypotheses apart (or confirms the leader, or explores under it).

The method is described in :mod:`reconcile.diagnosis.diagnose` (Bhattacharyya distance
between the hypotheses' predictive Gaussians; Fukunaga, *Introduction to Statistical
Pattern Recognition*, ch. 3, from memory). The candidates are the readings of the
catalogue (:func:`reconcile.inference.catalogue.readings_one_could_take`) not yet taken.

A hypothesis the readings cannot see (``testable`` false: :mod:`reconcile.diagnosis.scoring`)
is no reason for a reading: it takes part only when it matters to the spec, its fitted
board missing a ``[spec]`` target (:func:`matters_to_spec`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from reconcile.data.readings import Reading, default_uncertainty
from reconcile.diagnosis.fault_fit import predict_faults
from reconcile.diagnosis.scoring import Hypothesis
from reconcile.engine.solution import check_spec
from reconcile.errors import InputError
from reconcile.inference.catalogue import ReadingKey, reading_label, readings_one_could_take
from reconcile.inference.measure import Observation
from reconcile.model.board import Board

TOP_FOR_NEXT = 6
"""Hypotheses the next reading is chosen to separate (the most probable ones)."""
MIN_PROBABILITY_FOR_NEXT = 1e-6
CLEAR_WINNER = 0.99
"""Above this probability the top hypothesis is taken as clearly ahead (next reading:
confirm or explore rather than separate)."""
UNREADABLE_DISTANCE = 10.0
"""Bhattacharyya distance used when a reading cannot be taken under one hypothesis (a
capacitance of a shorted capacitor): the reading itself tells them apart."""


@dataclass(frozen=True)
class NextReading:
    """The reading to take next.

    ``purpose`` is ``separate`` (the leading hypotheses are close: the reading that best
    tells them apart), ``confirm`` (one hypothesis is clearly ahead and explains the
    readings: the reading that best tells it from the runner-up) or ``explore`` (one
    is ahead but none explains the readings: the reading the best hypothesis predicts
    least well, i.e. the most informative about the board under it). ``expected`` maps
    each leading hypothesis label to the value it predicts (SI units); ``separation``
    is in [0, 1] (see the module docstring). ``frequency`` is the test frequency of a
    small-signal reading (Hz; ``None`` for the board's ``[signal] frequency``).
    """

    quantity: str
    at: str
    uncertainty: float
    separation: float
    separates: tuple[str, ...]
    expected: dict[str, float]
    purpose: str = "separate"
    frequency: float | None = None

    @property
    def label(self) -> str:
        return reading_label(self.quantity, self.at, self.frequency)

    def to_dict(self) -> dict:
        return {
            "quantity": self.quantity,
            "at": self.at,
            "frequency": self.frequency,
            "uncertainty": self.uncertainty,
            "separation": self.separation,
            "separates": list(self.separates),
            "expected": dict(self.expected),
            "purpose": self.purpose,
        }


def _candidates(board: Board, obs: list[Observation]) -> list[ReadingKey]:
    """Every reading of the catalogue not yet taken (frequency: None for ``[signal]``)."""
    taken = [(ob.quantity, ob.at, ob.frequency) for ob in obs]
    return [e.key for e in readings_one_could_take(board, taken=taken)]


def _reading_u(board: Board, quantity: str, at: str, value: float) -> float | None:
    if not math.isfinite(value):
        return None
    try:
        return default_uncertainty(Reading.from_si(quantity, at, float(value)), board)
    except InputError:
        return None


def separating_reading(
    board: Board, hyps: list[Hypothesis], obs: list[Observation]
) -> NextReading | None:
    hyps = [h for h in hyps if h.testable or matters_to_spec(board, h)]
    live = [h for h in hyps if h.probability > 0 and math.isfinite(h.score)]
    top = [h for h in live[:TOP_FOR_NEXT] if h.probability >= MIN_PROBABILITY_FOR_NEXT]
    if len(top) < 2:
        # Every rival is negligible or failed: the nearest of them (its fit may have
        # stopped early, but its predictions stand) is still the one to rule out.
        rivals = [h for h in hyps if h not in top and np.all(np.isfinite(h.fit.predicted))]
        top = (top + sorted(rivals, key=lambda h: h.chi_square))[:2]
    cands = _candidates(board, obs)
    if len(top) < 2 or not cands:
        return None
    cand_obs = [Observation(q, at, 0.0, 1.0, frequency=f) for q, at, f in cands]
    pred, jac = predict_faults([h.fit for h in top], cand_obs)
    k = len(top)
    var = np.empty_like(pred)
    for i, h in enumerate(top):
        cov = h.fit.full_covariance()
        var[i] = np.einsum("cp,pq,cq->c", jac[i], cov, jac[i])
    u = np.full_like(pred, np.nan)
    for c, (q, at, _) in enumerate(cands):
        for i in range(k):
            ui = _reading_u(board, q, at, pred[i, c])
            if ui is not None:
                u[i, c] = ui
        known = u[:, c][np.isfinite(u[:, c])]
        floor = float(known.min()) if len(known) else np.nan
        u[:, c] = np.where(np.isfinite(u[:, c]), u[:, c], floor)
    var = np.maximum(np.nan_to_num(var, nan=0.0), 0.0)
    s2 = var + u**2
    p = np.array([max(h.probability, 1e-300) for h in top])
    p = p / p.sum()
    sep = np.zeros(len(cands))
    spread = np.zeros(len(cands))
    norm = 0.0
    pairs: list[tuple[int, int, np.ndarray]] = []
    for i in range(k):
        for j in range(i + 1, k):
            d = _bhattacharyya(pred[i], s2[i], pred[j], s2[j])
            wij = math.sqrt(p[i] * p[j])
            norm += wij
            sep += wij * (1.0 - np.exp(-d))
            spread += wij * d
            pairs.append((i, j, wij * (1.0 - np.exp(-d))))
    sep = sep / norm if norm > 0 else sep
    explained = any(h.consistent for h in hyps)
    if top[0].probability < CLEAR_WINNER:
        purpose = "separate"
        order = np.lexsort((-spread, -np.round(sep, 9)))
    elif explained:
        purpose = "confirm"
        d01 = _bhattacharyya(pred[0], s2[0], pred[1], s2[1])
        order = np.lexsort((-spread, -d01))
    else:
        purpose = "explore"
        with np.errstate(divide="ignore", invalid="ignore"):
            info = 0.5 * np.log1p(np.where(u[0] > 0, var[0] / u[0] ** 2, 0.0))
        order = np.lexsort((-spread, -np.nan_to_num(info, nan=0.0)))
    best = int(order[0])
    q, at, f = cands[best]
    # Name the pair of hypotheses this reading tells apart best (for "confirm" and
    # "explore" that is the leader and its runner-up).
    i_sep, j_sep = 0, 1
    if purpose == "separate" and pairs:
        i_sep, j_sep, _ = max(pairs, key=lambda pair: pair[2][best])
    return NextReading(
        quantity=q,
        at=at,
        uncertainty=float(u[0, best]),
        separation=float(sep[best]),
        separates=(top[i_sep].label, top[j_sep].label),
        expected={h.label: float(pred[i, best]) for i, h in enumerate(top)},
        purpose=purpose,
        frequency=f,
    )


def matters_to_spec(board: Board, h: Hypothesis) -> bool:
    """Whether the board under ``h``, as fitted, misses one of its ``[spec]`` targets
    (the small-signal quantities its fit gives)."""
    return any(not c.met for c in check_spec(board, h.fit.small_signal)
               if math.isfinite(c.value))


def _bhattacharyya(m1, v1, m2, v2) -> np.ndarray:
    """Bhattacharyya distance between N(m1, v1) and N(m2, v2), elementwise; a reading one
    hypothesis cannot produce counts as :data:`UNREADABLE_DISTANCE`."""
    with np.errstate(invalid="ignore", divide="ignore"):
        vs = v1 + v2
        d = 0.25 * (m1 - m2) ** 2 / vs + 0.5 * np.log(vs / (2.0 * np.sqrt(v1 * v2)))
    one_nan = np.isnan(m1) ^ np.isnan(m2)
    d = np.where(one_nan, UNREADABLE_DISTANCE, d)
    return np.nan_to_num(d, nan=0.0, posinf=1e3)
