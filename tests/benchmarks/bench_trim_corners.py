"""Trim with a corner limit in the spec: what the corners cost, measured in one run.

* ``corners_near`` (trim's corner search around known corners) against ``find_corners``
  (the full search) on the same 5 000 boards: the sample CE preamp with every capacitor
  drawn within ±20 % of its value (how far a draw of the yield or a small rework moves
  it), in CPU seconds, with the largest relative difference of the corners found;
* ``trim`` of an invented CE stage (four trimmable 1 % resistors, a 10 % input
  capacitor that misses the low-corner limit) with and without the ``low_corner``
  limit, in CPU seconds, and their ratio.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"
N_BOARDS = 5_000


def _corner_search() -> dict:
    from reconcile.engine import compile_board, nominal_parameters, solve_batch
    from reconcile.engine.sweep import Corners, corners_near, find_corners
    from reconcile.model.board_loader import load_board

    circuit = compile_board(load_board(SAMPLES / "preamp_ce.toml"))
    built = find_corners(solve_batch(circuit, nominal_parameters(circuit, 1)).linear)
    params = nominal_parameters(circuit, N_BOARDS)
    rng = np.random.default_rng(3)
    c = params.capacitor_farads * rng.uniform(0.8, 1.2, size=params.capacitor_farads.shape)
    linear = solve_batch(circuit, params.with_values(capacitor_farads=c)).linear
    hint = Corners(*(np.repeat(getattr(built, k), N_BOARDS) for k in
                     ("midband_gain", "midband_frequency", "low_corner", "high_corner")))
    start = time.process_time()
    full = find_corners(linear)
    full_s = time.process_time() - start
    start = time.process_time()
    near = corners_near(linear, hint)
    near_s = time.process_time() - start
    diff = float(np.nanmax(np.abs(near.low_corner / full.low_corner - 1.0)))
    return {"boards": N_BOARDS, "find_corners_cpu_s": round(full_s, 3),
            "corners_near_cpu_s": round(near_s, 3), "ratio": round(full_s / near_s, 1),
            "largest_relative_difference": diff}


def _stage(spec: dict) -> str:
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from boards import capacitor, resistor, supply, table, title

    parts = (supply("VCC", "vcc", 12)
             + resistor("R1", "vcc", "b", "47k", tolerance="1%")
             + resistor("R2", "b", "gnd", "10k", tolerance="1%")
             + resistor("RC", "vcc", "c", "4k7", tolerance="1%")
             + resistor("RE", "e", "gnd", "1k", tolerance="1%")
             + capacitor("C_IN", "in", "b", "100n", tolerance="10%")
             + table("transistors.Q1", polarity="npn", c="c", b="b", e="e", device="dev")
             + table("devices.dev", IS="10f", beta=200, VA=100))
    return (title("invented coupled CE stage (benchmark)") + parts
            + table("signal", input="in", output="c", source_ohms=50, frequency="10k")
            + table("spec", **spec))


def _trim_cost() -> dict:
    from reconcile.model.board_loader import board_from_text
    from reconcile.trim.rework import trim

    gain = {"gain": {"value": 4.2, "tolerance": "3%"}}
    out = {}
    for key, spec in (("gain_only", gain), ("gain_and_low_corner", {**gain, "low_corner":
                                                                     {"max": 60}})):
        board = board_from_text(_stage(spec))
        start = time.process_time()
        result = trim(board)
        out[key] = {"cpu_s": round(time.process_time() - start, 3),
                    "evaluated": result.evaluated,
                    "best": [f"{c.ref} {c.action} {c.value:g}" for c in result.best.changes]}
    out["ratio"] = round(out["gain_and_low_corner"]["cpu_s"] / out["gain_only"]["cpu_s"], 2)
    return out


def run() -> dict:
    return {"corner_search": _corner_search(), "trim": _trim_cost()}
