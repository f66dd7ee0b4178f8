"""How likely a reworked board is to meet spec: Monte Carlo over what is still unknown.

Two things are uncertain after a rework (JCGM 101:2008 style propagation by sampling):

* the built board: draws of every fitted parameter from the linearised posterior, a
  multivariate normal in the internal coordinates of :mod:`reconcile.priors`, clipped to
  the hard bounds (in design mode the "posterior" is the prior: the parts' tolerances);
* each new part: uniform within ±its tolerance around its standard value (a tolerance is
  a limit with no distribution stated: rectangular, JCGM 100:2008 4.3.7).

The same posterior draws serve every option and the unchanged board (common random
numbers, so that the differences between options are not sampling noise), and all of
them are solved in one engine call. A sample meets spec when it has a DC solution, every
transistor is forward-active with |VCE| >= ``min_vce``, no resistor (nor either half of a
parallel pair) exceeds its rating, and every [spec] entry is within its limits, a corner
limit included (each draw's corners root-found by the engine near its option's own,
:func:`reconcile.engine.sweep.corners_near`). A capacitor added in parallel counts with
the built one: the position's C_built + C_new, each of the two drawn.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reconcile.engine import DCState, Parameters, solve_batch
from reconcile.engine.batch import bytes_per_board
from reconcile.engine.budget import THROUGHPUT_ROWS, chunks, rows_per_chunk
from reconcile.trim.candidates import Singles
from reconcile.trim.search import (
    Context,
    Scores,
    boards_per_call,
    changed_parts,
    first_order_state,
    score_solution,
    take_corners,
)

PERCENTILES = (5.0, 50.0, 95.0)


@dataclass(frozen=True)
class YieldEstimate:
    """Monte Carlo result for one option: the fraction meeting spec, the spread of each
    reported quantity and the draws themselves (for plots)."""

    fraction: float
    samples: int
    spread: dict[str, dict[str, float]]
    draws: dict[str, np.ndarray]

    @property
    def stderr(self) -> float:
        """Binomial standard error of the fraction."""
        p = self.fraction
        return float(np.sqrt(p * (1.0 - p) / max(self.samples, 1)))


def posterior_draws(ctx: Context, samples: int, rng: np.random.Generator) -> np.ndarray:
    """(samples, P) internal vectors from the posterior, clipped to the bounds.

    Drawn through the eigen-decomposition of the symmetrised covariance with negative
    eigenvalues (round-off of a nearly singular fit) set to zero.
    """
    cov = 0.5 * (ctx.covariance + ctx.covariance.T)
    w, v = np.linalg.eigh(cov)
    factor = v * np.sqrt(np.clip(w, 0.0, None))
    draws = ctx.x + rng.standard_normal((samples, ctx.x.size)) @ factor.T
    return np.clip(draws, ctx.space.lower, ctx.space.upper)


def yields(
    ctx: Context,
    singles: Singles,
    combos: np.ndarray,
    samples: int,
    rng: np.random.Generator,
    option_v: np.ndarray | None = None,
    option_corners=None,
) -> list[YieldEstimate]:
    """Yield of each candidate in ``combos`` (rows of single-change indices, -1 padded;
    an all -1 row is the board unchanged): rows × samples boards, solved in groups of
    options and chunks of boards within the memory budget, every option on the same
    posterior draws.

    ``option_v`` (rows, n + 1), the DC node voltages of each candidate as predicted, seeds
    Newton for its draws at a first-order step from there (default: the built board);
    ``option_corners`` (rows), each candidate's corners, are where its draws' corners are
    searched for (default: the built board's).
    """
    n_opt = combos.shape[0]
    x_draws = posterior_draws(ctx, samples, rng)  # the same draws for every option
    if option_v is None:
        option_v = np.repeat(ctx.base.state.v, n_opt, axis=0)
    if option_corners is None and ctx.hint is not None:
        option_corners = take_corners(ctx.hint, np.zeros(n_opt, np.intp))
    n_r = len(ctx.circuit.resistor_refs)
    per_option = samples * (bytes_per_board(ctx.circuit) + 64 * (n_r + combos.shape[1]))
    # Options are grouped only to fill engine calls (a few samples each): a group of about
    # two calls' worth of boards runs as fast as a larger one and holds far less.
    fill = max(1, -(-2 * THROUGHPUT_ROWS // max(samples, 1)))
    group = rows_per_chunk(per_option, share=0.5, at_most=fill)
    out: list[YieldEstimate] = []
    for sl in chunks(n_opt, group):
        hint = None if option_corners is None else take_corners(
            option_corners, np.arange(sl.start, sl.stop))
        out += _yields_of(ctx, singles, combos[sl], samples, x_draws, rng, option_v[sl], hint)
    return out


def _yields_of(ctx: Context, singles: Singles, combos: np.ndarray, samples: int,
               x_draws: np.ndarray, rng: np.random.Generator,
               option_v: np.ndarray, hint) -> list[YieldEstimate]:
    """:func:`yields` of a group of options that fits the memory budget."""
    n_opt = combos.shape[0]
    draws = ctx.space.to_parameters(x_draws)
    rows = np.repeat(combos, samples, axis=0)
    base_r = np.tile(draws.resistor_ohms, (n_opt, 1))
    base_c = np.tile(draws.capacitor_farads, (n_opt, 1))
    # The new parts: their standard values moved within ±tolerance, one draw per board.
    jitter = (
        rng.uniform(-1.0, 1.0, size=rows.shape) * singles.tolerance[np.where(rows >= 0, rows, 0)]
    )
    moved = _with_new_values(singles, rows, jitter)
    r, c, share = changed_parts(ctx, moved, _flat_index(rows), base_r, base_c)
    params = Parameters.concatenate([draws] * n_opt).with_values(
        resistor_ohms=r, capacitor_farads=c)
    r_mean, _, _ = changed_parts(
        ctx, singles, combos, np.repeat(ctx.built_ohms[None, :], n_opt, axis=0),
        np.repeat(ctx.built_farads[None, :], n_opt, axis=0),
    )
    seed = first_order_state(
        ctx,
        np.repeat(option_v, samples, axis=0),
        np.tile(x_draws - ctx.x, (n_opt, 1)),
        np.log(r) - np.repeat(np.log(r_mean), samples, axis=0),
    )
    flat = _flat_index(rows)
    board_hint = None if hint is None else take_corners(hint, np.repeat(np.arange(n_opt), samples))
    parts = []
    for sl in chunks(params.n_samples, boards_per_call(ctx.circuit)):
        part_seed = DCState(seed.v[sl], seed.vj[sl], seed.converged[sl], seed.iterations[sl])
        sol = solve_batch(ctx.circuit, params.take(sl), part_seed)
        part_hint = (None if board_hint is None
                     else take_corners(board_hint, np.arange(sl.start, sl.stop)))
        parts.append(score_solution(ctx, moved, flat[sl], sol, share[sl], hint=part_hint))
    scores = parts[0] if len(parts) == 1 else Scores.concatenate(parts)
    ok = scores.meets
    out = []
    for o in range(n_opt):
        sl = slice(o * samples, (o + 1) * samples)
        q = scores.q[sl]
        spread, kept = {}, {}
        for i, name in enumerate(ctx.quantities):
            values = q[:, i]
            finite = values[np.isfinite(values)]
            kept[name] = values
            if finite.size:
                p05, p50, p95 = np.percentile(finite, PERCENTILES)
                spread[name] = {
                    "mean": float(np.mean(finite)),
                    "sd": float(np.std(finite, ddof=1)) if finite.size > 1 else 0.0,
                    "p05": float(p05),
                    "p50": float(p50),
                    "p95": float(p95),
                }
        out.append(YieldEstimate(float(np.mean(ok[sl])), samples, spread, kept))
    return out


def _with_new_values(singles: Singles, rows: np.ndarray, jitter: np.ndarray) -> Singles:
    """A single-change table with one entry per (board, slot): the drawn new value."""
    flat = rows.ravel()
    safe = np.where(flat >= 0, flat, 0)
    return Singles(
        column=singles.column[safe],
        action=singles.action[safe],
        new_value=singles.new_value[safe] * (1.0 + jitter.ravel()),
        combined_value=singles.combined_value[safe],
        tolerance=singles.tolerance[safe],
        series=singles.series,
        refs=singles.refs,
        n_resistors=singles.resistor_count,
    )


def _flat_index(rows: np.ndarray) -> np.ndarray:
    """Rows re-pointed at the per-(board, slot) table of :func:`_with_new_values`."""
    idx = np.arange(rows.size, dtype=np.intp).reshape(rows.shape)
    return np.where(rows >= 0, idx, -1)
