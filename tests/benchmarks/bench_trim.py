"""Benchmark of ``trim``: exhaustive single and pair changes over a four-resistor stage in
E96, with the Monte Carlo yield of the top ten options.

    python tests/benchmarks/bench_trim.py

prints one JSON object. :func:`run` returns the same dict for the project-wide runner
(``python -m tests.benchmarks trim``).

The stage is ``sample_data/line_receiver_cb.toml`` drawn with R2 = 56k (it then misses
gain and input resistance, so single changes are not enough to fill the list and every
pair is solved), with the two bleed resistors marked ``trim = false``: R1, R2, RC and RE,
1 % parts, so E96. Design mode (no readings), default settings: top ten options, 10 000
Monte Carlo samples each.

Figures:

- ``trim_s``: wall time of the whole :func:`reconcile.trim.trim` call, median of 3 after
  one warm-up, on one core (numpy's BLAS threads limited to one);
- ``loop_s_per_board`` and ``loop_s_estimated``: the same candidates one engine call at
  a time: :func:`reconcile.engine.solve_batch` on one board per call for a random subset
  of 300 of the candidates (warm-started from the built board, as the batched search is),
  timed and extrapolated to every board trim solved (candidates and Monte Carlo draws);
- ``ratio``: ``loop_s_estimated / trim_s``.

Target (reported, never asserted): ``trim_s`` under 2 s.
"""

from __future__ import annotations

import json
import os
import statistics
import time
from pathlib import Path

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import dataclasses  # noqa: E402

import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
BOARD_PATH = ROOT / "sample_data" / "line_receiver_cb.toml"
TARGET_S = 2.0
LOOP_SUBSET = 300


def stage():
    """The four-resistor E96 stage (see the module docstring)."""
    from reconcile.model.board_loader import load_board

    board = load_board(BOARD_PATH).with_resistor_ohms("R2", 56e3)
    parts = dict(board.resistors)
    for ref in ("RB_IN", "RB_OUT"):
        parts[ref] = dataclasses.replace(parts[ref], trim=False)
    return dataclasses.replace(board, resistors=parts)


def _loop_per_board(board, seed: int = 7) -> tuple[float, int]:
    """Seconds per candidate when each is its own engine call (subset, extrapolated)."""
    from reconcile.trim import search as ts
    from reconcile.engine import compile_board, solve_batch
    from reconcile.inference.priors import build_space
    from reconcile.trim.candidates import single_candidates
    from reconcile.trim.combos import all_pairs

    circuit = compile_board(board)
    space = build_space(circuit)
    ctx = ts.build_context(
        board, circuit, space, space.prior_mean, np.diag(space.prior_sd**2), "design", 2.0
    )
    singles = single_candidates(board, circuit.resistor_refs, ctx.built_ohms)
    one = np.full((singles.size, 2), -1, dtype=np.intp)
    one[:, 0] = np.arange(singles.size)
    combos = np.concatenate([one, all_pairs(singles, 2)])
    pick = np.random.default_rng(seed).choice(combos.shape[0], LOOP_SUBSET, replace=False)
    rows = combos[pick]
    r, _ = ts.changed_resistors(
        ctx, singles, rows, np.repeat(ctx.base_params.resistor_ohms, rows.shape[0], axis=0)
    )
    params = [ctx.base_params.with_values(resistor_ohms=r[i : i + 1]) for i in range(rows.shape[0])]
    start = time.perf_counter()
    for p in params:
        solve_batch(circuit, p, ctx.base.state)
    return (time.perf_counter() - start) / len(params), int(combos.shape[0])


def run() -> dict:
    from reconcile.trim.rework import trim

    board = stage()
    trim(board, samples=1000)  # warm-up
    times, result = [], None
    for _ in range(3):
        start = time.perf_counter()
        result = trim(board)
        times.append(time.perf_counter() - start)
    trim_s = statistics.median(times)
    per_board, n_candidates = _loop_per_board(board)
    boards = result.evaluated + result.samples * (len(result.options) + 1)
    loop_s = per_board * boards
    best = result.best
    return {
        "stage": "line_receiver_cb, R2 = 56k; R1 R2 RC RE trimmable (E96)",
        "search": result.search,
        "searched_changes": result.searched_changes,
        "candidates_evaluated": result.evaluated,
        "candidates_exhaustive": n_candidates,
        "options_with_yield": len(result.options),
        "samples_per_option": result.samples,
        "boards_solved": boards,
        "trim_s": round(trim_s, 3),
        "trim_s_runs": [round(t, 3) for t in times],
        "target_s": TARGET_S,
        "loop_subset": LOOP_SUBSET,
        "loop_s_per_board": per_board,
        "loop_s_estimated": round(loop_s, 1),
        "ratio": round(loop_s / trim_s, 1),
        "best": [dataclasses.asdict(c) for c in best.changes] if best else None,
        "best_yield": best.yield_ if best else None,
    }


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
