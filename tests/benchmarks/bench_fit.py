"""Benchmark of the fit and the steps that follow it, on a one-transistor board.

    python tests/benchmarks/bench_fit.py [REPEATS]

prints one JSON object of timings (seconds): the median of REPEATS runs of one fit
(the invented line receiver, 8 simulated readings), of its error budget and of the
next-reading suggestion, each after imports and one warm-up run. :func:`run` returns the
same dict for a project-wide benchmark runner. Target, reported and not asserted: a fit
within 20 ms.
"""

from __future__ import annotations

import json
import statistics
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np

from reconcile.model.board_loader import load_board
from reconcile.inference.fitting import fit_board
from reconcile.analysis.error_budget import error_budget
from reconcile.analysis.next_reading import suggest_next
from reconcile.inference.simulate import full_plan, simulate_readings

BOARD = Path(__file__).resolve().parents[2] / "sample_data" / "line_receiver_cb.toml"
FIT_TARGET_S = 0.020


def _median_time(fn: Any, repeats: int) -> tuple[float, Any]:
    result = fn()  # warm-up
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times), result


def run(repeats: int = 15) -> dict[str, Any]:
    """Time fit, error budget and next reading.

    Returns
    -------
    dict
        ``fit_s``, ``error_budget_s``, ``next_reading_s`` (medians, seconds), the fit's
        ``evaluations`` (model evaluations, Jacobian columns counted), ``readings``,
        ``parameters``, ``repeats``, ``fit_target_s`` and ``fit_meets_target``.
    """
    board = load_board(BOARD)
    plan = full_plan(board) + [("resistance", "RE")]
    truth = board.with_resistor_ohms("RC", 1010.0).with_resistor_ohms("R2", 61.5e3)
    readings = simulate_readings(truth, plan, rng=np.random.default_rng(3))
    fit_s, fit = _median_time(lambda: fit_board(board, readings), repeats)
    if not fit.success:
        raise RuntimeError(f"benchmark fit did not converge: {fit.message}")
    budget_s, _ = _median_time(lambda: error_budget(fit), repeats)
    next_s, _ = _median_time(lambda: suggest_next(fit), repeats)
    return {
        "board": BOARD.name,
        "readings": len(readings),
        "parameters": fit.space.size,
        "evaluations": fit.evaluations,
        "repeats": repeats,
        "fit_s": round(fit_s, 5),
        "error_budget_s": round(budget_s, 5),
        "next_reading_s": round(next_s, 5),
        "fit_target_s": FIT_TARGET_S,
        "fit_meets_target": fit_s <= FIT_TARGET_S,
    }


if __name__ == "__main__":
    count = int(sys.argv[1]) if len(sys.argv) > 1 else 15
    print(json.dumps(run(count)))
