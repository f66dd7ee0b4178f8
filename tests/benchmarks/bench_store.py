"""Benchmark of the SQLite session store: storing readings one commit each, then reading
a large session back.

    python tests/benchmarks/bench_store.py [N]

prints one JSON object of timings (seconds). :func:`run` returns the same dict for a
project-wide benchmark runner.
"""

from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from reconcile.model.board_loader import board_from_text
from reconcile.data.readings import Reading
from reconcile.store.repository import open_store

BOARD_TOML = """\
title = "Benchmark stage (invented)"

[supplies.VCC]
node = "vcc"
volts = "9"

[resistors.R1]
nodes = ["vcc", "b"]
ohms = "47k"

[resistors.R2]
nodes = ["b", "gnd"]
ohms = "10k"
"""


def _reading(i: int) -> Reading:
    value = 1.0 + i * 1e-4
    return Reading(quantity="voltage", at="b", value=value, unit="V", uncertainty=None,
                   note=f"n{i}", raw=("voltage", "b", repr(value), "V", "", "", f"n{i}", ""))


def _timed(fn: Any) -> tuple[float, Any]:
    start = time.perf_counter()
    result = fn()
    return time.perf_counter() - start, result


def run(n_readings: int = 10_000) -> dict[str, Any]:
    """Time the store on a fresh SQLite file in a temporary folder.

    Returns
    -------
    dict
        ``add_s`` (all readings, one committed transaction each), ``add_per_reading_ms``,
        ``list_s``, ``show_s``, ``export_s``, ``inputs_s`` (board and readings for
        analysis), ``open_s`` (opening an existing store), all for a session of
        ``n_readings`` readings; plus the counts and the store's file size.
    """
    board = board_from_text(BOARD_TOML, "bench.toml")
    readings = [_reading(i) for i in range(n_readings)]
    with tempfile.TemporaryDirectory(prefix="reconcile-bench-") as folder:
        path = Path(folder) / "sessions.sqlite"
        with open_store(path) as store:
            session = store.create_session(board, serial="BENCH")
            add_s, ids = _timed(lambda: store.add_readings(session, readings))
        open_s, store = _timed(lambda: open_store(path))
        with store:
            list_s, listed = _timed(store.list_sessions)
            show_s, view = _timed(lambda: store.show_session(session))
            export_s, text = _timed(lambda: store.export_csv(session))
            inputs_s, (_board, back) = _timed(lambda: store.session_inputs(session))
        if not (len(ids) == len(view.readings) == len(back) == n_readings
                and listed[0].n_readings == n_readings
                and text.count("\n") == n_readings + 1):
            raise RuntimeError("benchmark store lost readings")
        size = sum(p.stat().st_size for p in Path(folder).iterdir())
    return {
        "backend": "sqlite",
        "readings": n_readings,
        "add_s": round(add_s, 4),
        "add_per_reading_ms": round(add_s / n_readings * 1e3, 4),
        "open_s": round(open_s, 4),
        "list_s": round(list_s, 4),
        "show_s": round(show_s, 4),
        "export_s": round(export_s, 4),
        "inputs_s": round(inputs_s, 4),
        "store_bytes": size,
    }


if __name__ == "__main__":
    count = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    print(json.dumps(run(count)))
