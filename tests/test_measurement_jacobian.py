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

The readings cover voltages with the meter attached (one node, a node pair, a repeat),
a supply current, a resistor current, a part read out of circuit and calibration factors
shared by repeated readings of one instrument, on DC-only boards and on a board with a
small-signal set-up. A resistor's current is read with the ammeter's burden
(``bench.ammeter_ohms``) in series with that resistor, on a board of its own.
"""

from __future__ import annotations

import dataclasses

import mpmath as mp
import numpy as np
import pytest

from reconcile.data.readings import Reading
from reconcile.engine import compile_board
from reconcile.inference.calibration import calibration_parameters
from reconcile.inference.dc_jacobian import analytic_rows
from reconcile.inference.measure import MeasurementModel, observations_from
from reconcile.inference.priors import build_space
from reconcile.inference.simulate import simulate_readings
from reconcile.model.board import Signal
from tests.test_sensitivity import MpBoard, random_board

mp.mp.dps = 34
REL_TOL = 1e-6
FIELD = {"resistor": "resistor_ohms", "supply": "supply_volts", "IS": "IS", "beta": "beta",
         "VA": "VA", "n": "n"}


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
    readings = simulate_readings(board, [(q, at) for q, at, _ in plan])
    readings = [dataclasses.replace(r, instrument=inst)
                for r, (_, _, inst) in zip(readings, plan, strict=True)]
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
            else:  # small signal: not an analytic row, not compared here
                out.append(mp.mpf(0))
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
    rows = analytic_rows(model)
    for k in np.flatnonzero(rows):
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
        model = _model(board, _plan(board))
        assert analytic_rows(model).all()
        _check(model, seed)


@pytest.mark.slow
@pytest.mark.parametrize("block", range(3))
def test_analytic_columns_match_mpmath_many_boards(block):
    """mpmath reference: 15 more random boards (three blocks of five)."""
    for seed in range(100 + 5 * block, 105 + 5 * block):
        board = random_board(np.random.default_rng(seed))
        _check(_model(board, _plan(board)), seed)


def test_analytic_rows_beside_small_signal_rows_and_their_self_consistency():
    """mpmath reference for the DC rows of a board with a [signal] set-up and a gain
    reading; the gain row (forward differences) against a central difference of the
    engine's own predictions (self_consistency of the difference step, 1e-4)."""
    rng = np.random.default_rng(21)
    board = random_board(rng)
    last = max(int(ref[1:]) for ref in board.transistors)
    board = dataclasses.replace(board, signal=Signal(input="b0", output=f"c{last}"))
    plan = _plan(board) + [("gain", "", "scope")]
    model = _model(board, plan)
    rows = analytic_rows(model)
    assert rows[:-1].all() and not rows[-1]
    x = _check(model, 21)
    _, ours = model.jacobian(x)
    h = 1e-5
    central = np.empty(ours.shape[1])
    for j in range(ours.shape[1]):
        xp, xm = x.copy(), x.copy()
        xp[j] += h
        xm[j] -= h
        central[j] = (model.predict(xp[None])[0, -1] - model.predict(xm[None])[0, -1]) / (2 * h)
    assert np.max(np.abs(ours[-1] - central)) <= 1e-4 * np.max(np.abs(central))


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
