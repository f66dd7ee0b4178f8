"""How each reading is predicted: the measurement model.

Every reading is predicted the way it was taken:

* a DC ``voltage`` with the voltmeter (``bench.voltmeter_ohms``) attached across the two
  nodes it was read between — a separate solve per distinct probe position, all in the
  same batched engine call;
* a ``current`` at a supply from the board with no meter attached (the supply's own
  read-back); a ``current`` through a resistor with the ammeter in series, its burden
  ``bench.ammeter_ohms`` added to that resistor on a board of its own (one per resistor
  read);
* ``gain``, ``input_resistance`` and ``output_resistance`` with the [signal] set-up:
  the generator's source resistance and the load, as the contract defines them, each at
  its own ``frequency`` (blank: ``[signal] frequency``); the distinct frequencies of a
  set of readings are one batched AC response (``LinearModel.response``) per call;
* ``resistance`` and ``capacitance`` of a part measured out of circuit are direct
  readings of that parameter.

A reading whose instrument's range has a calibration factor in the parameter space is
predicted times that factor (:mod:`reconcile.inference.calibration`).

A ``temperature`` reading is the ambient; it sets the prior of the junction
temperature (see :mod:`reconcile.priors`) and is not predicted.

For M parameter vectors the model runs one engine call of M·(1 + K + A) boards, K being
the number of distinct probe positions and A the resistors whose current is read: row 0
of each group is the board alone, row k the board with probe k attached, row K + a the
board with the ammeter in series with resistor a.

The Jacobian (:meth:`MeasurementModel.jacobian`) is analytic in every row, from the
one solved group: DC readings and parts read out of circuit by the engine's
implicit-function sensitivities (:mod:`reconcile.inference.dc_jacobian`), small-signal
readings at any frequency by the adjoint of the board's complex nodal matrix with the
operating point's movement (:mod:`reconcile.inference.signal_jacobian`), both taken to
the internal coordinates by the chain rule; the calibration factors' columns are exact.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reconcile.model import quantities
from reconcile.model.board import GND, Board
from reconcile.engine import BatchSolution, DCState, compile_board, nominal_parameters, solve_batch
from reconcile.engine.batch import bytes_per_board
from reconcile.engine.budget import chunks, rows_per_chunk
from reconcile.inference.calibration import calibration_map
from reconcile.inference.dc_jacobian import apply_calibration, dc_jacobian
from reconcile.inference.signal_jacobian import fill_signal_rows
from reconcile.inference.priors import ParameterSpace, build_space
from reconcile.data.readings import Reading, standard_uncertainty

#: quantities the model predicts, and those of them read with the [signal] set-up
#: (both from the registry, :mod:`reconcile.model.quantities`)
PREDICTED = quantities.names(predicted=True)
SMALL_SIGNAL = quantities.names(predicted=True, kind=quantities.QuantityKind.SMALL_SIGNAL)


def probe_nodes(at: str) -> tuple[str, str]:
    """The two nodes a voltage reading sits between (``a`` means ``a/gnd``)."""
    if "/" in at:
        a, b = at.split("/", 1)
        return a.strip(), b.strip()
    return at.strip(), GND


@dataclass(frozen=True)
class Observation:
    """A reading as the model sees it: what to predict, the value and its uncertainty."""

    quantity: str
    at: str
    measured: float
    uncertainty: float
    reading: Reading | None = None
    frequency: float | None = None  # small-signal: Hz; None for [signal] frequency


def observations_from(readings: list[Reading], board: Board | None = None) -> list[Observation]:
    """Readings the model predicts (temperature readings excluded); ``board`` tells a
    supply's current read-back from an ammeter's for the default uncertainties."""
    out = []
    for r in readings:
        if r.quantity not in PREDICTED:
            continue
        out.append(Observation(r.quantity, r.at, r.value, standard_uncertainty(r, board), r,
                               r.frequency))
    return out


def ambient_from(readings: list[Reading]) -> tuple[float | None, float | None]:
    """The mean ambient temperature reading (K) and its standard uncertainty, if any."""
    temps = [r for r in readings if r.quantity == "temperature"]
    if not temps:
        return None, None
    values = np.array([r.value for r in temps])
    u = np.array([standard_uncertainty(r) for r in temps])
    w = 1.0 / u**2
    return float(np.sum(w * values) / np.sum(w)), float(1.0 / np.sqrt(np.sum(w)))


def moved_to_first_order(v: np.ndarray, dv: np.ndarray, dx: np.ndarray) -> np.ndarray:
    """Warm starts moved to first order: the node voltages v (M, G, n_nodes + 1) of M
    groups of boards, solved at x, as they stand at x + dx (M, P) by dV/dx (M,
    n_nodes + 1, P) of each group's board alone, V + dV/dx·dx, every board of a group
    by the same amount (a meter moves an operating point by parts per thousand). A
    group whose shift is not finite keeps its voltages. The junction voltages are the
    caller's to keep as solved, so Newton's junction limiting measures its first step
    from a point it has solved."""
    shift = np.einsum("mnp,mp->mn", dv, dx)
    shift[~np.isfinite(shift).all(axis=1)] = 0.0
    return v + shift[:, None, :]


class MeasurementModel:
    """Predicts a list of observations for many parameter vectors in one engine call."""

    def __init__(
        self,
        board: Board,
        observations: list[Observation],
        space: ParameterSpace | None = None,
        *,
        model_meter: bool = True,
    ) -> None:
        self.board = board
        self.observations = observations
        self.model_meter = model_meter
        probes: list[tuple[str, str]] = []
        for ob in observations:
            if ob.quantity == "voltage" and model_meter:
                pair = probe_nodes(ob.at)
                if pair not in probes:
                    probes.append(pair)
        self.probes = tuple(probes)
        #: resistors whose current is read through an ammeter with a burden
        self.ammeters = tuple(dict.fromkeys(
            ob.at for ob in observations
            if ob.quantity == "current" and ob.at in board.resistors and model_meter
            and board.bench.ammeter_ohms > 0.0))
        self.circuit = compile_board(board, self.probes)
        self.space = space if space is not None else build_space(self.circuit)
        if self.space.circuit is not self.circuit:
            # Rebuild the space on this circuit (same parameters, probes added).
            self.space = ParameterSpace(self.circuit, self.space.parameters)
        self.group = 1 + len(self.probes) + len(self.ammeters)
        self.base = nominal_parameters(self.circuit, 1)
        self._state: DCState | None = None
        #: where the kept state was solved (one vector), and dV/dx of the board alone
        #: at the last Jacobian: the next warm start is moved to first order by it
        self._state_x: np.ndarray | None = None
        self._state_dv: np.ndarray | None = None
        self._last: tuple[bytes, BatchSolution] | None = None
        #: distinct frequencies small-signal readings were taken at (other than [signal])
        self.frequencies = tuple(sorted({ob.frequency for ob in observations
                                         if ob.quantity in SMALL_SIGNAL
                                         and ob.frequency is not None}))
        self.plan = [self._plan_one(ob) for ob in observations]
        self._measured = np.array([ob.measured for ob in observations])
        #: readings with small-signal predictions (indices into the observations)
        self._signal_plan = [k for k, (kind, _, _) in enumerate(self.plan)
                             if kind in ("small_signal", "small_signal_at")]
        self.calibration_index, self._random_u = calibration_map(
            self.space, [ob.reading for ob in observations],
            np.array([ob.uncertainty for ob in observations], dtype=float),
        )
        #: the voltage readings: their indices, board rows in the group and nodes
        voltages = [(k, row, *what) for k, (kind, row, what) in enumerate(self.plan)
                    if kind == "voltage"]
        self._voltage_plan = tuple(np.array([v[i] for v in voltages], dtype=np.intp)
                                   for i in range(4))
        #: parameters whose external value a prediction reads directly
        self._direct_columns = sorted(
            {what for kind, _, what in self.plan if kind == "parameter"}
            | {int(c) for c in self.calibration_index if c >= 0})

    # ------------------------------------------------------------------ set-up
    def _plan_one(self, ob: Observation) -> tuple[str, int, object]:
        c = self.circuit
        q = ob.quantity
        if q == "voltage":
            a, b = probe_nodes(ob.at)
            row = 1 + self.probes.index((a, b)) if self.model_meter else 0
            return ("voltage", row, (c.node_index(a), c.node_index(b)))
        if q == "current":
            if ob.at in c.supply_refs:
                return ("supply_current", 0, c.supply_refs.index(ob.at))
            row = (1 + len(self.probes) + self.ammeters.index(ob.at)
                   if ob.at in self.ammeters else 0)
            return ("resistor_current", row, c.resistor_refs.index(ob.at))
        if q in SMALL_SIGNAL:
            if ob.frequency is not None:
                return ("small_signal_at", 0, (q, self.frequencies.index(ob.frequency)))
            return ("small_signal", 0, q)
        if q in ("resistance", "capacitance"):
            key = ob.at
            if key in self.space.keys:
                return ("parameter", 0, self.space.index(key))
            kind = "resistor_ohms" if q == "resistance" else "capacitor_farads"
            refs = c.resistor_refs if q == "resistance" else c.capacitor_refs
            return ("fixed", 0, (kind, refs.index(key)))
        raise ValueError(f"cannot predict quantity {q!r}")

    @property
    def measured(self) -> np.ndarray:
        return self._measured.copy()

    @property
    def uncertainty(self) -> np.ndarray:
        """Each reading's own (independent) uncertainty: the part its instrument's
        calibration factor does not carry (:mod:`reconcile.inference.calibration`)."""
        return self._random_u.copy()

    # --------------------------------------------------------------- predict
    def rows_per_call(self) -> int:
        """Parameter vectors per engine call within half the memory budget (each is
        :attr:`group` boards; the solution is held while the predictions are read)."""
        return rows_per_chunk(self.group * bytes_per_board(self.circuit), share=0.5)

    def parameters(self, x: np.ndarray, board_change=None):
        """Engine parameters for M internal vectors: M·group rows.

        ``board_change(p)``, if given, changes the boards themselves (M·group rows, e.g.
        a fault hypothesis holding a resistor) before the meters are attached, so the
        voltmeter and the ammeter's burden are added to the board as changed."""
        x = np.atleast_2d(x)
        p = self.space.to_parameters(x, self.base, repeat=self.group)
        if board_change is not None:
            p = board_change(p)
        meters = {}  # new arrays of the fields the meters change, set in one copy of p
        if self.probes:
            g = 1.0 / self.board.bench.voltmeter_ohms
            probe = np.zeros((x.shape[0] * self.group, len(self.probes)))
            k = len(self.probes)
            rows = np.arange(x.shape[0])[:, None] * self.group + np.arange(1, 1 + k)[None, :]
            probe[rows, np.arange(len(self.probes))[None, :]] = g
            meters["probe_siemens"] = probe
        if self.ammeters:
            ohms = p.resistor_ohms.copy()
            first = 1 + len(self.probes)
            for a, ref in enumerate(self.ammeters):
                rows = np.arange(x.shape[0]) * self.group + first + a
                ohms[rows, self.circuit.resistor_refs.index(ref)] += self.board.bench.ammeter_ohms
            meters["resistor_ohms"] = ohms
        return p.with_arrays(**meters) if meters else p

    def _signal_rows(self, m: int) -> np.ndarray:
        """Rows of M groups whose small-signal results a prediction reads: the board
        alone of each group, or none without small-signal readings."""
        if not self._signal_plan:
            return np.zeros(0, dtype=np.intp)
        return np.arange(m) * self.group

    def solve(self, x: np.ndarray, *, warm: bool = True) -> BatchSolution:
        """The engine solution for M internal vectors (M·group rows); the last solve of
        one vector is kept and returned again for the same vector (the fit asks for
        the residuals, then the Jacobian, at the same point)."""
        x = np.atleast_2d(np.asarray(x, dtype=float))
        if x.shape[0] == 1 and self._last is not None and self._last[0] == x.tobytes():
            return self._last[1]
        params = self.parameters(x)
        initial = None
        if warm and self._state is not None:
            initial = self._moved_state(x)
            if initial.v.shape[0] != params.n_samples:
                reps = params.n_samples // initial.v.shape[0]
                if reps * initial.v.shape[0] == params.n_samples:
                    initial = DCState(
                        v=np.tile(initial.v, (reps, 1)),
                        vj=np.tile(initial.vj, (reps, 1, 1)),
                        converged=np.tile(initial.converged, reps),
                        iterations=np.tile(initial.iterations, reps),
                    )
                else:
                    initial = None
        sol = solve_batch(self.circuit, params, initial,
                          small_signal=self._signal_rows(x.shape[0]))
        if x.shape[0] == 1:
            self._last = (x.tobytes(), sol)
        if x.shape[0] == 1 or self._state is None:
            self._state = DCState(
                v=sol.state.v[: self.group].copy(),
                vj=sol.state.vj[: self.group].copy(),
                converged=sol.state.converged[: self.group].copy(),
                iterations=sol.state.iterations[: self.group].copy(),
            )
            self._state_x = x[0].copy()
        return sol

    def _moved_state(self, x: np.ndarray) -> DCState:
        """The kept state as the warm start for one vector x, its node voltages moved to
        first order, V + dV/dx·(x − x_solved), by the last Jacobian's dV/dx of the board
        alone (the probe boards by the same amount: a meter moves them by parts per
        thousand); the junction voltages stay those solved, so Newton's junction
        limiting measures its first step from a point it has solved. Several vectors,
        or no Jacobian yet: the state as it is."""
        state = self._state
        if x.shape[0] != 1 or self._state_dv is None or self._state_x is None:
            return state
        v = moved_to_first_order(state.v[None], self._state_dv[None],
                                 (x[0] - self._state_x)[None])[0]
        return DCState(v=v, vj=state.vj, converged=state.converged,
                       iterations=state.iterations)

    def predict(self, x: np.ndarray, *, solution: BatchSolution | None = None) -> np.ndarray:
        """Predicted observations (M, R) for internal vectors x (M, P); NaN where the
        engine found no operating point."""
        x = np.atleast_2d(x)
        m = x.shape[0]
        if solution is None and m > self.rows_per_call():
            return np.concatenate([self.predict(x[sl]) for sl in chunks(m, self.rows_per_call())])
        sol = solution if solution is not None else self.solve(x)
        ext = self._external_columns(x)
        out = np.empty((m, len(self.observations)))
        base_rows = np.arange(m) * self.group
        if self._signal_plan:
            out[:, self._signal_plan] = self._small_signal_values(sol, base_rows,
                                                                  self._signal_plan)
        if len(self._voltage_plan[0]):
            # every voltage at once: V(a) − V(b) of its board (gnd's column is 0 V)
            ks, row_of, a, b = self._voltage_plan
            rows = base_rows[:, None] + row_of[None, :]
            out[:, ks] = sol.state.v[rows, a] - sol.state.v[rows, b]
        for k, (kind, row, what) in enumerate(self.plan):
            rows = base_rows + row
            if kind == "supply_current":
                out[:, k] = sol.supply_current[rows, what]
            elif kind == "resistor_current":
                out[:, k] = sol.resistor_current[rows, what]
            elif kind == "parameter":
                out[:, k] = ext[:, what]
            elif kind == "fixed":
                name, col = what
                out[:, k] = getattr(self.base, name)[0, col]
        scaled = self.calibration_index >= 0
        if scaled.any():
            out[:, scaled] *= ext[:, self.calibration_index[scaled]]
        bad = ~sol.converged.reshape(m, self.group).all(axis=1)
        out[bad] = np.nan
        return out

    def _external_columns(self, x: np.ndarray) -> np.ndarray:
        """External values (M, P) of the parameters a prediction reads directly (parts
        read out of circuit, calibration factors), each as ``space.external`` gives
        it; the other columns are left unset."""
        out = np.empty(x.shape)
        for j in self._direct_columns:
            out[:, j] = self.space.parameters[j].to_external(x[:, j])
        return out

    def _small_signal_values(self, sol: BatchSolution, base_rows: np.ndarray,
                             rows: list[int]) -> np.ndarray:
        """Raw predictions (M, len(rows)) of the small-signal readings ``rows`` from
        the boards ``base_rows`` of ``sol`` (each the board alone)."""
        out = np.empty((len(base_rows), len(rows)))
        at_freq = None
        if self.frequencies and sol.linear is not None:  # (M, F): the board alone
            alone = slice(0, len(base_rows) * self.group, self.group)  # base_rows, as views
            at_freq = sol.linear.take(alone).response(np.array(self.frequencies))
        for i, k in enumerate(rows):
            kind, _, what = self.plan[k]
            if kind == "small_signal":
                out[:, i] = getattr(sol.small_signal, what)[base_rows]
            else:
                name, j = what
                out[:, i] = getattr(at_freq, name)[:, j]
        return out

    def jacobian(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Predictions at x (R,) and their Jacobian (R, P) in internal coordinates.

        Every row is analytic, from the one engine solve of the predictions: DC
        readings and parts read out of circuit by :mod:`reconcile.inference.dc_jacobian`,
        small-signal readings by :mod:`reconcile.inference.signal_jacobian` from the
        same board's node derivatives; calibration columns are exact (a scaled reading
        is linear in its factor)."""
        x = np.asarray(x, dtype=float).ravel()
        sol = self.solve(x[None, :])
        f0 = self.predict(x[None, :], solution=sol)[0]
        raw, dv = self.raw_jacobian(x[None, :], sol)
        jac = raw[0]
        self._state_dv = dv[0] if np.isfinite(dv[0]).all() else None
        apply_calibration(self, x, f0, jac)
        bad = ~np.isfinite(f0)
        jac[bad] = np.nan
        return f0, jac

    def raw_jacobian(self, x: np.ndarray, solution: BatchSolution
                     ) -> tuple[np.ndarray, np.ndarray]:
        """The Jacobian (M, R, P) of the raw (unscaled) predictions at internal x (M, P),
        ``solution`` being the engine solution there (M groups; its engine parameters
        are used as they are, so a caller may have changed some, as a fault hypothesis
        does), and dV/dx (M, n_nodes + 1, P) of each group's board alone."""
        jac, dv = dc_jacobian(self, x, solution, node_derivatives=True)
        fill_signal_rows(self, x, solution, dv, jac)
        return jac, dv
