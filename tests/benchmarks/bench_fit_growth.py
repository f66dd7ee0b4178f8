"""Benchmark of the fit's cost against board size, with its honest baseline side by side.

    python tests/benchmarks/bench_fit_growth.py

prints one JSON object; :func:`run` returns the same dict for the project-wide runner
(``python -m tests.benchmarks fit_growth``). The boards are the invented cascades of 1,
2, 4, 8 and 16 common-emitter stages of the engine benchmark
(:func:`tests.benchmarks.bench_engine.stages_board_toml`); each is read as a careful
engineer reads it first (every node voltage with the voltmeter attached, the supply
current and the input resistance, :func:`reconcile.inference.simulate.full_plan`
without the gain, which of a many-stage cascade is beyond any meter), simulated with
noise from a board whose first collector resistor is off its nominal, and fitted
in-process with :func:`reconcile.inference.fitting.fit_board`.

Figures, all measured in this one run one after another, so ratios compare methods
under the same machine load:

- ``analytic``: the fit as shipped (the measurement model's analytic DC Jacobian, the
  small-signal rows by forward differences of the board alone): wall and CPU seconds,
  best of 2 (one run at 16 stages), per cascade, and the least-squares growth exponent
  of CPU time against part count over 1–16 stages;
- ``baseline``: the same fits with the Jacobian as the straightforward way takes it
  (and as this project did before): a forward difference of every prediction for every
  parameter, one batched engine call of (P + 1)·(1 + K) boards, K the probe positions;
  up to 8 stages (at 16 it takes about a minute), its exponent over 1–8 stages, and the
  speed-up per cascade. Both must give the same fit (``same_fit``: χ² within 1e-6
  relative).

CPU seconds (``time.process_time``, BLAS on one thread inside the fit) move less with
the load of a shared machine than wall seconds. Targets (reported, never asserted):
8 stages ≤ 0.3 s, 16 stages ≤ 2 s, growth exponent ≤ 2.0.
"""

from __future__ import annotations

import json
import os
import time
from unittest import mock

import numpy as np

from reconcile.inference.fitting import fit_board
from reconcile.inference.measure import MeasurementModel
from reconcile.inference.simulate import full_plan, simulate_readings
from reconcile.model.board_loader import board_from_text
from tests.benchmarks.bench_engine import stages_board_toml

STAGES = (1, 2, 4, 8, 16)
BASELINE_STAGES = (1, 2, 4, 8)
TARGETS_S = {8: 0.3, 16: 2.0}
TARGET_EXPONENT = 2.0


def forward_difference_jacobian(model: MeasurementModel, x: np.ndarray, *,
                                step: float = 1e-6) -> tuple[np.ndarray, np.ndarray]:
    """The baseline: every prediction at x and at x + h·e_j for every parameter j, in
    one batched call of the model (every probe board of every vector)."""
    x = np.asarray(x, dtype=float).ravel()
    p = x.size
    h = np.full(p, step)
    for j, fp in enumerate(model.space.parameters):
        if fp.kind == "temperature":
            h[j] = 1e-4
        elif fp.kind == "supply":
            h[j] = step * max(1.0, abs(x[j]))
    xs = np.repeat(x[None, :], p + 1, axis=0)
    xs[1:][np.arange(p), np.arange(p)] += h
    pred = model.predict(xs)
    return pred[0], ((pred[1:] - pred[0][None, :]) / h[:, None]).T


def cascade(stages: int):
    """The cascade board and its simulated readings (seeded)."""
    board = board_from_text(stages_board_toml(stages))
    truth = board.with_resistor_ohms("RC1", 7000.0)
    plan = [key for key in full_plan(board) if key[0] != "gain"]
    readings = simulate_readings(truth, plan, rng=np.random.default_rng(stages))
    return board, readings


def _timed_fit(board, readings, repeats: int) -> tuple[float, float, object]:
    best_wall = best_cpu = float("inf")
    fit = None
    for _ in range(repeats):
        wall, cpu = time.perf_counter(), time.process_time()
        fit = fit_board(board, readings)
        best_wall = min(best_wall, time.perf_counter() - wall)
        best_cpu = min(best_cpu, time.process_time() - cpu)
    return best_wall, best_cpu, fit


def _exponent(rows: list[dict], key: str) -> float:
    logp = np.log([r["parts"] for r in rows])
    logt = np.log([r[key] for r in rows])
    return float(np.polyfit(logp, logt, 1)[0])


def run() -> dict:
    analytic, baseline = [], []
    for stages in STAGES:
        board, readings = cascade(stages)
        if stages <= 4:
            fit_board(board, readings)  # warm-up (imports, caches)
        wall, cpu, fit = _timed_fit(board, readings, 2 if stages < 16 else 1)
        parts = len(board.resistors) + len(board.capacitors) + len(board.transistors)
        row = {"stages": stages, "parts": parts, "parameters": fit.space.size,
               "readings": len(readings), "wall_s": round(wall, 4), "cpu_s": round(cpu, 4),
               "chi_square": fit.chi_square, "success": fit.success}
        if stages in TARGETS_S:
            row["target_s"] = TARGETS_S[stages]
            row["meets_target_cpu"] = cpu <= TARGETS_S[stages]
        analytic.append(row)
        if stages in BASELINE_STAGES:
            with mock.patch.object(MeasurementModel, "jacobian", forward_difference_jacobian):
                b_wall, b_cpu, b_fit = _timed_fit(board, readings, 1)
            baseline.append({
                "stages": stages, "parts": parts, "wall_s": round(b_wall, 4),
                "cpu_s": round(b_cpu, 4), "speedup_cpu": round(b_cpu / cpu, 2),
                "same_fit": bool(abs(b_fit.chi_square - fit.chi_square)
                                 <= 1e-6 * max(1.0, fit.chi_square)),
            })
    exponent = _exponent(analytic, "cpu_s")
    return {
        "load_average_1min": round(os.getloadavg()[0], 2),
        "analytic": analytic,
        "analytic_exponent_cpu": round(exponent, 3),
        "analytic_exponent_cpu_1_to_8": round(_exponent(analytic[:4], "cpu_s"), 3),
        "target_exponent": TARGET_EXPONENT,
        "meets_exponent": exponent <= TARGET_EXPONENT,
        "baseline": baseline,
        "baseline_exponent_cpu_1_to_8": round(_exponent(baseline, "cpu_s"), 3),
    }


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
