"""Benchmark of lot characterisation, batched against one device at a time.

    python tests/benchmarks/bench_lot.py [DEVICES]

prints one JSON object; :func:`run` returns the same dict for the project-wide runner
(``python -m tests.benchmarks lot``).

Figures (one core's worth of work; numpy may use more threads for the batched linear
algebra, which here is tiny):

- ``sweep``: D invented devices (default 10 000) of 10 points each, made with
  :func:`reconcile.lot.sweep_simulator.simulate_sweeps` (not timed). Timed, median of 3 after one
  warm-up: ``extract_s`` (:func:`reconcile.lot.extraction.extract`, the fits alone),
  ``characterise_s`` (:func:`reconcile.lots.characterise_sweeps`: fits, summary,
  outliers, matching, device table) and ``parse_and_characterise_s`` (the same from the
  sweep file's text). Two per-device loops, each timed on a subset of
  ``LOOP_SUBSET`` devices and extrapolated linearly to D (said so in the output):
  ``loop_same_code`` calls :func:`extract` once per device, ``loop_polyfit`` is the
  leanest plain-numpy loop (two weighted :func:`numpy.polyfit` per device plus a
  weighted mean for beta, no flags). Target: the whole characterisation under 10 s.
- ``jig``: 500 devices read in ``sample_data/lot_jig.toml`` (readings made with
  :func:`reconcile.simulate.simulate_readings`, not timed); :func:`characterise_jig`
  timed once after a warm-up on 20 devices, against a loop of
  :func:`reconcile.fitting.fit_board` (lmfit) on 20 devices, extrapolated to 500; the
  two fits' beta values are compared (``agreement``).
"""

from __future__ import annotations

import dataclasses
import json
import statistics
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
JIG_PATH = ROOT / "sample_data" / "lot_jig.toml"
TARGET_SWEEP_S = 10.0
LOOP_SUBSET = 300
JIG_DEVICES = 500
JIG_LOOP_SUBSET = 20


def _median_time(fn, repeats: int = 3) -> float:
    fn()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def _sweep_lot(n_devices: int, seed: int = 4242):
    from reconcile.lot.sweep_simulator import simulate_sweeps

    rng = np.random.default_rng(seed)
    names = [f"D{i:05d}" for i in range(n_devices)]
    r_e = np.where(rng.random(n_devices) < 0.01, 2.0, 0.0)  # one in a hundred bends
    is_a = 10 ** rng.normal(-14.15, 0.1, n_devices)
    beta = np.exp(rng.normal(np.log(180), 0.15, n_devices))
    n = rng.normal(1.003, 0.005, n_devices)
    ic = np.logspace(-6, -2, 10)
    return simulate_sweeps(names, is_a, beta, n, ic, r_emitter_ohm=r_e, rng=rng)


def _polyfit_loop(sw, idx) -> None:
    from reconcile.engine import devices

    for i in idx:
        m = sw.mask[i]
        v, ic, ib = sw.vbe[i, m], sw.ic[i, m], sw.ib[i, m]
        y = np.log(ic)
        w = 1.0 / np.sqrt((sw.u_ic[i, m] / ic) ** 2 + (38.0 * sw.u_vbe[i, m]) ** 2)
        slope, _ = np.polyfit(v, y, 1, w=w)
        np.polyfit(v, y, 2, w=w)  # a quadratic term stands in for the bend test
        vt = devices.thermal_voltage(sw.temperature_k[i])
        _ = 1.0 / (slope * vt)
        lnb = np.log(ic / ib)
        wb = 1.0 / ((sw.u_ic[i, m] / ic) ** 2 + (sw.u_ib[i, m] / ib) ** 2)
        _ = np.sum(wb * lnb) / np.sum(wb)


def bench_sweeps(n_devices: int = 10_000) -> dict:
    from reconcile.lot.characterise import characterise_sweeps
    from reconcile.data.sweep_file import sweeps_from_text, sweeps_to_csv
    from reconcile.lot.extraction import extract

    sw = _sweep_lot(n_devices)
    text = sweeps_to_csv(sw)
    t_extract = _median_time(lambda: extract(sw))
    t_char = _median_time(lambda: characterise_sweeps(sw))
    t_full = _median_time(lambda: characterise_sweeps(sweeps_from_text(text)), repeats=1)
    subset = min(LOOP_SUBSET, n_devices)
    singles = [sw.take(slice(i, i + 1)) for i in range(subset)]
    t0 = time.perf_counter()
    for one in singles:
        extract(one)
    loop_same = (time.perf_counter() - t0) * n_devices / subset
    t0 = time.perf_counter()
    _polyfit_loop(sw, range(subset))
    loop_poly = (time.perf_counter() - t0) * n_devices / subset
    result = characterise_sweeps(sw)
    flagged = sum("series-resistance" in d.flags for d in result.devices.values())
    return {
        "devices": n_devices,
        "points_per_device": int(sw.mask.shape[1]),
        "extract_s": round(t_extract, 4),
        "characterise_s": round(t_char, 4),
        "parse_and_characterise_s": round(t_full, 3),
        "devices_per_s": round(n_devices / t_char),
        "loop_same_code_s_extrapolated": round(loop_same, 2),
        "loop_polyfit_s_extrapolated": round(loop_poly, 2),
        "loop_timed_on_devices": subset,
        "ratio_loop_same_code": round(loop_same / t_extract, 1),
        "ratio_loop_polyfit": round(loop_poly / t_extract, 1),
        "series_resistance_flagged": flagged,
        "target_s": TARGET_SWEEP_S,
        "meets_target": bool(t_char < TARGET_SWEEP_S),
    }


def _jig_readings(board, n_devices: int, seed: int = 99):
    from reconcile.model.board import DeviceParam
    from reconcile.inference.simulate import simulate_readings

    rng = np.random.default_rng(seed)
    plan = [("voltage", "b"), ("voltage", "c"), ("current", "VCC")]
    name = next(iter(board.devices))
    out = []
    for i in range(n_devices):
        dev = dataclasses.replace(
            board.devices[name], IS=DeviceParam(10 ** rng.normal(-14.15, 0.1)),
            beta=DeviceParam(float(np.exp(rng.normal(np.log(170), 0.15)))),
        )
        tb = dataclasses.replace(board, devices={name: dev})
        made = simulate_readings(tb, plan, rng=rng)
        out += [dataclasses.replace(r, device=f"J{i:04d}") for r in made]
    return out


def bench_jig(n_devices: int = JIG_DEVICES) -> dict:
    from reconcile.model.board_loader import load_board
    from reconcile.inference.fitting import fit_board
    from reconcile.lot.characterise import characterise_jig

    board = load_board(JIG_PATH)
    readings = _jig_readings(board, n_devices)
    first = {f"J{i:04d}" for i in range(JIG_LOOP_SUBSET)}
    characterise_jig(board, [r for r in readings if r.device in first])  # warm-up
    t0 = time.perf_counter()
    result = characterise_jig(board, readings)
    t_batch = time.perf_counter() - t0
    fixed = ("VCC", "RB", "RC", "temperature")
    t0 = time.perf_counter()
    worst = 0.0
    for name in sorted(first):
        one = fit_board(board, [r for r in readings if r.device == name], fixed=fixed)
        est = one.parameters["Q1.beta"]
        worst = max(worst, abs(est.value - result.devices[name].beta) / est.stderr)
    loop = (time.perf_counter() - t0) * n_devices / JIG_LOOP_SUBSET
    return {
        "devices": n_devices,
        "readings_per_device": 3,
        "batched_s": round(t_batch, 3),
        "devices_per_s": round(n_devices / t_batch),
        "engine_calls": result.fit_info["engine_calls"],
        "loop_fit_board_s_extrapolated": round(loop, 2),
        "loop_timed_on_devices": JIG_LOOP_SUBSET,
        "ratio": round(loop / t_batch, 1),
        "agreement_beta_max_diff_in_stderr": float(f"{worst:.3g}"),
    }


def run(n_devices: int = 10_000) -> dict:
    return {"sweep": bench_sweeps(n_devices), "jig": bench_jig()}


if __name__ == "__main__":
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    print(json.dumps(run(n), indent=2))
