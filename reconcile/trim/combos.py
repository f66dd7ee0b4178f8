"""Which combinations of single changes get solved: all of them, or the promising ones.

Pairs (and larger combinations) are evaluated exhaustively when their count is at most
``exhaustive_limit``; otherwise they are pruned: every pair is first screened by first-order
superposition of the exactly solved single changes (q_pair ≈ q_a + q_b − q_built, the
same for VCE), the best ``pair_budget`` by screened worst-case margin are kept (an equal
share per pair of resistors, so that every pair of parts is represented), and those are
solved exactly. Superposition is exact for effects that add and misses only the cross term
of two changes, which the exact solve then supplies. Combinations of three or more parts
are always pruned this way, growing the best ``beam`` combinations one part at a time.
"""

from __future__ import annotations

import numpy as np

from reconcile.trim.candidates import Singles
from reconcile.trim.search import Context, Scores, spec_scores


def all_pairs(singles: Singles, width: int) -> np.ndarray:
    """Every pair of single changes on two different resistors, padded to ``width``."""
    cols = np.unique(singles.column)
    groups = [np.nonzero(singles.column == c)[0] for c in cols]
    out = []
    for a in range(len(groups)):
        for b in range(a + 1, len(groups)):
            ga, gb = np.meshgrid(groups[a], groups[b], indexing="ij")
            out.append(np.column_stack([ga.ravel(), gb.ravel()]))
    pairs = np.concatenate(out) if out else np.zeros((0, 2), dtype=np.intp)
    return _pad(pairs, width)


def pair_count(singles: Singles) -> int:
    """How many pairs of single changes on two different resistors there are."""
    n = singles.count_per_column().astype(np.int64)
    return int((n.sum() ** 2 - np.sum(n**2)) // 2)


def _pad(combos: np.ndarray, width: int) -> np.ndarray:
    out = np.full((combos.shape[0], width), -1, dtype=np.intp)
    out[:, : combos.shape[1]] = combos
    return out


def screen_pairs(
    ctx: Context, singles: Singles, single_scores: Scores, budget: int, width: int
) -> tuple[np.ndarray, int]:
    """The pairs worth solving exactly, by first-order superposition (see the module
    docstring); returns them and how many pairs were screened."""
    cols = np.unique(singles.column)
    groups = [np.nonzero(singles.column == c)[0] for c in cols]
    n_pairs = len(cols) * (len(cols) - 1) // 2
    quota = max(1, budget // max(n_pairs, 1))
    chosen, screened = [], 0
    for a in range(len(groups)):
        for b in range(a + 1, len(groups)):
            ga, gb = np.meshgrid(groups[a], groups[b], indexing="ij")
            combos = np.column_stack([ga.ravel(), gb.ravel()])
            screened += combos.shape[0]
            score = _superposed_score(ctx, singles, single_scores, None, combos)
            chosen.append(_best(combos, score, quota))
    return _pad(np.concatenate(chosen), width), screened


def grow(
    ctx: Context,
    singles: Singles,
    single_scores: Scores,
    seeds: np.ndarray,
    seed_scores: Scores,
    budget: int,
    width: int,
) -> tuple[np.ndarray, int]:
    """Extend each seed combination by one single change on another resistor, screened
    by superposition on the seed's exact solution; returns the best ``budget``."""
    k = int(np.max(np.sum(seeds >= 0, axis=1)))
    n1 = singles.size
    seed_rep = np.repeat(seeds[:, :k], n1, axis=0)
    single_tile = np.tile(np.arange(n1), seeds.shape[0])
    seed_row = np.repeat(np.arange(seeds.shape[0]), n1)
    clash = np.zeros(seed_rep.shape[0], dtype=bool)
    for s in range(k):
        clash |= singles.column[seed_rep[:, s]] == singles.column[single_tile]
    combos = np.column_stack([seed_rep, single_tile])[~clash]
    seed_row, added = seed_row[~clash], single_tile[~clash]
    combos = np.sort(combos, axis=1)
    combos, first = np.unique(combos, axis=0, return_index=True)
    seed_row, added = seed_row[first], added[first]
    score = _superposed_score(ctx, singles, single_scores, (seed_scores, seed_row, added), combos)
    return _pad(_best(combos, score, budget), width), int(combos.shape[0])


def _best(combos: np.ndarray, score: np.ndarray, n: int) -> np.ndarray:
    if combos.shape[0] <= n:
        return combos
    keep = np.argpartition(-score, n - 1)[:n]
    return combos[keep]


def _superposed_score(ctx, singles, single_scores, seed, combos) -> np.ndarray:
    """Worst-case margin predicted by superposing exact effects; a predicted loss of
    headroom or a failed solve scores far below anything feasible."""
    q0 = ctx.base.small_signal
    base_q = (
        np.array([getattr(q0, n)[0] for n in ctx.quantities[: ctx.n_spec]]) if q0 else np.zeros(0)
    )
    base_vce = ctx.base.vce[0]
    if seed is None:
        parts = [combos[:, 0], combos[:, 1]]
        q = base_q + sum(single_scores.q[p, : ctx.n_spec] - base_q for p in parts)
        vce = base_vce + sum(single_scores.vce[p] - base_vce for p in parts)
        ok = single_scores.converged[parts[0]] & single_scores.converged[parts[1]]
    else:
        seed_scores, seed_row, last = seed
        q = seed_scores.q[seed_row, : ctx.n_spec] + single_scores.q[last, : ctx.n_spec] - base_q
        vce = seed_scores.vce[seed_row] + single_scores.vce[last] - base_vce
        ok = seed_scores.converged[seed_row] & single_scores.converged[last]
    head = ctx.circuit.polarity * vce
    _, worst, _, robust = spec_scores(ctx, singles, combos, q, head)
    worst = np.where(robust, worst, worst - 1.0)
    if ctx.min_vce is not None:
        short = np.min(head, axis=1) - ctx.min_vce
        worst = np.where(short < 0, -10.0 + short, worst)
    return np.where(ok & np.isfinite(worst), worst, -np.inf)
