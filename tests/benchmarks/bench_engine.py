"""Benchmark of the batched engine against a one-board-at-a-time baseline.

    python tests/benchmarks/bench_engine.py [N]

prints one JSON object. :func:`run` returns the same dict for the project-wide runner
(``python -m tests.benchmarks engine``).

Figures:

- ``batched``: :func:`reconcile.engine.solve_batch` (DC and small signal) on N variants
  of ``sample_data/preamp_ce.toml`` (every resistor uniform within its tolerance, beta
  log-uniform over the device's range), median of 3 runs after one warm-up;
- ``loop``: the comparison baseline, the same boards one at a time with
  :func:`scipy.optimize.fsolve` on the nodal KCL equations (written here in plain numpy
  with the contract's device model and its analytic Jacobian, started from the nominal
  operating point) plus one :func:`numpy.linalg.solve` per board for the small signal;
  the two methods' answers are compared (``agreement``);
- ``cli_help``: wall time of ``reconcile --help`` in a subprocess, median of 5.

Targets (reported, never asserted): at least 200 000 boards/s batched, at least 100x
the loop, ``--help`` under 0.3 s.
"""

from __future__ import annotations

import json
import statistics
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
BOARD_PATH = ROOT / "sample_data" / "preamp_ce.toml"
TARGET_BOARDS_PER_S = 200_000.0
TARGET_RATIO = 100.0
TARGET_HELP_S = 0.3


def _spread_parameters(circuit, n: int, seed: int = 12345):
    """Nominal parameters with resistor tolerances and a beta spread applied."""
    from reconcile.engine import nominal_parameters

    board = circuit.board
    rng = np.random.default_rng(seed)
    p = nominal_parameters(circuit, n)
    tol = np.array([board.resistors[r].tolerance for r in circuit.resistor_refs])
    ohms = p.resistor_ohms * (1.0 + tol * rng.uniform(-1.0, 1.0, p.resistor_ohms.shape))
    betas = []
    for ref in circuit.transistor_refs:
        b = board.device_of(ref).beta
        lo, hi = (b.low, b.high) if b.has_range else (b.value * 0.5, b.value * 2.0)
        betas.append(np.exp(rng.uniform(np.log(lo), np.log(hi), n)))
    return p.with_values(resistor_ohms=ohms, beta=np.stack(betas, axis=1))


# ------------------------------------------------------------------- the baseline
class LoopBaseline:
    """One board at a time: nodal KCL residual and Jacobian in plain numpy, fsolve,
    then the small-signal two-port with numpy.linalg.solve."""

    def __init__(self, circuit) -> None:
        from scipy import constants

        self.c = circuit
        self.k_over_q = constants.k / constants.e
        self.free = np.asarray(circuit.free)
        self.pos = circuit.free_position

    def _device(self, p, i: int, t: int, vbe: float, vbc: float):
        """npn-frame IC, IB and their partials (d/dvbe, d/dvbc) for transistor t of
        sample i (the contract's device model)."""
        temp, t0 = p.temperature[i], 298.15
        is_t = (
            p.IS[i, t] * (temp / t0) ** p.xti[i, t]
            * np.exp(p.bandgap[i, t] / self.k_over_q * (1.0 / t0 - 1.0 / temp))
        )
        nvt = p.n[i, t] * self.k_over_q * temp
        beta, beta_r, va = p.beta[i, t], p.beta_r[i, t], p.VA[i, t]
        ef, er = np.exp(min(vbe / nvt, 80.0)), np.exp(min(vbc / nvt, 80.0))
        i_f, i_r = is_t * (ef - 1.0), is_t * (er - 1.0)
        gf, gr = is_t * ef / nvt, is_t * er / nvt
        q = 1.0 - vbc / va
        ic = (i_f - i_r) * q - i_r / beta_r
        ib = i_f / beta + i_r / beta_r
        dic = (gf * q, -gr * q - (i_f - i_r) / va - gr / beta_r)
        dib = (gf / beta, gr / beta_r)
        return ic, ib, dic, dib

    def _full(self, p, i, x):
        v = np.zeros(self.c.n_nodes + 1)
        v[self.free] = x
        v[self.c.supply_nodes] = p.supply_volts[i]
        return v

    def residual_and_jacobian(self, p, i, x):
        """KCL residual (current leaving each free node) and its Jacobian."""
        c = self.c
        v = self._full(p, i, x)
        m = len(self.free)
        f = np.zeros(m)
        jac = np.zeros((m, m))
        g = 1.0 / p.resistor_ohms[i]
        for k, (a, b) in enumerate(c.resistor_nodes):
            cur = (v[a] - v[b]) * g[k]
            for node, sign in ((a, 1.0), (b, -1.0)):
                r = self.pos[node]
                if r < 0:
                    continue
                f[r] += sign * cur
                for other, s2 in ((a, 1.0), (b, -1.0)):
                    col = self.pos[other]
                    if col >= 0:
                        jac[r, col] += sign * s2 * g[k]
        for t, nodes in enumerate(c.transistor_nodes):
            nc, nb, ne = nodes
            s = c.polarity[t]
            ic, ib, dic, dib = self._device(p, i, t, s * (v[nb] - v[ne]), s * (v[nb] - v[nc]))
            # d(current into terminal)/d(V of c, b, e); the polarity sign cancels
            d_c = (-dic[1], dic[0] + dic[1], -dic[0])
            d_b = (-dib[1], dib[0] + dib[1], -dib[0])
            d_e = tuple(-(x1 + x2) for x1, x2 in zip(d_c, d_b, strict=True))
            currents = (s * ic, s * ib, -s * (ic + ib))
            for node, cur, row in zip(nodes, currents, (d_c, d_b, d_e), strict=True):
                r = self.pos[node]
                if r < 0:
                    continue
                f[r] += cur
                for other, d in zip(nodes, row, strict=True):
                    col = self.pos[other]
                    if col >= 0:
                        jac[r, col] += d
        return f, jac

    def solve_board(self, p, i, x0):
        """Operating point and (gain, input resistance, output resistance) of sample i."""
        from scipy.optimize import fsolve

        x = fsolve(
            lambda y: self.residual_and_jacobian(p, i, y)[0],
            x0,
            fprime=lambda y: self.residual_and_jacobian(p, i, y)[1],
            xtol=1e-12,
        )
        _, jac = self.residual_and_jacobian(p, i, x)
        y = jac.astype(complex)
        w = 2.0 * np.pi * p.frequency[i]
        for k, (a, b) in enumerate(self.c.capacitor_nodes):
            yc = 1j * w * p.capacitor_farads[i, k]
            ra, rb = self.pos[a], self.pos[b]
            if ra >= 0:
                y[ra, ra] += yc
            if rb >= 0:
                y[rb, rb] += yc
            if ra >= 0 and rb >= 0:
                y[ra, rb] -= yc
                y[rb, ra] -= yc
        i_in, i_out = self.pos[self.c.input_node], self.pos[self.c.output_node]
        rl, rs = p.load_ohms[i], p.source_ohms[i]
        y_load = y.copy()
        if np.isfinite(rl):
            y_load[i_out, i_out] += 1.0 / rl
        rhs = np.zeros(len(x), dtype=complex)
        rhs[i_in] = 1.0
        z = np.linalg.solve(y_load, rhs)
        gain, r_in = abs(z[i_out] / z[i_in]), abs(z[i_in])
        y_src = y.copy()
        y_src[i_in, i_in] += 1.0 / rs
        rhs = np.zeros(len(x), dtype=complex)
        rhs[i_out] = 1.0
        r_out = abs(np.linalg.solve(y_src, rhs)[i_out])
        return x, (gain, r_in, r_out)


# ----------------------------------------------------------------------- figures
def _median_time(fn, repeats: int, warmup: int = 1) -> float:
    for _ in range(warmup):
        fn()
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def bench_batched(n: int) -> dict:
    from reconcile.model.board_loader import load_board
    from reconcile.engine import compile_board, solve_batch

    circuit = compile_board(load_board(BOARD_PATH))
    params = _spread_parameters(circuit, n)
    result = {}

    def once() -> None:
        result["sol"] = solve_batch(circuit, params)

    seconds = _median_time(once, repeats=3)
    sol = result["sol"]
    return {
        "boards": n,
        "seconds_median_of_3": seconds,
        "boards_per_s": n / seconds,
        "converged": int(np.sum(sol.converged)),
        "max_kcl_residual_a": float(np.max(sol.kcl_residual)),
    }


def bench_loop(n: int) -> dict:
    from reconcile.model.board_loader import load_board
    from reconcile.engine import compile_board, nominal_parameters, solve_batch

    circuit = compile_board(load_board(BOARD_PATH))
    params = _spread_parameters(circuit, n)
    baseline = LoopBaseline(circuit)
    nominal = solve_batch(circuit, nominal_parameters(circuit, 1))
    x0 = nominal.state.v[0, circuit.free]
    out = {}

    def once() -> None:
        xs, ss = [], []
        for i in range(n):
            x, s = baseline.solve_board(params, i, x0)
            xs.append(x)
            ss.append(s)
        out["x"], out["ss"] = np.array(xs), np.array(ss)

    seconds = _median_time(once, repeats=3)
    engine = solve_batch(circuit, params)
    v_ref = engine.state.v[:, circuit.free]
    ss_ref = np.stack(
        [engine.quantity(q) for q in ("gain", "input_resistance", "output_resistance")], axis=1
    )
    return {
        "boards": n,
        "seconds_median_of_3": seconds,
        "boards_per_s": n / seconds,
        "agreement": {
            "max_abs_node_v_diff": float(np.max(np.abs(out["x"] - v_ref))),
            "max_rel_small_signal_diff": float(np.max(np.abs(out["ss"] / ss_ref - 1.0))),
        },
    }


def bench_cli_help(repeats: int = 5) -> dict:
    script = Path(sys.executable).with_name("reconcile")
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        subprocess.run([str(script), "--help"], capture_output=True, check=True, timeout=60)
        times.append(time.perf_counter() - start)
    return {"seconds_median_of_5": statistics.median(times), "seconds_all": times}


def run(n_batched: int = 100_000, n_loop: int = 300) -> dict:
    """Measure everything; returns one dict of figures (seconds, boards per second)."""
    batched = bench_batched(n_batched)
    loop = bench_loop(n_loop)
    cli = bench_cli_help()
    ratio = batched["boards_per_s"] / loop["boards_per_s"]
    return {
        "board": str(BOARD_PATH.relative_to(ROOT)),
        "batched": batched,
        "loop_fsolve": loop,
        "speedup_batched_over_loop": ratio,
        "cli_help": cli,
        "targets": {
            "boards_per_s": TARGET_BOARDS_PER_S,
            "boards_per_s_met": batched["boards_per_s"] >= TARGET_BOARDS_PER_S,
            "speedup": TARGET_RATIO,
            "speedup_met": ratio >= TARGET_RATIO,
            "cli_help_s": TARGET_HELP_S,
            "cli_help_met": cli["seconds_median_of_5"] < TARGET_HELP_S,
        },
    }


if __name__ == "__main__":
    if str(ROOT) not in sys.path:
        sys.path.insert(0, str(ROOT))
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 100_000
    print(json.dumps(run(n_batched=n)))
