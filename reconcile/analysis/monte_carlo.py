"""Design-level Monte Carlo: how a board as drawn comes out when it is built many times.

N boards are drawn from the same distributions the fit uses as priors
(:func:`reconcile.inference.priors.prior_draws`: every part within its tolerance, every
device parameter over its range, the supply within its tolerance, the junction
temperature a little around the board's) and each is solved exactly, DC and small
signal, by the batched engine, in chunks that keep the memory budget
(:mod:`reconcile.engine.budget`). This is propagation of distributions by sampling in
the sense of JCGM 101:2008.

Reported:

* the fraction of boards that meet the ``[spec]`` (the rule of ``solve``'s
  ``meets_spec``: every spec quantity within its limits and every transistor's |VCE| at
  least ``min_vce``; a draw with no DC solution counts as a failure) with its exact
  (Clopper–Pearson) 95 % binomial interval;
* mean, standard deviation and the 5/50/95 percentiles of every spec quantity and every
  node voltage (nodes with no DC path left out);
* for every spec quantity, the parameters that drive its spread most: Spearman rank
  correlation between the drawn parameter and the quantity, over at most
  :data:`DRIVER_SAMPLES` draws (the first ones), largest magnitude first.

Percentiles are exact, so every board's spec quantities and node voltages are kept
(8 bytes each); the draws' count is therefore limited by the memory budget as well as by
:data:`MAX_SAMPLES`.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from reconcile.engine import compile_board, nominal_parameters, solve_batch
from reconcile.engine.batch import bytes_per_board
from reconcile.engine.budget import MIB, THROUGHPUT_ROWS, budget_bytes, chunks, rows_per_chunk
from reconcile.errors import InputError, SolveError
from reconcile.inference.prior_sampler import PriorSampler
from reconcile.inference.priors import build_space
from reconcile.model.board import Board

MAX_SAMPLES = 10_000_000
"""Most draws one run accepts (about 35 s on one core of this machine kind)."""
DRIVER_SAMPLES = 20_000
"""Rank correlations use at most this many draws (the first ones; the sampling error of
a rank correlation is then about 1/√n = 0.007)."""
TOP_DRIVERS = 5
"""How many parameters are listed as drivers of each spec quantity."""
CONFIDENCE = 0.95
"""Confidence level of the yield interval."""
RESULT_SHARE = 0.5
"""Share of the memory budget the kept per-board results may take; the rest is for the
engine's chunks."""
PERCENTILES = (5.0, 50.0, 95.0)


@dataclass(frozen=True)
class DesignSamples:
    """The outcome of ``solve --samples``: ``to_dict()`` is the contract's ``samples``."""

    n: int
    seed: int
    passed: int | None  # boards meeting spec; None when the board has no [spec]
    unsolved: int  # draws with no DC operating point
    quantities: dict[str, dict[str, float]]
    drivers: dict[str, list[tuple[str, float]]]
    driver_samples: int
    chunk_rows: int = field(default=0, compare=False)

    @property
    def yield_fraction(self) -> float | None:
        return None if self.passed is None else self.passed / self.n

    @property
    def yield_interval(self) -> tuple[float, float] | None:
        if self.passed is None:
            return None
        return binomial_interval(self.passed, self.n, CONFIDENCE)

    def to_dict(self) -> dict:
        interval = self.yield_interval
        return {
            "n": self.n,
            "seed": self.seed,
            "yield": self.yield_fraction,
            "yield_interval": None if interval is None else list(interval),
            "unsolved": self.unsolved,
            "quantities": self.quantities,
            "drivers": {
                name: [{"ref": ref, "rank_correlation": rho} for ref, rho in rows]
                for name, rows in self.drivers.items()
            },
            "driver_samples": self.driver_samples,
        }


def binomial_interval(k: int, n: int, confidence: float = CONFIDENCE) -> tuple[float, float]:
    """Exact (Clopper–Pearson) interval of a binomial proportion ``k`` of ``n``."""
    from scipy.special import betaincinv  # the beta distribution's quantile function

    alpha = 1.0 - confidence
    low = 0.0 if k == 0 else float(betaincinv(k, n - k + 1, alpha / 2.0))
    high = 1.0 if k == n else float(betaincinv(k + 1, n - k, 1.0 - alpha / 2.0))
    return low, high


def max_samples(board: Board) -> int:
    """The most draws that fit: :data:`MAX_SAMPLES`, or fewer when the kept results of
    each board would not fit in :data:`RESULT_SHARE` of the memory budget."""
    kept = 8 * len(_quantity_names(board, compile_board(board)))
    by_memory = int(budget_bytes() * RESULT_SHARE // max(kept, 8))
    return min(MAX_SAMPLES, by_memory)


def check_samples(board: Board, n: int) -> None:
    """Refuse a draw count that is not positive or over :func:`max_samples`."""
    if n < 1:
        raise InputError(f"--samples must be at least 1, got {n}", key="--samples")
    if n > MAX_SAMPLES:
        raise InputError(
            f"--samples {n} is over the limit of {MAX_SAMPLES:,} draws per run", key="--samples"
        )
    limit = max_samples(board)
    if n > limit:
        raise InputError(
            f"--samples {n}: the results of at most {limit:,} boards fit in the memory "
            f"budget of {budget_bytes() / MIB:.0f} MiB; give fewer samples or a larger budget",
            key="--samples",
        )


def _quantity_names(board: Board, circuit) -> list[str]:
    floating = set(circuit.dc_floating.tolist())
    nodes = [f"nodes.{n}" for k, n in enumerate(circuit.node_names) if k not in floating]
    return list(board.spec.targets) + nodes


def design_samples(
    board: Board,
    n: int,
    *,
    seed: int = 0,
    on_progress: Callable[[int, int], None] | None = None,
) -> DesignSamples:
    """Draw ``n`` boards from the priors and solve them all (see the module docstring).

    ``on_progress(done, total)`` is called after every chunk.
    """
    check_samples(board, n)
    circuit = compile_board(board)
    space = build_space(circuit)
    rng = np.random.default_rng(seed)
    nominal = solve_batch(circuit, nominal_parameters(circuit, 1), small_signal=False)
    if not bool(nominal.converged[0]):
        where = board.source_path or board.title or "board"
        raise SolveError(f"{where}: no DC operating point found for the board as drawn")
    seed_state = nominal.state
    names = _quantity_names(board, circuit)
    spec_names = list(board.spec.targets)
    has_spec = bool(spec_names) or board.spec.min_vce is not None
    node_cols = [circuit.node_index(name.removeprefix("nodes.")) for name in names[len(spec_names):]]
    values = np.empty((len(names), n))  # one contiguous row per quantity
    n_drive = min(n, DRIVER_SAMPLES)
    drawn = np.empty((n_drive, space.size))
    passed = unsolved = 0
    row_bytes = bytes_per_board(circuit) + 8 * 4 * space.size
    rows = rows_per_chunk(row_bytes, share=1.0 - RESULT_SHARE, at_most=THROUGHPUT_ROWS)
    sampler = PriorSampler(space, min(rows, n))
    done = 0
    for sl in chunks(n, rows):
        x, params = sampler.draw(rng, sl.stop - sl.start)  # views, overwritten next chunk
        sol = solve_batch(circuit, params, seed_state)
        ok = sol.converged
        unsolved += int(np.count_nonzero(~ok))
        block = values[:, sl]
        for j, name in enumerate(spec_names):
            block[j] = _spec_quantity(sol, name)
        for j, col in enumerate(node_cols):
            block[len(spec_names) + j] = sol.node_v[:, col]
        block[:, ~ok] = np.nan
        if has_spec:
            passed += int(np.count_nonzero(_meets(board, sol, block[: len(spec_names)].T)))
        if sl.start < n_drive:
            stop = min(sl.stop, n_drive)
            drawn[sl.start : stop] = x[: stop - sl.start]
        done = sl.stop
        if on_progress is not None:
            on_progress(done, n)
    ranked = np.stack([_ranks(col) for col in drawn.T], axis=1)
    drivers = {
        name: _drivers(ranked, values[j, :n_drive], space.keys)
        for j, name in enumerate(spec_names)
    }
    # last: the summaries may reorder each row in place (sorted for the percentiles)
    quantities = {name: _summary(values[j]) for j, name in enumerate(names)}
    return DesignSamples(
        n=n,
        seed=seed,
        passed=passed if has_spec else None,
        unsolved=unsolved,
        quantities=quantities,
        drivers=drivers,
        driver_samples=n_drive,
        chunk_rows=rows,
    )


def _spec_quantity(sol, name: str) -> np.ndarray:
    try:
        return np.asarray(sol.quantity(name), dtype=float)
    except (KeyError, AttributeError):
        return np.full(sol.n_samples, np.nan)


def _meets(board: Board, sol, spec_values: np.ndarray) -> np.ndarray:
    """Per board: converged, every spec quantity within its limits, |VCE| >= min_vce."""
    ok = sol.converged.copy()
    for j, (_name, target) in enumerate(board.spec.targets.items()):
        v = spec_values[:, j]
        ok &= (v >= target.low) & (v <= target.high)
    if board.spec.min_vce is not None and sol.vce.shape[1]:
        ok &= np.all(sol.circuit.polarity * sol.vce >= board.spec.min_vce, axis=1)
    return ok


def _summary(values: np.ndarray) -> dict[str, float]:
    """Mean, sd and percentiles of the finite entries of ``values`` (contiguous; it may be
    reordered in place: it is sorted without a copy for the percentiles)."""
    finite_mask = np.isfinite(values)
    finite = values if finite_mask.all() else values[finite_mask]
    if not finite.size:
        nan = math.nan
        return {"mean": nan, "sd": nan, "p05": nan, "p50": nan, "p95": nan}
    mean = float(np.mean(finite))
    sd = float(np.std(finite, ddof=1)) if finite.size > 1 else 0.0
    # after the sums (their rounding follows the order): sorted in place, numpy's
    # vectorised sort costs less than the selection would on the unsorted row, and the
    # percentiles of a sorted row are the same order statistics
    finite.sort()
    p05, p50, p95 = np.percentile(finite, PERCENTILES, overwrite_input=True)
    return {
        "mean": mean,
        "sd": sd,
        "p05": float(p05),
        "p50": float(p50),
        "p95": float(p95),
    }


def _drivers(ranked: np.ndarray, y: np.ndarray, keys: list[str]) -> list[tuple[str, float]]:
    """Spearman rank correlation of each drawn parameter (``ranked``: the ranks of the
    draws, column by column) with ``y``, largest magnitude first.

    Ranks are ordinal (ties, which only draws clipped at a hard bound can have, are
    ranked in the sort's order); boards with no solution are left out."""
    keep = np.isfinite(y)
    if np.count_nonzero(keep) < 3:
        return []
    ry = _ranks(y[keep])
    rx = ranked[keep] if np.all(keep) else np.stack([_ranks(c) for c in ranked[keep].T], axis=1)
    ry = (ry - ry.mean()) / np.linalg.norm(ry - ry.mean())
    rx = rx - rx.mean(axis=0)
    norm = np.linalg.norm(rx, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = (ry @ rx) / norm
    order = np.argsort(-np.abs(np.nan_to_num(rho)))
    return [(keys[k], float(rho[k])) for k in order[:TOP_DRIVERS] if np.isfinite(rho[k])]


def _ranks(v: np.ndarray) -> np.ndarray:
    out = np.empty(v.shape[0])
    out[np.argsort(v)] = np.arange(v.shape[0], dtype=float)
    return out
