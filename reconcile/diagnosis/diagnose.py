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
configurable). A fit that stops before its minimum (the iteration limit, or abandoned
because its χ² stays more than 10⁴ above the best hypothesis's) is scored with the χ² it
reached, an upper bound, and says so in its note; a hypothesis whose engine solution
fails (no operating point) gets probability 0 and a note.

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

Where it lives: :mod:`reconcile.diagnosis.scoring` (the score and probabilities),
:mod:`reconcile.diagnosis.checks` (the meter check of each hypothesis),
:mod:`reconcile.diagnosis.separating` (the next reading); this module runs them.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from reconcile.data.readings import Reading
from reconcile.diagnosis.fault_fit import fit_faults
from reconcile.diagnosis.faults import single_faults
from reconcile.diagnosis.scoring import Hypothesis, score_hypotheses
from reconcile.diagnosis.separating import NextReading, separating_reading
from reconcile.diagnosis.weights import fault_weights
from reconcile.engine import compile_board
from reconcile.errors import InputError
from reconcile.inference.fitting import P_CONSISTENT, SUSPECT_SIGMA
from reconcile.inference.measure import Observation, ambient_from, observations_from
from reconcile.inference.priors import build_space
from reconcile.model.board import Board

__all__ = ["Diagnosis", "Hypothesis", "NextReading", "diagnose"]

DISAGREEING_SHOWN = 3


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

    @property
    def top(self) -> Hypothesis:
        return self.hypotheses[0]

    def hypothesis(self, ref: str | None, fault: str) -> Hypothesis:
        """The hypothesis for ``ref`` and ``fault`` (a capacitor's ``open`` is its
        ``missing``)."""
        for h in self.hypotheses:
            if h.ref == ref and (h.fault == fault or fault in h.aliases):
                return h
        raise KeyError(f"no hypothesis {ref} {fault}")

    def rank(self, ref: str | None, fault: str) -> int:
        """1-based rank of a hypothesis."""
        target = self.hypothesis(ref, fault)
        return next(i for i, h in enumerate(self.hypotheses, start=1) if h is target)

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
            "method": {
                "score": "chi_square + complexity (Laplace approximation of the evidence)",
                "consistency_p": P_CONSISTENT,
                "prior_weights": "invented defaults unless given",
            },
        }


# ---------------------------------------------------------------------- entry
def diagnose(
    board: Board,
    readings: list[Reading],
    *,
    prior_weights: dict[str, float] | None = None,
    max_iterations: int | None = None,
) -> Diagnosis:
    """Rank single-fault explanations of ``readings`` on ``board``.

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

    Returns
    -------
    Diagnosis

    Raises
    ------
    InputError
        No reading the model can predict, or a bad prior weight.
    """
    weights = fault_weights(prior_weights)
    obs = observations_from(readings)
    if not obs:
        raise InputError("diagnose needs at least one reading the board model predicts")
    ambient, ambient_u = ambient_from(readings)
    space = build_space(compile_board(board), ambient_k=ambient, ambient_sd_k=ambient_u)
    faults = single_faults(board)
    kw = {} if max_iterations is None else {"max_iterations": max_iterations}
    none_fit = fit_faults(faults[:1], obs, space, **kw)[0]
    seeds = [none_fit.x, space.prior_mean]
    rest = fit_faults(faults[1:], obs, space, seeds=seeds, reference_chi2=none_fit.chi_square, **kw)
    fits = [none_fit, *rest]
    hyps = score_hypotheses(board, fits, none_fit, weights, len(obs))
    explained = any(h.consistent for h in hyps)
    disagreeing = _disagreeing(hyps[0], obs, explained)
    nxt = separating_reading(board, hyps, obs)
    return Diagnosis(
        board=board,
        hypotheses=tuple(hyps),
        explained=explained,
        disagreeing_readings=tuple(disagreeing),
        next_reading=nxt,
        prior_weights=weights,
        n_readings=len(obs),
        summary=_summary(hyps, explained, disagreeing, len(obs)),
    )


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


def _summary(hyps: list[Hypothesis], explained: bool, disagreeing: list[dict], n: int) -> str:
    top = hyps[0]
    if not explained:
        worst = ", ".join(
            f"{d['quantity']}{' at ' + d['at'] if d['at'] else ''} "
            f"({d['normalized_residual']:+.1f}σ)"
            for d in disagreeing
        )
        return (
            f"no single fault explains the readings: the best, {top.label}, leaves "
            f"χ² = {top.chi_square:.3g} for {n} readings (p = {top.p_value:.2g}); "
            f"the readings that disagree most: {worst}"
        )
    return f"most likely: {top.description} (probability {top.probability:.2f})"

