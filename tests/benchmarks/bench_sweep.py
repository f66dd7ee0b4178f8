"""Benchmark of ``solve --sweep``: a 200-point sweep with root-found corners and each
capacitor's share of the low corner, in-process, on the sample boards.

    python tests/benchmarks/bench_sweep.py [REPEATS]

prints one JSON object: per board, the median of REPEATS runs (after one warm-up) of the
whole sweep (response at 200 frequencies, mid-band gain, both corners, shares), and of
the response alone; plus the ratio of the sweep to one plain DC + small-signal solve of
the same board, measured side by side. Target, reported and not asserted: ≤ 50 ms.
"""

from __future__ import annotations

import json
import statistics
import sys
import time
from pathlib import Path

import numpy as np

from reconcile.engine.solution import solve
from reconcile.model.board_loader import load_board

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
BOARDS = ("line_receiver_cb", "preamp_ce", "two_stage_npn_pnp")
TARGET_S = 0.050
POINTS = 200


def _median(fn, repeats: int) -> float:
    fn()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def run(repeats: int = 15) -> dict:
    freqs = np.logspace(0, 7, POINTS)
    out: dict = {"points": POINTS, "target_s": TARGET_S, "boards": {}}
    for name in BOARDS:
        board = load_board(SAMPLES / f"{name}.toml")
        sol = solve(board)
        t_sweep = _median(lambda: sol.sweep(freqs), repeats)  # noqa: B023
        t_resp = _median(lambda: sol.batch.linear.response(freqs), repeats)  # noqa: B023
        t_solve = _median(lambda: solve(board), repeats)  # noqa: B023
        out["boards"][name] = {
            "sweep_s": round(t_sweep, 5),
            "response_only_s": round(t_resp, 5),
            "one_solve_s": round(t_solve, 5),
            "sweep_over_one_solve": round(t_sweep / t_solve, 2),
            "meets_target": t_sweep <= TARGET_S,
        }
    return out


if __name__ == "__main__":
    print(json.dumps(run(int(sys.argv[1]) if len(sys.argv) > 1 else 15), indent=2))
