"""Say what is wrong with a board: single-fault explanations of its readings, ranked.

Method
------
Hypotheses (:func:`reconcile.faults.single_faults`): ``none``; ``open``, ``short`` and
``wrong-value`` for every resistor; ``missing`` (open or missing, one hypothesis: the two
are electrically the same) and ``short`` for every capacitor; ``reversed`` for every
transistor. Each is a modified board fitted with every remaining parameter free, by the
same maximum a posteriori objective as :func:`reconcile.fitting.fit_board`, all
hypotheses of one topology in one batched Levenberg–Marquardt loop
(:mod:`reconcile.fault_fit`), started from the ``none`` fit.

Score. The posterior probability of hypothesis H given the readings D is
P(H | D) ∝ P(H) · p(D | H), with the evidence p(D | H) = ∫ p(D | θ, H) p(θ | H) dθ over
the parameters H leaves free. The Laplace approximation of that integral (MacKay 1992,
"Bayesian interpolation"; Kass & Raftery 1995, "Bayes factors", §4.1; from memory) gives,
in χ² units,

    score(H) = −2 ln p(D | H) + const = χ²_min + ln det Σ_prior − ln det Σ_post,

where χ²_min is the objective at the best fit (reading rows plus prior rows), Σ_prior the
diagonal prior covariance of the free parameters (internal coordinates) and Σ_post the
linearised posterior covariance at the best fit. The complexity term
ln det(Σ_prior Σ_post⁻¹) ≥ 0 is the Occam factor: what the hypothesis pays for the
parameter volume the readings rule out. A fault that fixes a parameter (an open
resistor) pays nothing for it; a wrong value, whose prior is flat over decades
(:data:`reconcile.faults.WRONG_VALUE_LN_SD`), pays about ln(σ²_prior/σ²_post), a few
units when the readings pin the value down — the same order as BIC's ln n per extra
parameter, of which this is the exact, non-asymptotic form. Then

    ln P(H | D) = −score(H)/2 + ln w(kind of H) − ln Σ_H' (…),

with the prior weights w of :mod:`reconcile.fault_weights` (invented defaults,
configurable). A fit that stops before its minimum (the iteration limit, a stall, or
``bounded``: its Gauss–Newton floor far above the best hypothesis's χ², the rule of
:mod:`reconcile.diagnosis.fault_fit`) is scored with the χ² it reached, an upper bound
of its minimum (so its probability is a lower bound), and says so in its note and its
``status``; none is dropped. A hypothesis whose engine solution fails (no operating
point) gets probability 0 and a note.

Consistency. As in :mod:`reconcile.fitting`, χ²_min follows a χ² distribution with as
many degrees of freedom as there are readings; a hypothesis is consistent when its
upper-tail p ≥ 0.01. When no hypothesis is consistent the readings are not explained by
any single fault: the diagnosis says so and names the readings the best hypothesis
disagrees with most.

Next reading. Among the most probable hypotheses (up to :data:`TOP_FOR_NEXT`), each
reading not yet taken is predicted under each hypothesis at its best fit, with the
predictive variance JΣ_postJᵀ + u² (u its default uncertainty). Two hypotheses i, j are
told apart by a reading in proportion to the Bhattacharyya distance D_ij between their
predictive Gaussians, which bounds the error of choosing between them by
√(p_i p_j)·exp(−D_ij) (Fukunaga, *Introduction to Statistical Pattern Recognition*,
ch. 3, from memory). While the leader's probability is under :data:`CLEAR_WINNER` the
reading suggested maximises the separation Σ √(p_i p_j)(1 − exp(−D_ij)) / Σ √(p_i p_j)
∈ [0, 1] (purpose ``separate``); once one hypothesis is clearly ahead and consistent,
the reading with the largest D between it and the runner-up (``confirm``); when one is
ahead but none is consistent, the reading its fit predicts least well relative to the
meter, ½ ln(1 + JΣ_postJᵀ/u²), the most informative about the board under it
(``explore``).

Prior of a capacitor's ``missing``: it stands for open too, so its weight is
``missing + open`` (:mod:`reconcile.fault_weights`).

Two faults at once (``max_faults=2``; by default only when no single fault explains the
readings): pairs of faults over all parts, scored the same way with the prior weights'
odds multiplied, the search pruned by :mod:`reconcile.diagnosis.pairs` (its module
docstring states the rule). Where a single fault explains the readings it is the honest
answer: a pair has more freedom and a lower prior, and is not searched unless asked.
The next reading is then chosen to separate the leading pairs from the leading single
faults (:data:`LEADING_PAIRS`, :data:`LEADING_SINGLES`).

Decisive: the leading hypothesis has probability ≥ :data:`DECISIVE_P` and is
``testable`` (the readings tell it from ``none``); a repair may follow it
(:mod:`reconcile.pipeline.repair`).

Where it lives: :mod:`reconcile.diagnosis.scoring` (the score and probabilities),
:mod:`reconcile.diagnosis.checks` (the meter check of each hypothesis),
:mod:`reconcile.diagnosis.separating` (the next reading); this module runs them.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from reconcile.data.readings import Reading
from reconcile.diagnosis.fault_fit import fit_faults
from reconcile.diagnosis.faults import single_faults
from reconcile.diagnosis.pairs import PairSearch, fit_pairs
from reconcile.diagnosis.scoring import Hypothesis, score_hypotheses
from reconcile.diagnosis.separating import NextReading, separating_reading
from reconcile.diagnosis.weights import fault_weights
from reconcile.engine import compile_board
from reconcile.errors import InputError
from reconcile.inference.fitting import P_CONSISTENT, SUSPECT_SIGMA
from reconcile.inference.measure import (
    MeasurementModel,
    Observation,
    ambient_from,
    observations_from,
)
from reconcile.inference.calibration import calibration_parameters
from reconcile.inference.priors import build_space
from reconcile.model.board import Board

__all__ = ["Diagnosis", "Hypothesis", "NextReading", "diagnose"]

DISAGREEING_SHOWN = 3
DECISIVE_P = 0.9
"""A leading hypothesis at least this probable (and testable) is decisive."""
LEADING_PAIRS = 4
LEADING_SINGLES = 2
"""With pairs searched, the next reading separates this many leading pairs from this
many leading single faults."""
MAX_FAULTS = (1, 2)


@dataclass(frozen=True)
class Diagnosis:
    """Ranked hypotheses, whether any explains the readings, and what to read next."""

    board: Board = field(repr=False)
    hypotheses: tuple[Hypothesis, ...]
    explained: bool
    disagreeing_readings: tuple[dict, ...]
    next_reading: NextReading | None
    prior_weights: dict[str, float]
    n_readings: int
    summary: str
    max_faults: int = 1
    pair_search: PairSearch | None = None

    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    def report(self, console=None) -> None:
        """Print what ``reconcile diagnose`` prints (a rich console, default stdout)."""
        from reconcile.present.show import show

        show(self, console)

    @property
    def top(self) -> Hypothesis:
        return self.hypotheses[0]

    @property
    def decisive(self) -> bool:
        """The leader has probability ≥ :data:`DECISIVE_P` and is testable."""
        return bool(self.top.probability >= DECISIVE_P and self.top.testable)

    def by_label(self, label: str) -> Hypothesis:
        """The hypothesis labelled ``label`` (``RE open``, ``CE missing + RF wrong-value``;
        a pair in either order)."""
        want = sorted(label.split(" + "))
        for h in self.hypotheses:
            if sorted(h.label.split(" + ")) == want:
                return h
        raise KeyError(f"no hypothesis {label}")

    def hypothesis(self, ref: str | None, fault: str) -> Hypothesis:
        """The hypothesis for ``ref`` and ``fault`` (a capacitor's ``open`` is its
        ``missing``)."""
        for h in self.hypotheses:
            if h.ref == ref and (h.fault == fault or fault in h.aliases):
                return h
        raise KeyError(f"no hypothesis {ref} {fault}")

    def to_dict(self) -> dict:
        """The contract's ``diagnose`` JSON object (plus method details)."""
        return {
            "hypotheses": [h.to_dict() for h in self.hypotheses],
            "explained": self.explained,
            "summary": self.summary,
            "disagreeing_readings": [dict(r) for r in self.disagreeing_readings],
            "next_reading": self.next_reading.to_dict() if self.next_reading else None,
            "prior_weights": dict(self.prior_weights),
            "n_readings": self.n_readings,
            "max_faults": self.max_faults,
            "decisive": self.decisive,
            "pair_search": self.pair_search.to_dict() if self.pair_search else None,
            "method": {
                "score": "chi_square + complexity (Laplace approximation of the evidence)",
                "consistency_p": P_CONSISTENT,
                "prior_weights": "invented defaults unless given",
            },
        }


# ---------------------------------------------------------------------- entry
WORK_LIMIT = 2e10
"""Largest :func:`diagnosis_work` ``diagnose`` takes on by default. Measured on this
project's 2-core machines (invented cascades of common-emitter stages, one per
transistor; 2026-12-04, CPU seconds): 2 stages 1.4e6 (0.8 s), 4 stages 2.4e7 (2.4 s),
8 stages 5.5e8 (9–11 s, peak 246 MiB), 12 stages 3.7e9 (33 s, peak 363 MiB), 16 stages
1.5e10 (79 s, peak 527 MiB), 30 stages 3.1e11 (707 s, peak 895 MiB, the right leader).
The time grows about as work^0.65 at the large end (:func:`estimated_seconds`). The
limit admits 16 stages and refuses larger boards, a 30-stage one with exit code 2: it
would take some 12 minutes and hold more than the default budget (each of its 609
hypotheses keeps its covariance, 275 × 275, for the scoring: 370 MB)."""


def estimated_seconds(work: float) -> float:
    """CPU seconds of the single-fault fits of ``work`` on a 2-core machine of this
    project's kind, from the two large cascades of :data:`WORK_LIMIT` (8 and 16 stages):
    a power law through them, work^0.65 (an estimate for the refusal's message)."""
    return 10.0 * (work / 5.5e8) ** 0.65


def diagnosis_work(board: Board, faults: list, observations: list[Observation],
                   space) -> float:
    """Work of the single-fault fits, in entries of the engine's free-node matrix per
    Levenberg–Marquardt iteration: hypotheses × (parameters + 1, the finite-difference
    Jacobian) × probe set-ups × free nodes². The product tracks the measured time (see
    :data:`WORK_LIMIT`)."""
    model = MeasurementModel(board, observations, space)
    n_free = len(model.circuit.free)
    return float(len(faults)) * (space.size + 1) * model.group * n_free**2


def check_work(board: Board, faults: list, observations: list[Observation], space,
               limit: float | None) -> None:
    """Refuse, before any fitting, a diagnosis beyond ``limit`` (one line, exit 2)."""
    if limit is None:
        return
    work = diagnosis_work(board, faults, observations, space)
    if work > limit:
        seconds = estimated_seconds(work)
        took = f"{seconds / 60.0:,.0f} minutes" if seconds >= 120.0 else f"{seconds:.0f} s"
        raise InputError(
            f"this board is too large to diagnose here: {len(faults)} fault hypotheses over "
            f"{space.size} fitted parameters are beyond the default limit (work {work:.2g}, "
            f"limit {limit:.2g}: about {took} of CPU, and from about this size the fits "
            "hold more than the memory budget); "
            "diagnose one stage at a time (a board "
            "file of that stage with its readings), or call reconcile.diagnosis.diagnose "
            "with a larger work_limit", path=board.source_path)


def diagnose(
    board: Board,
    readings: list[Reading],
    *,
    prior_weights: dict[str, float] | None = None,
    max_iterations: int | None = None,
    max_faults: int | None = None,
    on_progress: Callable[[int, int], None] | None = None,
    work_limit: float | None = WORK_LIMIT,
) -> Diagnosis:
    """Rank fault explanations of ``readings`` on ``board``: single faults, and pairs.

    Parameters
    ----------
    board
        The board as drawn.
    readings
        The bench readings (a ``temperature`` reading sets the ambient prior).
    prior_weights
        Fault kind to prior weight, over the invented defaults
        (:data:`reconcile.fault_weights.DEFAULT_FAULT_WEIGHTS`).
    max_iterations
        Levenberg–Marquardt iterations per hypothesis (default
        :data:`reconcile.fault_fit.MAX_ITERATIONS`).
    max_faults
        1: single faults only; 2: pairs too. Default: 2 when no single fault explains
        the readings, else 1.
    on_progress
        Called as ``on_progress(done, total)`` while pairs are fitted.
    work_limit
        Refuse a board whose single-fault fits would need more than this much work
        (:func:`diagnosis_work`; None: no limit).

    Returns
    -------
    Diagnosis

    Raises
    ------
    InputError
        No reading the model can predict, a bad prior weight, or a board too large to
        diagnose within ``work_limit``.
    """
    if max_faults is not None and (
        isinstance(max_faults, bool) or max_faults not in MAX_FAULTS
    ):
        raise InputError(f"max faults must be 1 or 2, got {max_faults!r}", key="--max-faults")
    weights = fault_weights(prior_weights)
    obs = observations_from(readings, board)
    if not obs:
        raise InputError("diagnose needs at least one reading the board model predicts")
    ambient, ambient_u = ambient_from(readings)
    space = build_space(
        compile_board(board), ambient_k=ambient, ambient_sd_k=ambient_u,
        calibration=calibration_parameters(readings),
    )
    faults = single_faults(board)
    check_work(board, faults, obs, space, work_limit)
    kw = {} if max_iterations is None else {"max_iterations": max_iterations}
    none_fit = fit_faults(faults[:1], obs, space, **kw)[0]
    seeds = [none_fit.x, space.prior_mean]
    rest = fit_faults(faults[1:], obs, space, seeds=seeds,
                      reference_chi2=none_fit.chi_square, **kw)
    fits = [none_fit, *rest]
    u = np.array([ob.uncertainty for ob in obs])
    hyps = score_hypotheses(board, fits, none_fit, weights, len(obs), u)
    single_explained = any(h.consistent for h in hyps)
    k = max_faults if max_faults is not None else (1 if single_explained else 2)
    search = None
    if k == 2:
        pair_fits, search = fit_pairs(
            board, faults, fits, obs, space, weights,
            max_iterations=max_iterations, on_progress=on_progress,
        )
        hyps = score_hypotheses(board, fits + pair_fits, none_fit, weights, len(obs), u)
    explained = any(h.consistent for h in hyps)
    disagreeing = _disagreeing(hyps[0], obs, explained)
    nxt = separating_reading(board, _leading(hyps) if k == 2 else hyps, obs)
    return Diagnosis(
        board=board,
        hypotheses=tuple(hyps),
        explained=explained,
        disagreeing_readings=tuple(disagreeing),
        next_reading=nxt,
        prior_weights=weights,
        n_readings=len(obs),
        summary=_summary(hyps, explained, disagreeing, len(obs), k, single_explained, nxt),
        max_faults=k,
        pair_search=search,
    )


def _leading(hyps: list[Hypothesis]) -> list[Hypothesis]:
    """The leading pairs and the leading single faults (``none`` among them), best
    first: the hypotheses the next reading should tell apart."""
    pairs = [h for h in hyps if h.n_faults == 2][:LEADING_PAIRS]
    singles = [h for h in hyps if h.n_faults < 2][:LEADING_SINGLES]
    return sorted(pairs + singles, key=lambda h: -h.probability)


# ------------------------------------------------------- readings and summary
def _disagreeing(top: Hypothesis, obs: list[Observation], explained: bool) -> list[dict]:
    """Readings the best hypothesis disagrees with: beyond 3σ, and when nothing explains
    the readings at least the worst few."""
    z = top.fit.normalized_residual
    pred = top.fit.predicted
    order = np.argsort(-np.abs(np.nan_to_num(z, nan=np.inf)))
    out = []
    for k in order:
        big = not np.isfinite(z[k]) or abs(z[k]) > SUSPECT_SIGMA
        if not big and (explained or len(out) >= DISAGREEING_SHOWN):
            break
        ob = obs[k]
        out.append(
            {
                "quantity": ob.quantity,
                "at": ob.at,
                "measured": ob.measured,
                "predicted": float(pred[k]),
                "uncertainty": ob.uncertainty,
                "normalized_residual": float(z[k]),
            }
        )
    return out


def _summary(
    hyps: list[Hypothesis],
    explained: bool,
    disagreeing: list[dict],
    n: int,
    max_faults: int = 1,
    single_explained: bool = True,
    nxt: NextReading | None = None,
) -> str:
    top = hyps[0]
    what = "no single fault" if max_faults == 1 else "no single fault nor pair of faults"
    if not explained:
        worst = ", ".join(
            f"{d['quantity']}{' at ' + d['at'] if d['at'] else ''} "
            f"({d['normalized_residual']:+.1f}σ)"
            for d in disagreeing
        )
        return (
            f"{what} explains the readings: the best, {top.label}, leaves "
            f"χ² = {top.chi_square:.3g} for {n} readings (p = {top.p_value:.2g}); "
            f"the readings that disagree most: {worst}"
        )
    text = f"most likely: {top.description} (probability {top.probability:.2f})"
    if max_faults == 2 and not single_explained:
        text = "no single fault explains the readings; " + text
    close = [h for h in hyps[1:] if h.probability >= 0.1 * top.probability]
    if max_faults == 2 and top.probability < DECISIVE_P and close:
        text += (
            f"; the readings cannot tell it from {close[0].label} "
            f"(probability {close[0].probability:.2f})"
        )
        if nxt is not None:
            text += f": read {nxt.label} next"
    return text
