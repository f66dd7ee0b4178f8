"""Start-up of the commands a bench engineer runs dozens of times, as whole processes.

Each command runs as the user runs it (``python -m reconcile CMD ... --json`` on the
invented line receiver, output discarded), timed against a bare interpreter importing
the one library the command cannot avoid: ``python -c "import numpy"`` for solve,
diagnose and trim, ``python -c "import lmfit"`` for fit. The command and its baseline
are timed alternately in the same loop, so machine load hits both alike; the figure
is the ratio of the medians. Peak memory (max RSS of one more run of each command, read
with ``os.wait4`` by a small launcher, since Linux carries a parent's peak into its
children) is reported for every command; the trim target is on it.

Targets (issue 16): solve ≤ 3×, diagnose ≤ 6×, trim ≤ 10× ``import numpy`` with peak
memory ≤ 250 MiB, fit ≤ 1.2× ``import lmfit``.
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
SAMPLES = ROOT / "sample_data"
BOARD = str(SAMPLES / "line_receiver_cb.toml")
READINGS = str(SAMPLES / "line_receiver_built.csv")
REPEATS = 5

COMMANDS = {
    # name: (arguments, baseline library, target ratio)
    "solve": (["solve", BOARD, "--json"], "numpy", 3.0),
    "diagnose": (["diagnose", BOARD, READINGS, "--json"], "numpy", 6.0),
    "trim": (["trim", BOARD, READINGS, "--json"], "numpy", 10.0),
    "fit": (["fit", BOARD, READINGS, "--json"], "lmfit", 1.2),
}
TRIM_PEAK_MIB = 250.0


# Linux keeps a process's peak RSS across fork and exec: a child started straight from
# this (large) benchmark process reports this process's own peak. So the peak of each
# command is read by a small launcher that starts it and reports its child's rusage.
_PEAK_LAUNCHER = (
    "import os, subprocess, sys\n"
    "p = subprocess.Popen(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)\n"
    "_, status, usage = os.wait4(p.pid, 0)\n"
    "print(os.waitstatus_to_exitcode(status), usage.ru_maxrss)\n"
)


def _user_env() -> dict[str, str]:
    """The environment with bytecode writing allowed, as an installed package has it
    (pip compiles a wheel's modules). ``PYTHONDONTWRITEBYTECODE`` counts as set when it
    is any non-empty string, "0" included, so it is removed, not set to "0": with it,
    every module changed since its last ``.pyc`` is compiled again in every timed run."""
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    return env


def _time_process(argv: list[str]) -> float:
    """Wall seconds of one child process."""
    env = _user_env()
    start = time.perf_counter()
    done = subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=ROOT,
                          env=env, check=False)
    wall = time.perf_counter() - start
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(argv)} exited {done.returncode}")
    return wall


def _peak_mib(argv: list[str]) -> float:
    """Peak RSS in MiB of one run of ``argv``, through the small launcher."""
    done = subprocess.run([sys.executable, "-c", _PEAK_LAUNCHER, *argv], capture_output=True,
                          text=True, cwd=ROOT, env=_user_env(), check=True)
    code, kib = done.stdout.split()
    if int(code) != 0:
        raise RuntimeError(f"{' '.join(argv)} exited {code}")
    return int(kib) / 1024.0  # Linux: KiB


def run(repeats: int = REPEATS) -> dict:
    """Time every command against its baseline, alternately, ``repeats`` times.

    Returns
    -------
    dict
        Per command: median seconds of the command and of its baseline, their ratio, the
        target, whether it is met, and the peak RSS; plus the baselines' own medians.
    """
    py = sys.executable
    baselines = {lib: [py, "-c", f"import {lib}"] for lib in ("numpy", "lmfit")}
    for argv in baselines.values():  # warm the file cache once, untimed
        _time_process(argv)
    for args, _, _ in COMMANDS.values():
        _time_process([py, "-m", "reconcile", *args])
    times: dict[str, list[float]] = {name: [] for name in COMMANDS}
    base_times: dict[str, list[float]] = {name: [] for name in COMMANDS}
    for _ in range(repeats):
        for name, (args, lib, _) in COMMANDS.items():
            base_times[name].append(_time_process(baselines[lib]))
            times[name].append(_time_process([py, "-m", "reconcile", *args]))
    peaks = {name: _peak_mib([py, "-m", "reconcile", *args])
             for name, (args, _, _) in COMMANDS.items()}
    out: dict = {"repeats": repeats, "commands": {}}
    for name, (_, lib, target) in COMMANDS.items():
        cmd_s = statistics.median(times[name])
        base_s = statistics.median(base_times[name])
        ratio = cmd_s / base_s
        entry = {
            "median_s": round(cmd_s, 3),
            "baseline": f"python -c 'import {lib}'",
            "baseline_median_s": round(base_s, 3),
            "ratio": round(ratio, 2),
            "target_ratio": target,
            "peak_mib": round(peaks[name], 1),
            "meets": ratio <= target,
        }
        if name == "trim":
            entry["target_peak_mib"] = TRIM_PEAK_MIB
            entry["meets"] = entry["meets"] and peaks[name] <= TRIM_PEAK_MIB
        out["commands"][name] = entry
    out["all_met"] = all(e["meets"] for e in out["commands"].values())
    return out
