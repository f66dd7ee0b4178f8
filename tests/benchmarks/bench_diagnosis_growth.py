"""Benchmark of ``diagnose`` against board size: time and peak memory.

    python tests/benchmarks/bench_diagnosis_growth.py [STAGES ...]

prints one JSON object; :func:`run` returns the same dict for the project-wide runner
(``python -m tests.benchmarks diagnosis_growth``). The boards are the invented cascades
of 1, 2, 4 and 8 common-emitter stages of the engine benchmark
(:func:`tests.benchmarks.bench_engine.stages_board_toml`), read as the fit growth
benchmark reads them (every node voltage with the voltmeter attached, the supply current
and the input resistance: :func:`reconcile.inference.simulate.full_plan` without the
gain), simulated with noise from a board whose first stage's emitter resistor RE2_1 is
loaded ten times too large (a decade slip), and diagnosed in-process with the defaults.

Each cascade runs in a fresh interpreter, so its peak resident memory (``ru_maxrss`` of
that process: imports, the board, every hypothesis fit) is its own. Figures per cascade:
``wall_s`` and ``cpu_s`` of the diagnosis alone (imports and the board excluded), the
hypotheses and how many of their fits ended ``bounded`` or at the iteration limit, the
leading hypothesis and its probability, ``peak_mib``. Targets (reported, never
asserted): 8 stages ≤ 10 s and ≤ 1.5 GiB.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

STAGES = (1, 2, 4, 8)
TARGET_S = 10.0
TARGET_PEAK_MIB = 1536
ROOT = Path(__file__).resolve().parents[2]

_CHILD = """
import json, resource, sys, time
import numpy as np
from reconcile.diagnosis.diagnose import diagnose
from reconcile.inference.simulate import full_plan, simulate_readings
from reconcile.model.board_loader import board_from_text
from tests.benchmarks.bench_engine import stages_board_toml
k = int(sys.argv[1])
board = board_from_text(stages_board_toml(k))
truth = board.with_resistor_ohms("RE2_1", 10 * board.resistors["RE2_1"].ohms)
plan = [key for key in full_plan(board) if key[0] != "gain"]
readings = simulate_readings(truth, plan, rng=np.random.default_rng(k))
wall, cpu = time.perf_counter(), time.process_time()
d = diagnose(board, readings)
wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
status = [h.fit.status for h in d.hypotheses]
print(json.dumps({
    "stages": k, "parts": len(board.resistors) + len(board.capacitors) + len(board.transistors),
    "readings": len(readings), "hypotheses": len(d.hypotheses),
    "bounded": status.count("bounded"), "iteration_limit": status.count("iteration-limit"),
    "wall_s": round(wall, 3), "cpu_s": round(cpu, 3),
    "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss // 1024,
    "top": {"label": d.top.label, "probability": round(d.top.probability, 4)},
}))
"""


def one(stages: int) -> dict:
    """The figures of one cascade, measured in a fresh interpreter."""
    done = subprocess.run([sys.executable, "-c", _CHILD, str(stages)], capture_output=True,
                          text=True, cwd=ROOT, timeout=3600, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def run(stages: tuple[int, ...] = STAGES) -> dict:
    rows = [one(k) for k in stages]
    for row in rows:
        if row["stages"] == 8:
            row["meets_target"] = bool(row["wall_s"] <= TARGET_S
                                       and row["peak_mib"] <= TARGET_PEAK_MIB)
    return {"cascades": rows, "target_8_stages_s": TARGET_S,
            "target_8_stages_peak_mib": TARGET_PEAK_MIB}


if __name__ == "__main__":
    wanted = tuple(int(a) for a in sys.argv[1:]) or STAGES
    print(json.dumps(run(wanted), indent=2))
