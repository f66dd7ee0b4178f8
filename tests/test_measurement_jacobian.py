"""The measurement model's analytic Jacobian against high-precision central differences.

Outside reference: mpmath (arbitrary-precision arithmetic). Each reading of a random
board is predicted again here at 34 significant digits: the board's DC equations are
those of :class:`tests.test_sensitivity.MpBoard` (Kirchhoff's current law over the
parts and the contract's device equations, solved by Newton's iteration in mpmath,
never through the engine's matrices), with the voltmeter's conductance added between
the two nodes of each voltage reading, as the contract says a reading is taken
(docs/formats.md, meter loading). The internal coordinates are mapped to part values
here in mpmath (ln R, log10 IS, ...), and a reading with a calibration factor is
multiplied by it. Every column of :meth:`MeasurementModel.jacobian` is then compared
with a central difference of those predictions with a step of 1e-12 (truncation error
about 1e-24, rounding about 1e-22), to 1e-6 of the largest derivative of that reading.

Small-signal readings are predicted here from the mpmath operating point as the
contract defines them (docs/formats.md §2.2 and §6.3): the board's exact linearisation
(branch conductances, each transistor's four conductances by the complex step of the
device equations at the operating point: :class:`tests.test_sensitivity.MpSignal`),
capacitors as jωC, the hybrid-π Cπ = gm/(2π·ft) − c_mu (clipped at 0) and c_mu, the
probe on the input and output nodes, supplies as AC ground; then three complex solves
of the whole network: the load on the output and 1 A into the input (input resistance
|v_in| and gain |v_out/v_in|), the generator's Norton equivalent added (source gain
|v_out| for 1 V open-circuit), and the source resistance on the input with 1 A into the
output and no load (output resistance). No two-port algebra of the engine is reused.

The readings cover voltages with the meter attached (one node, a node pair, a repeat),
a supply current, a resistor current, a part read out of circuit and calibration factors
shared by repeated readings of one instrument, on DC-only boards and on boards with a
small-signal set-up (gain, source gain, input and output resistance at the [signal]
frequency and at a reading's own). A resistor's current is read with the ammeter's
burden (``bench.ammeter_ohms``) in series with that resistor, on a board of its own.
"""

from __future__ import annotations

import dataclasses
import math

import mpmath as mp
import numpy as np
import pytest

from reconcile.data.readings import Reading
from reconcile.engine import compile_board
from reconcile.inference.calibration import calibration_parameters
from reconcile.inference.measure import MeasurementModel, observations_from
from reconcile.inference.priors import build_space
from reconcile.inference.simulate import simulate_readings
from reconcile.model.board import DeviceParam, Signal
from tests.test_sensitivity import MpBoard, MpSignal, random_board

mp.mp.dps = 34
REL_TOL = 1e-6
FIELD = {"resistor": "resistor_ohms", "supply": "supply_volts", "IS": "IS", "beta": "beta",
         "VA": "VA", "n": "n", "capacitor": "capacitor_farads"}


class MpProbeBoard(MpBoard):
    """The board's DC equations with a voltmeter's conductance between two nodes."""

    def __init__(self, circuit, params, probe=None):
        super().__init__(circuit, params)
        self.probe = probe  # (node a, node b, siemens) or None

    def currents(self, vals, v):
        f = super().currents(vals, v)
        if self.probe is not None:
            a, b, g = self.probe
            i = g * (v[a] - v[b])
            f[a] += i
            f[b] -= i
        return f


def _plan(board) -> list[tuple[str, str, str]]:
    """(quantity, at, instrument) of the readings taken on a random board."""
    last = max(int(ref[1:]) for ref in board.transistors)
    return [
        ("voltage", "b0", "dmm-a"),
        ("voltage", "e0", "dmm-a"),
        ("voltage", "e0", "dmm-a"),  # a repeat: the same probe board, the same factor
        ("voltage", "c0/e0", ""),
        ("voltage", f"c{last}", "dmm-b"),
        ("current", "VCC", "dmm-a"),
        ("current", "RC_0", ""),
        ("resistance", "RE_0", "ohmmeter"),
    ]


def _model(board, plan) -> MeasurementModel:
    """The model of readings (quantity, at, instrument[, frequency]) of ``board``."""
    readings = simulate_readings(board, [(e[0], e[1], *e[3:]) for e in plan])
    readings = [dataclasses.replace(r, instrument=e[2])
                for r, e in zip(readings, plan, strict=True)]
    space = build_space(compile_board(board), calibration=calibration_parameters(readings))
    return MeasurementModel(board, observations_from(readings), space)


class Reference:
    """The model's readings predicted in mpmath at internal coordinates (mp numbers)."""

    def __init__(self, model: MeasurementModel, x: np.ndarray) -> None:
        self.model = model
        circuit = model.circuit
        sol = model.solve(x[None, :])
        self.v0 = sol.state.v
        base = model.parameters(x[None, :]).take(slice(0, 1))
        g = mp.mpf(1) / mp.mpf(model.board.bench.voltmeter_ohms)
        self.boards = [MpProbeBoard(circuit, base)]
        for a, b in model.probes:
            self.boards.append(MpProbeBoard(circuit, base,
                                            (circuit.node_index(a), circuit.node_index(b), g)))
        #: board row -> (resistor column, ammeter burden): the ammeter in series with it
        self.burden = {}
        for ref in model.ammeters:
            self.burden[len(self.boards)] = (circuit.resistor_refs.index(ref),
                                             mp.mpf(model.board.bench.ammeter_ohms))
            self.boards.append(MpProbeBoard(circuit, base))
        farads = [mp.mpf(float(f)) for f in base.capacitor_farads[0]]
        for mpb in self.boards:  # a capacitance enters the small-signal network only
            mpb.vals["capacitor_farads"] = list(farads)
        self.signal = MpSignal(circuit, self.boards[0], base)
        self.inverses: list = [None] * len(self.boards)
        self._cache: tuple | None = None

    def external(self, xm):
        out = []
        for fp, value in zip(self.model.space.parameters, xm, strict=True):
            if fp.transform == "log":
                out.append(mp.exp(value))
            elif fp.transform == "log10":
                out.append(mp.mpf(10) ** value)
            else:
                out.append(value)
        return out

    def _solutions(self, ext):
        vals = {k: list(v) for k, v in self.boards[0].vals.items()}
        for fp, e in zip(self.model.space.parameters, ext, strict=True):
            if fp.kind == "temperature":
                vals["temperature"][0] = e
            elif fp.kind in FIELD:
                vals[FIELD[fp.kind]][fp.column] = e
        key = tuple((k, tuple(v)) for k, v in vals.items())
        if self._cache is not None and self._cache[0] == key:
            return vals, self._cache[1]
        out = []
        for i, mpb in enumerate(self.boards):
            own = vals
            if i in self.burden:
                col, ohms = self.burden[i]
                own = {k: list(v) for k, v in vals.items()}
                own["resistor_ohms"][col] += ohms
            v, f, inverse = mpb.solve(own, self.v0[i], self.inverses[i])
            self.inverses[i] = inverse
            out.append((v, f, own))
        self._cache = (key, out)
        return vals, out

    def predict(self, xm) -> list:
        model, circuit = self.model, self.model.circuit
        ext = self.external(xm)
        vals, solved = self._solutions(ext)
        out = []
        for k, (kind, row, what) in enumerate(model.plan):
            v, f, vals = solved[row]
            if kind == "voltage":
                out.append(v[what[0]] - v[what[1]])
            elif kind == "supply_current":
                out.append(f[int(circuit.supply_nodes[what])])
            elif kind == "resistor_current":
                a, b = (int(n) for n in circuit.resistor_nodes[what])
                out.append((v[a] - v[b]) / vals["resistor_ohms"][what])
            elif kind == "parameter":
                out.append(ext[what])
            elif kind == "small_signal":
                out.append(self.signal.quantities(vals, v, self.signal.frequency)[what])
            else:  # small_signal_at: (quantity, index into the model's frequencies)
                name, j = what
                out.append(self.signal.quantities(vals, v, model.frequencies[j])[name])
            c = model.calibration_index[k]
            if c >= 0:
                out[-1] *= ext[c]
        return out

    def columns(self, x: np.ndarray) -> np.ndarray:
        """Central differences (R, P) in internal coordinates, step 1e-12."""
        xm = [mp.mpf(float(v)) for v in x]
        cols = []
        for j in range(len(xm)):
            h = mp.mpf("1e-12") * max(1, abs(xm[j]))
            plus, minus = list(xm), list(xm)
            plus[j] += h
            minus[j] -= h
            cols.append([float((p - m) / (2 * h))
                         for p, m in zip(self.predict(plus), self.predict(minus), strict=True)])
        return np.array(cols).T


def _check(model: MeasurementModel, seed: int) -> np.ndarray:
    """Every analytic row of the model's Jacobian at a random point against mpmath;
    returns the point."""
    space = model.space
    rng = np.random.default_rng(seed)
    x = space.prior_mean + 0.7 * space.prior_sd * rng.standard_normal(space.size)
    _, ours = model.jacobian(x)
    ref = Reference(model, x).columns(x)
    for k in range(len(model.observations)):
        scale = np.max(np.abs(ref[k]))
        err = np.max(np.abs(ours[k] - ref[k]))
        assert err <= REL_TOL * scale, (seed, model.observations[k].quantity,
                                        model.observations[k].at, err / scale)
    return x


def test_analytic_columns_match_mpmath_on_dc_boards():
    """mpmath reference: three random DC-only boards (npn and pnp stages), every
    reading's row, every column (parts, supply, devices, temperature, calibration)."""
    for seed in (11, 12, 13):
        board = random_board(np.random.default_rng(seed))
        assert board.signal.input is None  # no small-signal set-up: DC only
        _check(_model(board, _plan(board)), seed)


@pytest.mark.slow
@pytest.mark.parametrize("block", range(3))
def test_analytic_columns_match_mpmath_many_boards(block):
    """mpmath reference: 15 more random boards (three blocks of five)."""
    for seed in range(100 + 5 * block, 105 + 5 * block):
        board = random_board(np.random.default_rng(seed))
        _check(_model(board, _plan(board)), seed)


def _signal_board(seed: int):
    """A random cascade with a [signal] set-up from the first base to the last
    collector, a finite load, a probe, and devices with ft and c_mu (so Cπ moves with
    gm), and the readings of :func:`_plan` plus small-signal ones at the [signal]
    frequency and at a reading's own."""
    rng = np.random.default_rng(seed)
    board = random_board(rng)
    last = max(int(ref[1:]) for ref in board.transistors)
    devices = {name: dataclasses.replace(d, ft=DeviceParam(float(rng.uniform(50e6, 400e6))),
                                         c_mu=DeviceParam(float(rng.uniform(1e-12, 6e-12))))
               for name, d in board.devices.items()}
    board = dataclasses.replace(
        board, devices=devices,
        signal=Signal(input="b0", output=f"c{last}", source_ohms=float(rng.uniform(50, 2e3)),
                      load_ohms=float(rng.uniform(2e3, 50e3)),
                      frequency=float(rng.uniform(200.0, 20e3))),
        bench=dataclasses.replace(board.bench, probe_ohms=10e6, probe_farads=12e-12))
    plan = _plan(board) + [("gain", "", "scope"), ("input_resistance", "", ""),
                           ("output_resistance", "", ""), ("gain", "", "scope", 3e6),
                           ("input_resistance", "", "", 40.0)]
    if board.capacitors:
        plan.append(("capacitance", next(iter(board.capacitors)), "lcr"))
    return board, plan


@pytest.mark.slow
@pytest.mark.parametrize("seed", (21, 22, 23))
def test_small_signal_rows_match_mpmath(seed):
    """mpmath reference for every row of boards with a [signal] set-up: gain, input and
    output resistance at the [signal] frequency, gain high up where Cπ and c_mu and the
    probe's capacitance matter, input resistance low down where the coupling capacitors
    do; every column (parts, capacitors, supply, devices, temperature, calibration)."""
    board, plan = _signal_board(seed)
    model = _model(board, plan)
    _check(model, seed)


def test_jacobian_keeps_its_shape_and_predictions():
    """self_consistency: predictions returned with the Jacobian are the model's own."""
    board = random_board(np.random.default_rng(31))
    model = _model(board, _plan(board))
    x = model.space.prior_mean
    f0, jac = model.jacobian(x)
    assert jac.shape == (len(model.observations), model.space.size)
    np.testing.assert_array_equal(f0, model.predict(x[None])[0])


def test_a_reading_without_instrument_gets_no_factor():
    """The plan's readings without an instrument keep no calibration column."""
    board = random_board(np.random.default_rng(41))
    model = _model(board, _plan(board))
    keys = [fp.key for fp in model.space.parameters if fp.kind == "calibration"]
    assert keys and all(k.split(":")[0] in {"dmm-a", "dmm-b", "ohmmeter"} for k in keys)
    assert model.calibration_index[3] == -1  # the c0/e0 reading, no instrument
    assert isinstance(model.observations[3].reading, Reading)
