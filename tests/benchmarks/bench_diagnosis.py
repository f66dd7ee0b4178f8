"""Benchmark of ``diagnose`` on a one-transistor board with 8 parts and 8 readings.

    python tests/benchmarks/bench_diagnosis.py [REPEATS]

prints one JSON object of timings (seconds). :func:`run` returns the same dict for the
project-wide runner (``python -m tests.benchmarks diagnosis``).

The board (:data:`BENCH_BOARD_TOML`, invented) is a common-emitter stage: R1, R2, RC,
RE, RL, CE, C_OUT and Q1, so 21 hypotheses (5 resistors × 3, 2 capacitors × 2, 1
transistor, ``none``). The readings (:data:`BENCH_PLAN`) are four node voltages, the
supply current, gain, input and output resistance, simulated with noise from the board
with RE loaded as 100 Ω instead of 1 kΩ (a decade slip). Figures:

- ``cold_s``: the first diagnosis in a fresh process, imports of the modules the
  diagnosis loads lazily (scipy.special) included;
- ``median_s``, ``min_s``, ``max_s``: over ``repeats`` diagnoses after that one;
- ``target_s`` (2 s, on one core) and ``meets_target`` (median below it).
"""

from __future__ import annotations

import json
import statistics
import sys
import time
from typing import Any

import numpy as np

BENCH_BOARD_TOML = """\
title = "One-transistor common-emitter stage, eight parts (invented example)"

[supplies.VCC]
node = "vcc"
volts = "12"
tolerance = "1%"

[resistors.R1]
nodes = ["vcc", "b"]
ohms = "47k"

[resistors.R2]
nodes = ["b", "gnd"]
ohms = "10k"

[resistors.RC]
nodes = ["vcc", "c"]
ohms = "4k7"

[resistors.RE]
nodes = ["e", "gnd"]
ohms = "1k"

[resistors.RL]
nodes = ["out", "gnd"]
ohms = "47k"

[capacitors.CE]
nodes = ["e", "gnd"]
farads = "47u"

[capacitors.C_OUT]
nodes = ["c", "out"]
farads = "1u"

[transistors.Q1]
polarity = "npn"
c = "c"
b = "b"
e = "e"
device = "lab-npn"

[devices.lab-npn]
IS = { value = "8f", low = "2f", high = "40f" }
beta = { value = 180, low = 90, high = 330 }
VA = "80"

[signal]
input = "b"
source_ohms = "600"
output = "out"
frequency = "1k"
"""

BENCH_PLAN: list[tuple[str, str]] = [
    ("voltage", "vcc"),
    ("voltage", "b"),
    ("voltage", "c"),
    ("voltage", "e"),
    ("current", "VCC"),
    ("gain", ""),
    ("input_resistance", ""),
    ("output_resistance", ""),
]

TARGET_S = 2.0


def bench_board():
    """The benchmark board as a :class:`reconcile.board.Board`."""
    from reconcile.model.board_loader import board_from_text

    return board_from_text(BENCH_BOARD_TOML, "bench_diagnosis.toml")


def run(repeats: int = 7) -> dict[str, Any]:
    """Time ``diagnose`` on the benchmark board.

    Returns
    -------
    dict
        ``cold_s``, ``median_s``, ``min_s``, ``max_s`` (seconds), ``repeats``,
        ``hypotheses``, ``readings``, ``top`` (label and probability of the top
        hypothesis), ``target_s`` and ``meets_target``.
    """
    from reconcile.diagnosis.diagnose import diagnose
    from reconcile.inference.simulate import simulate_readings

    board = bench_board()
    truth = board.with_resistor_ohms("RE", 100.0)
    readings = simulate_readings(truth, BENCH_PLAN, rng=np.random.default_rng(8))
    start = time.perf_counter()
    diag = diagnose(board, readings)
    cold = time.perf_counter() - start
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        diag = diagnose(board, readings)
        times.append(time.perf_counter() - start)
    median = statistics.median(times)
    return {
        "cold_s": round(cold, 4),
        "median_s": round(median, 4),
        "min_s": round(min(times), 4),
        "max_s": round(max(times), 4),
        "repeats": repeats,
        "hypotheses": len(diag.hypotheses),
        "readings": diag.n_readings,
        "top": {"label": diag.top.label, "probability": round(diag.top.probability, 4)},
        "target_s": TARGET_S,
        "meets_target": bool(median < TARGET_S),
    }


if __name__ == "__main__":
    print(json.dumps(run(int(sys.argv[1]) if len(sys.argv) > 1 else 7), indent=2))
