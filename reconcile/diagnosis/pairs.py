"""Two faults at once: pair hypotheses, ranked from the single fits, the best fitted exactly.

A pair joins two single faults of different parts (:func:`combine`): the board runs
with both faults applied, every other parameter free, and is scored by the same Laplace
evidence as a single fault (:mod:`reconcile.diagnosis.scoring`), its prior weight the
product of the two faults' odds against ``none``.

A 12-part board has some 400 pairs; fitting each costs about what a single fault does,
so the search is pruned, in three steps:

1. **Optimistic score from the single fits.** For a pair (X, Y) and the weighted
   residuals r_X, r_Y, r_none of the single fits (one entry per reading), two cheap
   estimates of what the pair can reach are taken and the lower kept:

   - *each reading explained by one of the two*: Σ_k min(r_X,k², r_Y,k²), which is what
     the pair reaches when the faults act on different readings;
   - *effects adding up*: |r_X + r_Y − r_none|², the first-order (superposition)
     prediction of both faults at once, for faults that act on the same readings.

   The complexity is c_X + c_Y − c_none (each single fault's Occam factor over
   ``none``'s) and prior rows are taken as zero. This is an estimate meant to err on the
   optimistic side, **not a guaranteed bound**: two faults whose effects cancel or
   interact strongly can do better than it says.
2. **Exact fits in order.** Pairs are fitted through :func:`reconcile.diagnosis.fault_fit.
   fit_faults` in batches of :data:`PAIR_BATCH`, best optimistic score first, each
   started from the none fit and from its two single fits merged.
3. **Stopping rule.** After each batch, the search stops when the best pair not yet
   fitted has an optimistic log-posterior more than :data:`PRUNE_MARGIN` / 2 below the
   best exact pair's (its odds against the leader below exp(−PRUNE_MARGIN/2) even if the
   optimistic estimate were exact), or when :data:`MAX_PAIR_FITS` pairs have been fitted.
   Unfitted pairs get no probability; :class:`PairSearch` reports how many there were
   and the best optimistic score left behind.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from reconcile.diagnosis.fault_fit import FaultFit, fit_faults
from reconcile.diagnosis.faults import Fault
from reconcile.diagnosis.scoring import complexity_term, hypothesis_weight
from reconcile.inference.fitting import NAN_PENALTY
from reconcile.inference.measure import Observation
from reconcile.inference.priors import ParameterSpace
from reconcile.model.board import Board

__all__ = [
    "MAX_PAIR_FITS",
    "PAIR_BATCH",
    "PRUNE_MARGIN",
    "PairSearch",
    "combine",
    "fit_pairs",
    "optimistic_scores",
    "pair_candidates",
]

PAIR_BATCH = 24
"""Pairs fitted together in one batched fit."""
PRUNE_MARGIN = 30.0
"""Score units (−2 ln odds) by which the best unfitted pair's optimistic score must trail
the best fitted pair's before the search stops: odds below exp(−15)."""
MAX_PAIR_FITS = 120
"""At most this many pairs are fitted exactly (the search reports when it stopped here)."""


@dataclass(frozen=True)
class PairSearch:
    """How the pair search went: candidates, pairs fitted, and what was left out."""

    candidates: int
    fitted: int
    batches: int
    stopped_by: str  # margin | limit | exhausted
    best_unfitted_log_odds: float | None
    """The best unfitted pair's optimistic log-posterior minus the best fitted pair's
    (None when every pair was fitted)."""

    def to_dict(self) -> dict:
        return {
            "candidates": self.candidates,
            "fitted": self.fitted,
            "batches": self.batches,
            "stopped_by": self.stopped_by,
            "best_unfitted_log_odds": self.best_unfitted_log_odds,
            "rule": (
                "pairs ranked by an optimistic score from the single fits, fitted exactly "
                f"in batches of {PAIR_BATCH}; stop when the best unfitted pair trails the "
                f"best fitted one by more than {PRUNE_MARGIN / 2:g} in log odds, or after "
                f"{MAX_PAIR_FITS} pairs"
            ),
        }


def combine(a: Fault, b: Fault, drawn: Board, boards: dict[tuple[str, ...], Board]) -> Fault:
    """One hypothesis with both faults ``a`` and ``b`` (different parts).

    The board is the drawn one unless a transistor is reversed: then it is that fault's
    board (the same object, so pairs on it are fitted together), or for two reversed
    transistors a board with both swapped, kept in ``boards`` by the refs swapped.
    """
    if a.ref == b.ref:
        raise ValueError(f"a pair needs two different parts, got {a.ref} twice")
    swapped = tuple(sorted(f.ref for f in (a, b) if f.kind == "reversed"))
    if not swapped:
        board = drawn
    elif len(swapped) == 1:
        board = a.board if a.kind == "reversed" else b.board
    else:
        board = boards.get(swapped)
        if board is None:
            board = drawn
            for ref in swapped:
                q = board.transistors[ref]
                board = board.replace_part(dataclasses.replace(q, c=q.e, e=q.c))
            boards[swapped] = board
    return Fault(
        ref="",
        kind="pair",
        board=board,
        fixed=a.fixed + b.fixed,
        overrides=a.overrides + b.overrides,
        part_readings=a.part_readings + b.part_readings,
        widened=a.widened + b.widened,
        members=(a, b),
    )


def _node_pair(board: Board, ref: str) -> frozenset | None:
    part = board.resistors.get(ref) or board.capacitors.get(ref)
    return frozenset(part.nodes) if part is not None else None


def pair_candidates(board: Board, singles: list[Fault]) -> list[tuple[int, int]]:
    """Index pairs (i < j) into ``singles`` that make a two-fault hypothesis: two
    different parts, neither ``none``, and not two shorts across the same two nodes
    (electrically one short)."""
    out = []
    for i, a in enumerate(singles):
        if a.kind == "none":
            continue
        for j in range(i + 1, len(singles)):
            b = singles[j]
            if b.kind == "none" or b.ref == a.ref:
                continue
            if a.kind == b.kind == "short" and _node_pair(board, a.ref) == _node_pair(board, b.ref):
                continue
            out.append((i, j))
    return out


def _residual(ft: FaultFit) -> np.ndarray:
    r = np.asarray(ft.normalized_residual, dtype=float)
    return np.where(np.isfinite(r), r, NAN_PENALTY)


def optimistic_scores(
    singles: list[Fault],
    fits: list[FaultFit],
    none_fit: FaultFit,
    pairs: list[tuple[int, int]],
    weights: dict[str, float],
    drawn: Board,
) -> np.ndarray:
    """Optimistic log-posterior (unnormalised) of each pair from the single fits (see
    the module docstring): −½(optimistic χ² + complexity) + ln w(pair)."""
    if not pairs:
        return np.zeros(0)
    r = np.array([_residual(ft) for ft in fits])
    r0 = _residual(none_fit)
    c = np.array([complexity_term(ft) for ft in fits])
    c = np.where(np.isfinite(c), c, 0.0)
    c0 = c[0] if singles[0].kind == "none" else complexity_term(none_fit)
    i = np.array([p[0] for p in pairs])
    j = np.array([p[1] for p in pairs])
    each = np.sum(np.minimum(r[i] ** 2, r[j] ** 2), axis=1)
    added = np.sum((r[i] + r[j] - r0) ** 2, axis=1)
    chi = np.minimum(each, added)
    cplx = np.maximum(c[i] + c[j] - c0, 0.0)
    log_w = np.array(
        [math.log(hypothesis_weight(combine(singles[a], singles[b], drawn, {}), weights)) for a, b in pairs]
    )
    return -0.5 * (chi + cplx) + log_w


def _exact_log_posterior(ft: FaultFit, weights: dict[str, float]) -> float:
    score = ft.chi_square + complexity_term(ft)
    if ft.status == "no-operating-point" or not math.isfinite(score):
        return -math.inf
    return -0.5 * score + math.log(hypothesis_weight(ft.fault, weights))


def _merged_seed(x_a: np.ndarray, x_b: np.ndarray, b: Fault, space: ParameterSpace):
    """``x_a`` with the parameter of ``b``'s own part taken from ``x_b``."""
    x = np.array(x_a, dtype=float)
    if b.ref in space.keys:
        k = space.index(b.ref)
        x[k] = x_b[k]
    return x


def fit_pairs(
    drawn: Board,
    singles: list[Fault],
    fits: list[FaultFit],
    observations: list[Observation],
    space: ParameterSpace,
    weights: dict[str, float],
    *,
    max_iterations: int | None = None,
    on_progress: Callable[[int, int], None] | None = None,
) -> tuple[list[FaultFit], PairSearch]:
    """Fit the pair hypotheses of ``drawn`` worth fitting (see the module docstring).

    ``singles`` and ``fits`` are the single-fault hypotheses (``none`` first) and their
    fits; ``on_progress(done, total)`` is called after each batch with the pairs fitted
    so far and the most the search will fit.
    """
    none_fit = fits[0]
    pairs = pair_candidates(drawn, singles)
    opt = optimistic_scores(singles, fits, none_fit, pairs, weights, drawn)
    order = np.argsort(-opt, kind="stable")
    limit = min(MAX_PAIR_FITS, len(pairs))
    boards: dict[tuple[str, ...], Board] = {}
    kw = {} if max_iterations is None else {"max_iterations": max_iterations}
    out: list[FaultFit] = []
    best = -math.inf
    reference = min(ft.chi_square for ft in fits)
    done = batches = 0
    stopped_by = "exhausted"
    while done < len(order):
        if done >= limit:
            stopped_by = "limit"
            break
        if out and opt[order[done]] < best - 0.5 * PRUNE_MARGIN:
            stopped_by = "margin"
            break
        batch = order[done : min(done + PAIR_BATCH, limit)]
        faults, seeds = [], []
        for k in batch:
            a, b = pairs[int(k)]
            faults.append(combine(singles[a], singles[b], drawn, boards))
            xa, xb = fits[a].x, fits[b].x
            seeds.append([_merged_seed(xa, xb, singles[b], space),
                          _merged_seed(xb, xa, singles[a], space)])
        got = fit_faults(faults, observations, space, seeds=[none_fit.x], own_seeds=seeds,
                         reference_chi2=reference, **kw)
        out.extend(got)
        best = max([best, *(_exact_log_posterior(ft, weights) for ft in got)])
        done += len(batch)
        batches += 1
        if on_progress is not None:
            on_progress(done, limit)
    left = None
    if done < len(order) and math.isfinite(best):
        left = float(opt[order[done]] - best)
    search = PairSearch(
        candidates=len(pairs),
        fitted=done,
        batches=batches,
        stopped_by=stopped_by,
        best_unfitted_log_odds=left,
    )
    return out, search
