"""Run every benchmark of the project and print one JSON object of all their figures.

    python -m tests.benchmarks            # all
    python -m tests.benchmarks engine fit # some

Each ``bench_*.py`` module here exposes ``run() -> dict``. Figures are measured in this
one run on this machine; ratios compare methods measured side by side.
"""

from __future__ import annotations

import importlib
import json
import pkgutil
import platform
import sys
import time
from pathlib import Path


def main(argv: list[str]) -> int:
    here = Path(__file__).resolve().parent
    names = sorted(m.name for m in pkgutil.iter_modules([str(here)]) if m.name.startswith("bench_"))
    wanted = [f"bench_{a}" if not a.startswith("bench_") else a for a in argv]
    if wanted:
        names = [n for n in names if n in wanted]
    out: dict = {
        "machine": {"python": platform.python_version(), "platform": platform.platform()},
        "benchmarks": {},
    }
    for name in names:
        start = time.perf_counter()
        module = importlib.import_module(f"tests.benchmarks.{name}")
        try:
            figures = module.run()
        except Exception as err:  # a broken benchmark must not hide the others
            figures = {"error": f"{type(err).__name__}: {err}"}
        figures["wall_s"] = round(time.perf_counter() - start, 3)
        out["benchmarks"][name.removeprefix("bench_")] = figures
    print(json.dumps(out, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
