"""The project's single-fault sweep read with sharp instruments: does the diagnosis keep
finding the injected fault when the readings are a hundred times finer?

    python tests/benchmarks/bench_sharp_readings.py
    python -m tests.benchmarks sharp_readings

prints one JSON object: top-1 and top-3 over the same 50 visible injected faults as
``tests/test_diagnosis.py::test_injected_single_faults_found`` (same boards, seeds and
faults, visibility judged at the default uncertainties), the CPU seconds per diagnosis,
and each miss. Target: top-1 ≥ 90 %. Not a unit test: the sweep takes minutes of CPU,
more than the whole suite's budget allows.

Sharp readings are what a 6½-digit bench meter and a careful gain measurement give
(each a limit read as rectangular, JCGM 100:2008 4.3.7):

- DC volts ±(0.0035 % of reading + 0.0005 % of range), DC current ±(0.05 % + 0.005 %),
  resistance ±(0.01 % + 0.001 %), on ranges of decades: a typical 6½-digit DMM's one-year
  specification (common practice, from memory);
- gain to 0.1 % of reading with an absolute floor of 1e-3 (an AC meter's 10 µV noise
  floor over a 10 mV test signal, the project's own gain default floor), one standard
  uncertainty;
- everything else (input resistance, capacitance) at its default.
"""

from __future__ import annotations

import json
import math
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE.parent) not in sys.path:  # tests/, for the sweep's helpers
    sys.path.insert(0, str(HERE.parent))

RECT = math.sqrt(3.0)
GAIN_RELATIVE = 1e-3
GAIN_FLOOR = 1e-3


def _rules() -> dict:
    from reconcile.model.quantities import UncertaintyRule

    decades = (0.1, 1.0, 10.0, 100.0, 1000.0)
    # counts are of the registry's 20 000-count range; 0.0005 % of range = 0.1 count
    return {
        "voltage": UncertaintyRule(3.5e-5, counts=0.1, ranges=decades, divisor=RECT),
        "current": UncertaintyRule(5e-4, counts=1.0, ranges=(1e-4, 1e-3, 1e-2, 0.1, 1.0, 3.0),
                                   divisor=RECT),
        "resistance": UncertaintyRule(1e-4, counts=0.2, ranges=(100.0, 1e3, 1e4, 1e5, 1e6, 1e7),
                                      divisor=RECT),
    }


def sharp_uncertainty(r) -> float:
    """The sharp standard uncertainty of reading ``r`` (the module docstring)."""
    from reconcile.data.readings import default_uncertainty

    rule = _rules().get(r.quantity)
    if rule is not None:
        u = rule.standard(r.value)
    elif r.quantity == "gain":
        u = math.hypot(GAIN_RELATIVE * r.value, GAIN_FLOOR)
    else:
        u = default_uncertainty(r) if r.value != 0 else 1e-6
    return max(u, 1e-9)


def sharp_readings(board, temperature: float, plan, rng) -> list:
    """Readings of ``board`` with the sharp uncertainties and that much seeded Gaussian
    noise, the fault sweep's way (``tests/test_diagnosis.py``)."""
    import test_diagnosis as sweep

    return sweep._readings(board, temperature, plan, rng, uncertainty=sharp_uncertainty)


def run() -> dict[str, Any]:
    import test_diagnosis as sweep

    from reconcile.diagnosis.diagnose import diagnose

    ranks, seconds, misses = [], [], []
    for name, n_cases, seed in zip(sweep.BOARDS, sweep.CASES_PER_BOARD, range(100, 104),
                                   strict=True):
        board, plan = sweep._board(name)
        cases = sweep._visible_cases(name, seed)
        pick = np.random.default_rng(seed).choice(len(cases), size=n_cases, replace=False)
        for k in sorted(pick):
            ref, kind, _factor, truth, faulty, rng = cases[k]
            readings = sharp_readings(faulty, truth.temperature_k, plan, rng)
            start = time.process_time()
            diag = diagnose(board, readings)
            seconds.append(time.process_time() - start)
            rank = sweep._rank(diag, ref, kind)
            ranks.append(rank)
            if rank != 1:
                misses.append({"board": name, "injected": f"{ref} {kind}", "rank": rank,
                               "top": diag.top.label})
    n = len(ranks)
    return {
        "cases": n,
        "top1": round(sum(r == 1 for r in ranks) / n, 3),
        "top3": round(sum(r <= 3 for r in ranks) / n, 3),
        "targets": {"top1": 0.90},
        "cpu_seconds_per_diagnosis": {"median": round(float(np.median(seconds)), 2),
                                      "max": round(max(seconds), 2),
                                      "total": round(sum(seconds), 1)},
        "misses": misses,
    }


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
