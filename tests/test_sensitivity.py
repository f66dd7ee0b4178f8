"""Analytic DC sensitivities against high-precision central differences.

Outside reference: mpmath (arbitrary-precision arithmetic). Each random board's DC
operating point is solved again here at 34 significant digits by a Newton iteration
written in this file from the contract's device equations (formats.md, "Device model":
Ebers–Moll transport form with a forward Early effect and an emission coefficient) and
Kirchhoff's current law over the board's parts, never through the engine's matrices.
Every parameter column is then a central difference of that solution with a step of
1e-12 relative (truncation error ~1e-24, rounding ~1e-22), which the analytic column
must match to 1e-6 relative.
"""

from __future__ import annotations

import math

import mpmath as mp
import numpy as np
import pytest

from reconcile.engine import compile_board, nominal_parameters, solve_batch
from reconcile.engine.dc import jacobian_at
from reconcile.engine.sensitivity import all_columns, dc_sensitivity
from reconcile.engine.small_signal_sensitivity import small_signal_sensitivity
from reconcile.model.board import (
    Board, Capacitor, Device, DeviceParam, Resistor, Signal, Supply, Transistor,
)
import dataclasses

mp.mp.dps = 34
K_OVER_Q = mp.mpf("1.380649e-23") / mp.mpf("1.602176634e-19")  # CODATA 2018, exact SI values
T0 = mp.mpf("298.15")
REL_TOL = 1e-6


def random_board(rng: np.random.Generator) -> Board:
    """A random 1–3 stage cascade of common-emitter stages (npn or pnp), with a random
    extra resistor and a leaky-capacitor-free coupling capacitor between stages."""
    n_stages = int(rng.integers(1, 4))
    vcc = float(rng.uniform(5.0, 15.0))
    res, trs, caps, devs = {}, {}, {}, {}
    for s in range(n_stages):
        pnp = bool(rng.random() < 0.3)
        dev = Device(
            name=f"D{s}",
            IS=DeviceParam(float(10 ** rng.uniform(-16, -13))),
            beta=DeviceParam(float(rng.uniform(60, 400))),
            beta_r=DeviceParam(float(rng.uniform(1, 10))),
            VA=DeviceParam(float(rng.uniform(30, 150)) if rng.random() < 0.7 else math.inf),
            n=DeviceParam(float(rng.uniform(1.0, 1.3))),
        )
        devs[dev.name] = dev
        top, bot = ("vcc", "gnd") if not pnp else ("gnd", "vcc")
        b, c, e = f"b{s}", f"c{s}", f"e{s}"
        r1 = float(rng.uniform(20e3, 100e3))
        r2 = r1 * float(rng.uniform(0.15, 0.4))
        res[f"R1_{s}"] = Resistor(f"R1_{s}", (top, b), r1)
        res[f"R2_{s}"] = Resistor(f"R2_{s}", (b, bot), r2)
        res[f"RC_{s}"] = Resistor(f"RC_{s}", (top, c), float(rng.uniform(1e3, 10e3)))
        res[f"RE_{s}"] = Resistor(f"RE_{s}", (e, bot), float(rng.uniform(200, 2e3)))
        trs[f"Q{s}"] = Transistor(f"Q{s}", "pnp" if pnp else "npn", c, b, e, dev.name)
        if s:
            caps[f"C{s}"] = Capacitor(f"C{s}", (f"c{s - 1}", b), 1e-6)
    if rng.random() < 0.5:
        res["RX"] = Resistor("RX", ("c0", "gnd"), float(rng.uniform(50e3, 500e3)))
    return Board(
        title="random cascade",
        temperature=float(rng.uniform(280, 330)),
        supplies={"VCC": Supply("VCC", "vcc", vcc)},
        resistors=res,
        capacitors=caps,
        transistors=trs,
        devices=devs,
        signal=Signal(),
    )


def random_parameters(circuit, rng):
    """The board's values with random capacitor leaks (as a faulty capacitor has)."""
    p = nominal_parameters(circuit, 1)
    leak = rng.uniform(0, 1e-5, size=p.capacitor_leak_siemens.shape)
    return p.with_values(capacitor_leak_siemens=leak)


class MpBoard:
    """The DC equations of a circuit's parts in mpmath (KCL over free nodes)."""

    def __init__(self, circuit, params):
        self.c = circuit
        self.vals = {
            "resistor_ohms": [mp.mpf(float(x)) for x in params.resistor_ohms[0]],
            "capacitor_leak_siemens": [mp.mpf(float(x)) for x in params.capacitor_leak_siemens[0]],
            "supply_volts": [mp.mpf(float(x)) for x in params.supply_volts[0]],
            "IS": [mp.mpf(float(x)) for x in params.IS[0]],
            "beta": [mp.mpf(float(x)) for x in params.beta[0]],
            "VA": [mp.mpf(float(x)) if math.isfinite(x) else mp.inf for x in params.VA[0]],
            "n": [mp.mpf(float(x)) for x in params.n[0]],
            "temperature": [mp.mpf(float(params.temperature[0]))],
        }
        self.beta_r = [mp.mpf(float(x)) for x in params.beta_r[0]]
        self.xti = [mp.mpf(float(x)) for x in params.xti[0]]
        self.eg = [mp.mpf(float(x)) for x in params.bandgap[0]]

    def currents(self, vals, v):
        """Current leaving every node (list over nodes incl. gnd) for node voltages v."""
        c = self.c
        f = [mp.mpf(0)] * (c.n_nodes + 1)
        branches = [(tuple(c.resistor_nodes[j]), 1 / vals["resistor_ohms"][j])
                    for j in range(len(c.resistor_refs))]
        branches += [(tuple(c.capacitor_nodes[j]), vals["capacitor_leak_siemens"][j])
                     for j in range(len(c.capacitor_refs))]
        for (a, b), g in branches:
            i = g * (v[a] - v[b])
            f[a] += i
            f[b] -= i
        for k in range(len(c.transistor_refs)):
            s = int(c.polarity[k])
            nc, nb, ne = (int(x) for x in c.transistor_nodes[k])
            ic, ib = self.device(vals, k, s * (v[nb] - v[ne]), s * (v[nb] - v[nc]))
            f[nc] += s * ic
            f[nb] += s * ib
            f[ne] -= s * (ic + ib)
        return f

    def device(self, vals, k, vbe, vbc):
        """Collector and base currents of transistor k in the npn frame at (vbe, vbc)."""
        t = vals["temperature"][0]
        is_t = vals["IS"][k] * (t / T0) ** self.xti[k] * mp.exp(
            self.eg[k] / K_OVER_Q * (1 / T0 - 1 / t))
        nvt = vals["n"][k] * K_OVER_Q * t
        i_f = is_t * (mp.exp(vbe / nvt) - 1)
        i_r = is_t * (mp.exp(vbc / nvt) - 1)
        va = vals["VA"][k]
        q = 1 - (0 if va == mp.inf else vbc / va)
        ic = (i_f - i_r) * q - i_r / self.beta_r[k]
        ib = i_f / vals["beta"][k] + i_r / self.beta_r[k]
        return ic, ib

    def solve(self, vals, v0, inverse=None):
        """Node voltages and node currents at the solution, by Newton's iteration from
        v0 (full Newton, or the chord method with a fixed inverse Jacobian); returns
        them and the inverse Jacobian at the solution."""
        c = self.c
        free = [int(i) for i in c.free]
        v = [mp.mpf(float(x)) for x in v0]
        v[c.gnd] = mp.mpf(0)
        for j, node in enumerate(c.supply_nodes):
            v[int(node)] = vals["supply_volts"][j]
        floating = {int(i) for i in c.dc_floating}

        def resid(vf):
            vv = list(v)
            for i, node in enumerate(free):
                vv[node] = vf[i]
            f = self.currents(vals, vv)
            return [f[node] + (mp.mpf("1e-12") * vv[node] if node in floating else 0)
                    for node in free]

        def inverse_jacobian(x, f0):
            jac = mp.matrix(len(free), len(free))
            for j in range(len(free)):
                h = mp.mpf("1e-25")
                xp = list(x)
                xp[j] += h
                fp = resid(xp)
                for i in range(len(free)):
                    jac[i, j] = (fp[i] - f0[i]) / h
            return mp.inverse(jac)

        x = [v[i] for i in free]
        for _ in range(80):
            f0 = resid(x)
            inv = inverse if inverse is not None else inverse_jacobian(x, f0)
            dx = inv * mp.matrix(f0)
            x = [x[i] - dx[i] for i in range(len(free))]
            if max(abs(d) for d in dx) < mp.mpf("1e-32"):
                break
        else:
            raise AssertionError("mpmath reference Newton did not converge")
        for i, node in enumerate(free):
            v[node] = x[i]
        if inverse is None:
            inverse = inverse_jacobian(x, resid(x))
        return v, self.currents(vals, v), inverse


class MpSignal:
    """The small-signal quantities of a circuit in mpmath, as the contract defines them
    (docs/formats.md §2.2 and §6.3), at an operating point solved by :class:`MpBoard`:
    the exact linearisation (branch conductances, each transistor's four conductances
    by the complex step of the device equations at the operating point),
    capacitors as jωC, the hybrid-π Cπ = gm/(2π·ft) − c_mu (clipped at 0) and c_mu, the
    probe on the input and output nodes, supplies as AC ground; then three complex
    solves of the whole network: the load on the output and 1 A into the input (input
    resistance |v_in|, gain |v_out/v_in|), the generator's Norton equivalent added
    (source gain |v_out| for 1 V open-circuit), and the source resistance on the input,
    1 A into the output and no load (output resistance). No two-port algebra of the
    engine is used. ``vals`` must hold ``capacitor_farads``."""

    def __init__(self, circuit, board: MpBoard, params) -> None:
        self.circuit, self.board = circuit, board
        self.frequency = float(params.frequency[0])
        self.source_ohms = float(params.source_ohms[0])
        self.load_ohms = float(params.load_ohms[0])
        self.probe_siemens = mp.mpf(float(params.probe_ac_siemens[0]))
        self.probe_farads = mp.mpf(float(params.probe_ac_farads[0]))
        self.ft = [mp.mpf(float(f)) if math.isfinite(f) else mp.inf for f in params.ft[0]]
        self.c_mu = [mp.mpf(float(f)) for f in params.c_mu[0]]

    def _network(self, vals, v, omega):
        """The complex nodal matrix over the free nodes at angular frequency omega, and
        the free row of each node (AC ground: supplies and gnd have none)."""
        c = self.circuit
        row = {int(node): i for i, node in enumerate(c.free)}
        y = mp.matrix(len(row), len(row))

        def stamp(a, b, value):
            for r, k, sign in ((a, a, 1), (b, b, 1), (a, b, -1), (b, a, -1)):
                if r in row and k in row:
                    y[row[r], row[k]] += sign * value

        for j in range(len(c.resistor_refs)):
            stamp(*(int(n) for n in c.resistor_nodes[j]), 1 / vals["resistor_ohms"][j])
        for j in range(len(c.capacitor_refs)):
            stamp(*(int(n) for n in c.capacitor_nodes[j]), vals["capacitor_leak_siemens"][j]
                  + 1j * omega * vals["capacitor_farads"][j])
        mpb = self.board
        for k in range(len(c.transistor_refs)):
            s = int(c.polarity[k])
            nc, nb, ne = (int(n) for n in c.transistor_nodes[k])
            vbe, vbc = s * (v[nb] - v[ne]), s * (v[nb] - v[nc])
            # the four conductances by the complex step: d f/dx = Im f(x + i·h)/h, exact
            # to the working precision (no difference is taken); the device equations
            # are analytic in both junction voltages
            h = mp.mpf("1e-40")
            by_be = mpb.device(vals, k, vbe + 1j * h, vbc)
            by_bc = mpb.device(vals, k, vbe, vbc + 1j * h)
            g = {name: (mp.im(by_be[i]) / h, mp.im(by_bc[i]) / h)
                 for i, name in enumerate(("ic", "ib"))}
            # current into a terminal by node voltage (c, b, e); polarity squared is 1
            rows = {nc: g["ic"], nb: g["ib"]}
            for node, (d_be, d_bc) in rows.items():
                for col, d in ((nc, -d_bc), (nb, d_be + d_bc), (ne, -d_be)):
                    if node in row and col in row:
                        y[row[node], row[col]] += d
                    if ne in row and col in row:
                        y[row[ne], row[col]] -= d
            gm = g["ic"][0] + g["ic"][1]  # dIC/dVBE at fixed VCE
            c_pi = max(gm / (2 * mp.pi * self.ft[k]) - self.c_mu[k], mp.mpf(0))
            stamp(nb, nc, 1j * omega * self.c_mu[k])
            stamp(nb, ne, 1j * omega * c_pi)
        probe = self.probe_siemens + 1j * omega * self.probe_farads
        for node in {c.input_node, c.output_node}:
            if node in row:
                y[row[node], row[node]] += probe
        return y, row

    def quantities(self, vals, v, frequency, *, whole: bool = True) -> dict:
        """Gain, source gain, input and output resistance at ``frequency``.

        ``whole``: three solves of the whole network, each with its own terminations;
        else one factorisation of the unterminated network and its open-circuit
        impedance parameters z11, z12, z21, z22 between input and output, closed by the
        terminated two-port's relations (any network-analysis textbook, e.g. Hayt &
        Kemmerly, *Engineering Circuit Analysis*, two-port networks; from memory):
        Zin = z11 − z12·z21/(z22 + ZL), v2/v1 = z21·ZL/(z11·(z22 + ZL) − z12·z21),
        Zout = z22 − z12·z21/(z11 + Rs), v2/v_gen = v2/v1 · Zin/(Zin + Rs)."""
        c = self.circuit
        y, row = self._network(vals, v, 2 * mp.pi * mp.mpf(frequency))
        i_in, i_out = row[c.input_node], row[c.output_node]
        rs, rl = mp.mpf(self.source_ohms), self.load_ohms

        def solve(matrix, at, amps):
            rhs = mp.matrix(len(row), 1)
            rhs[at] = amps
            return mp.lu_solve(matrix, rhs)

        if not whole:
            lu, perm = mp.mp.LU_decomp(y.copy())  # one factorisation, two right-hand sides
            x1, x2 = ([mp.mp.U_solve(lu, mp.mp.L_solve(lu, _unit(len(row), at), perm))]
                      for at in (i_in, i_out))
            x1, x2 = x1[0], x2[0]
            z11, z21, z12, z22 = x1[i_in], x1[i_out], x2[i_in], x2[i_out]
            if math.isfinite(rl):
                zl = mp.mpf(rl)
                z_in = z11 - z12 * z21 / (z22 + zl)
                gain = z21 * zl / (z11 * (z22 + zl) - z12 * z21)
            else:
                z_in, gain = z11, z21 / z11
            z_out = z22 - z12 * z21 / (z11 + rs)
            return {"gain": abs(gain), "input_resistance": abs(z_in),
                    "source_gain": abs(gain * z_in / (z_in + rs)),
                    "output_resistance": abs(z_out)}
        loaded = y.copy()
        if math.isfinite(rl):
            loaded[i_out, i_out] += 1 / mp.mpf(rl)
        x = solve(loaded, i_in, 1)
        driven = loaded.copy()
        driven[i_in, i_in] += 1 / rs
        x_gen = solve(driven, i_in, 1 / rs)  # 1 V open-circuit behind rs
        sourced = y.copy()
        sourced[i_in, i_in] += 1 / rs
        x_out = solve(sourced, i_out, 1)
        return {"gain": abs(x[i_out] / x[i_in]), "input_resistance": abs(x[i_in]),
                "source_gain": abs(x_gen[i_out]), "output_resistance": abs(x_out[i_out])}


def _unit(n: int, at: int):
    e = mp.matrix(n, 1)
    e[at] = 1
    return e


def central_columns(mpb, columns, n_out: int, outputs) -> np.ndarray:
    """Central differences (n_out, P) of ``outputs(vals)`` (a list of n_out mpmath
    numbers) at ``mpb``'s values, a relative step of 1e-12 in each column's value (an
    absolute 1e-18 where it is 0; a column at infinity, VA without Early effect, is 0)."""
    cols = []
    for name, j in columns:
        base = mpb.vals[name][j]
        if base == mp.inf:  # VA = inf: no Early effect, nothing depends on it
            cols.append([0.0] * n_out)
            continue
        h = abs(base) * mp.mpf("1e-12") if base != 0 else mp.mpf("1e-18")
        outs = []
        for sign in (1, -1):
            vals = {k: list(x) for k, x in mpb.vals.items()}
            vals[name][j] = base + sign * h
            outs.append(outputs(name, vals))
        cols.append([float((p - m) / (2 * h)) for p, m in zip(outs[0], outs[1], strict=True)])
    return np.array(cols).T


def reference_columns(circuit, params, v0, columns):
    """Central differences (node voltages, supply currents, resistor currents) per column."""
    mpb = MpBoard(circuit, params)
    floating = {int(i) for i in circuit.dc_floating}
    v_base, _, inverse = mpb.solve(mpb.vals, v0)

    def outputs(_name, vals):
        v, f, _ = mpb.solve(vals, v_base, inverse)
        node_v = [v[i] if i not in floating else mp.mpf(0) for i in range(circuit.n_nodes)]
        sup = [f[int(node)] for node in circuit.supply_nodes]
        res = []
        for r in range(len(circuit.resistor_refs)):
            a, b = (int(x) for x in circuit.resistor_nodes[r])
            res.append((v[a] - v[b]) / vals["resistor_ohms"][r])
        return node_v + sup + res

    n_out = circuit.n_nodes + len(circuit.supply_nodes) + len(circuit.resistor_refs)
    return central_columns(mpb, columns, n_out, outputs)  # (outputs, P)


def _check_board(seed: int) -> None:
    rng = np.random.default_rng(seed)
    board = random_board(rng)
    circuit = compile_board(board)
    params = random_parameters(circuit, rng)
    sol = solve_batch(circuit, params, small_signal=False)
    assert sol.converged[0]
    columns = all_columns(circuit)
    sens = dc_sensitivity(circuit, params, sol.state, columns)
    ours = np.concatenate(
        [sens.node_v[0], sens.supply_current[0], sens.resistor_current[0]], axis=0
    )
    ref = reference_columns(circuit, params, sol.state.v[0], columns)
    # Compared as normalised sensitivities S = (p / Y)·dy/dp, Y the largest |value| of
    # the output's kind (node voltages, currents): each column must agree to 1e-6 of its
    # largest |S| of that kind, or 1e-9 absolute where the whole column is below 1e-3
    # (a parameter that moves nothing: its exact derivative is a cancellation that
    # double precision resolves only to its rounding of the cancelling terms).
    n_v = circuit.n_nodes
    y = np.concatenate([sol.node_v[0], sol.supply_current[0], sol.resistor_current[0]])
    kinds = [slice(0, n_v), slice(n_v, ours.shape[0])]
    y_scale = np.empty_like(y)
    for sl in kinds:
        y_scale[sl] = max(np.max(np.abs(y[sl])), 1e-30) if y[sl].size else 1.0
    for k, (name, j) in enumerate(columns):
        value = float(np.atleast_1d(getattr(params, name)[0])[j])
        if not math.isfinite(value):
            assert np.all(ours[:, k] == 0.0), (seed, name, j)
            continue
        p_scale = abs(value) if value != 0.0 else 1e-6
        s_ours = ours[:, k] * p_scale / y_scale
        s_ref = ref[:, k] * p_scale / y_scale
        for sl in kinds:
            if not s_ref[sl].size:
                continue
            scale = max(np.max(np.abs(s_ref[sl])), 1e-3)
            err = np.max(np.abs(s_ours[sl] - s_ref[sl]))
            assert err <= REL_TOL * scale, (seed, name, j, err / scale)


SIGNAL_QUANTITIES = ("gain", "source_gain", "input_resistance", "output_resistance")


def with_signal(board: Board, rng: np.random.Generator) -> Board:
    """The board with a [signal] set-up from the first base to the last collector (a
    random source, a load or none, a frequency), a probe, and ft and c_mu on every
    device, so that Cπ moves with gm."""
    last = max(int(ref[1:]) for ref in board.transistors)
    devices = {name: dataclasses.replace(d, ft=DeviceParam(float(rng.uniform(50e6, 400e6))),
                                         c_mu=DeviceParam(float(rng.uniform(1e-12, 6e-12))))
               for name, d in board.devices.items()}
    load = float(rng.uniform(2e3, 50e3)) if rng.random() < 0.7 else math.inf
    signal = Signal(input="b0", output=f"c{last}", source_ohms=float(rng.uniform(50, 2e3)),
                    load_ohms=load, frequency=float(rng.uniform(200.0, 20e3)))
    bench = dataclasses.replace(board.bench, probe_ohms=float(rng.uniform(1e6, 10e6)),
                                probe_farads=float(rng.uniform(5e-12, 20e-12)))
    return dataclasses.replace(board, devices=devices, signal=signal, bench=bench)


def small_signal_reference_columns(circuit, params, v0, columns, frequencies):
    """Central differences (quantity × frequency, P) of the small-signal quantities of
    :class:`MpSignal`, each column's DC point solved again by :class:`MpBoard`."""
    mpb = MpBoard(circuit, params)
    mpb.vals["capacitor_farads"] = [mp.mpf(float(x)) for x in params.capacitor_farads[0]]
    signal = MpSignal(circuit, mpb, params)
    v_base, _, inverse = mpb.solve(mpb.vals, v0)

    def outputs(name, vals):
        v = v_base if name == "capacitor_farads" else mpb.solve(vals, v_base, inverse)[0]
        out = []
        for f in frequencies:
            found = signal.quantities(vals, v, f, whole=False)
            out += [found[q] for q in SIGNAL_QUANTITIES]
        return out

    return central_columns(mpb, columns, len(frequencies) * len(SIGNAL_QUANTITIES), outputs)


def _check_small_signal(seed: int) -> None:
    """Every column of the analytic small-signal sensitivities of one random board with a
    [signal] set-up, at a frequency drawn log-uniform from 100 Hz to 5 MHz (low, the
    coupling capacitors matter; high, Cπ, c_mu and the probe's capacitance), against
    :func:`small_signal_reference_columns`."""
    rng = np.random.default_rng(seed)
    board = with_signal(random_board(rng), rng)
    circuit = compile_board(board)
    params = random_parameters(circuit, rng)
    sol = solve_batch(circuit, params)
    assert sol.converged[0]
    dc_cols = all_columns(circuit)
    columns = list(dc_cols) + [("capacitor_farads", j) for j in range(len(circuit.capacitor_refs))]
    node_dv = np.zeros((1, circuit.n_nodes + 1, len(columns)))
    node_dv[:, :-1, :len(dc_cols)] = dc_sensitivity(circuit, params, sol.state, dc_cols).node_v
    frequencies = (float(10 ** rng.uniform(2.0, 6.7)),)
    ours = small_signal_sensitivity(sol.linear, sol.state.v, np.array([frequencies]), columns,
                                    node_dv)
    assert set(ours) == set(SIGNAL_QUANTITIES)  # each one computed, nothing left unfilled
    ref = small_signal_reference_columns(circuit, params, sol.state.v[0], columns, frequencies)
    values = sol.linear.response(np.array(frequencies))
    row = 0
    for f in range(len(frequencies)):
        for q in SIGNAL_QUANTITIES:
            # normalised sensitivities (p / y)·dy/dp, to 1e-6 of the row's largest
            p_scale = np.array([abs(float(np.atleast_1d(getattr(params, n)[0])[j])) or 1e-6
                                for n, j in columns])
            finite = np.isfinite(p_scale)
            y = abs(float(getattr(values, q)[0, f]))
            s_ours = ours[q][0, f, finite] * p_scale[finite] / y
            s_ref = ref[row, finite] * p_scale[finite] / y
            err = np.max(np.abs(s_ours - s_ref))
            assert err <= REL_TOL * max(np.max(np.abs(s_ref)), 1e-3), (seed, q, f, err)
            assert np.all(ours[q][0, f, ~finite] == 0.0)
            row += 1


@pytest.mark.slow
@pytest.mark.parametrize("block", range(10))
def test_small_signal_columns_match_mpmath_central_differences(block):
    """mpmath reference: 100 random boards with a [signal] set-up (ten blocks of ten),
    every column, every small-signal quantity, 1e-6."""
    for seed in range(2000 + block * 10, 2000 + block * 10 + 10):
        _check_small_signal(seed)


@pytest.mark.slow
@pytest.mark.parametrize("block", range(10))
def test_analytic_columns_match_mpmath_central_differences(block):
    """mpmath reference: 100 random boards (ten blocks of ten), every column, 1e-6."""
    for seed in range(block * 10, block * 10 + 10):
        _check_board(seed)


def test_analytic_columns_quick():
    """mpmath reference, three boards (the fast part of the check above)."""
    for seed in (1000, 1001, 1002):
        _check_board(seed)


def test_jacobian_at_is_the_kcl_jacobian():
    """mpmath reference: the engine's Newton matrix at the solution equals the
    derivative of the KCL currents at the free nodes (central difference at 34 digits)."""
    rng = np.random.default_rng(7)
    board = random_board(rng)
    circuit = compile_board(board)
    params = random_parameters(circuit, rng)
    sol = solve_batch(circuit, params, small_signal=False)
    jac = jacobian_at(circuit, params, sol.state)[0]
    mpb = MpBoard(circuit, params)
    v = [mp.mpf(float(x)) for x in sol.state.v[0]]
    free = [int(i) for i in circuit.free]
    floating = {int(i) for i in circuit.dc_floating}
    for jj, node in enumerate(free):
        h = mp.mpf("1e-15")
        vp, vm = list(v), list(v)
        vp[node] += h
        vm[node] -= h
        fp, fm = mpb.currents(mpb.vals, vp), mpb.currents(mpb.vals, vm)
        for ii, row in enumerate(free):
            ref = float((fp[row] - fm[row]) / (2 * h))
            ref += 1e-12 if (ii == jj and row in floating) else 0.0
            assert abs(jac[ii, jj] - ref) <= 1e-9 * max(abs(ref), np.max(np.abs(jac[:, jj])))

