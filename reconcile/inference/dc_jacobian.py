"""Analytic Jacobian of the DC readings in the fit's internal coordinates.

The measurement model (:mod:`reconcile.inference.measure`) predicts DC voltages (with
the voltmeter attached), supply currents and resistor currents from one engine solve of
the board, one board per probe position and one per resistor read through an
ammeter. Their derivatives come from that same solve: :func:`reconcile.engine.sensitivity.dc_sensitivity` gives d(reading)/d(engine
parameter) by the implicit function theorem for the board alone, and
:func:`~reconcile.engine.sensitivity.dc_functional_sensitivity` the row of each voltage
read with the meter attached from its own probe board (one adjoint solve each); the
rows of a current read through an ammeter come from the forward sensitivities of that
ammeter's board; the chain rule takes them to the internal coordinates of
:class:`~reconcile.inference.priors.ParameterSpace`:

    d(reading)/dx_j = d(reading)/d(external_j) · d(external_j)/dx_j,

the slope being ``FreeParameter.external_slope`` (e^x for ln R, ln 10·10^x for
log10 IS, 1 for a supply's volts, n or the temperature). A part read out of circuit is
that parameter: its row is the slope. Capacitances do not move the DC solution (their
columns are zero here), and a calibration factor does not touch the board: the rows
returned are those of the raw, unscaled predictions, and
:func:`apply_calibration` then scales each row of a reading predicted times its
instrument's factor c (c·df/dx) and fills the factor's own column (f·dc/dx).

Small-signal readings (gain, source gain, input and output resistance) are not covered
here: their rows are zero, and :mod:`reconcile.inference.signal_jacobian` fills them,
analytically too, from the node derivatives dV/dx this module returns.
"""

from __future__ import annotations

from typing import Protocol

import numpy as np

from reconcile.engine import BatchSolution
from reconcile.engine.dc import DCState
from reconcile.engine.sensitivity import dc_functional_sensitivity, dc_sensitivity
from reconcile.engine.circuit import Circuit
from reconcile.inference.priors import ParameterSpace


class MeasurementModel(Protocol):
    """What this module reads of :class:`reconcile.inference.measure.MeasurementModel`
    (a protocol, so the model can import this module without a cycle)."""

    circuit: Circuit
    space: ParameterSpace
    plan: list[tuple[str, int, object]]
    probes: tuple[tuple[str, str], ...]
    group: int
    observations: list
    calibration_index: np.ndarray

#: parameter kinds whose external value is an engine DC parameter, and its field
DC_FIELD = {"resistor": "resistor_ohms", "supply": "supply_volts", "IS": "IS",
            "beta": "beta", "VA": "VA", "n": "n", "temperature": "temperature"}
#: plan kinds read from the engine's DC solution (the rest are parameters or constants)
DC_KINDS = frozenset({"voltage", "supply_current", "resistor_current"})


def external_slopes(model: MeasurementModel, x: np.ndarray) -> np.ndarray:
    """d(external value)/dx (M, P) of every parameter at internal x (M, P)."""
    slope = np.empty(x.shape)
    for j, fp in enumerate(model.space.parameters):
        slope[:, j] = fp.external_slope(x[:, j])
    return slope


def engine_columns(model: MeasurementModel, fields: dict[str, str] = DC_FIELD
                   ) -> tuple[list[tuple[str, int]], np.ndarray]:
    """Engine columns ``(field, column)`` of the space's parameters whose kind ``fields``
    names (by default the DC ones), and their indices in the space."""
    cols, owners = [], []
    for j, fp in enumerate(model.space.parameters):
        field = fields.get(fp.kind)
        if field is not None:
            cols.append((field, 0 if fp.kind == "temperature" else fp.column))
            owners.append(j)
    return cols, np.array(owners, dtype=np.intp)


def _row_derivative(model: MeasurementModel, sens, kind: str, what) -> np.ndarray:
    """d(raw prediction)/d(engine columns) (M, C) of one DC reading of the boards alone."""
    if kind == "voltage":
        a, b = what
        n_nodes = model.circuit.n_nodes
        zero = np.zeros(sens.node_v.shape[::2])
        da = sens.node_v[:, a] if a < n_nodes else zero
        db = sens.node_v[:, b] if b < n_nodes else zero
        return da - db
    if kind == "supply_current":
        return sens.supply_current[:, what]
    return sens.resistor_current[:, what]


def _probe_derivatives(model: MeasurementModel, solution: BatchSolution,
                       cols: tuple[tuple[str, int], ...], m: int) -> np.ndarray:
    """d(V(a) − V(b))/d(engine columns) (M, K, C) on each probe board k of each of the M
    groups, its own probe's two nodes, by the adjoint form (one transposed solve per
    probe board)."""
    c = model.circuit
    k = len(model.probes)
    weights = np.zeros((k, c.n_nodes + 1))
    for i, (a, b) in enumerate(model.probes):
        weights[i, c.node_index(a)] += 1.0
        weights[i, c.node_index(b)] -= 1.0
    weights[:, c.gnd] = 0.0
    rows = (np.arange(m)[:, None] * model.group + np.arange(1, 1 + k)[None, :]).ravel()
    if m == 1:
        rows = slice(1, 1 + k)  # the same boards, viewed rather than copied
    newton = None if solution.newton_matrix is None else solution.newton_matrix[rows]
    out = dc_functional_sensitivity(c, solution.params.take(rows), _rows(solution.state, rows),
                                    np.tile(weights, (m, 1)), cols, newton)
    return out.reshape(m, k, -1)


def dc_jacobian(model: MeasurementModel, x: np.ndarray, solution: BatchSolution, *,
                node_derivatives: bool = False) -> tuple[np.ndarray, np.ndarray | None]:
    """The Jacobian (R, P) of the raw (unscaled) predictions at internal x (P,) in the
    rows of the DC readings and the parts read out of circuit (small-signal rows zero); ``solution`` is the model's
    engine solution at x (one group of boards: the board alone, one board per probe,
    one per ammeter). With ``node_derivatives``, also dV/dx (n_nodes + 1, P) of every node of the
    board alone (gnd last, 0), else None.

    Batched: x (M, P) and a solution of M groups (M·group boards, in the order
    :meth:`MeasurementModel.parameters` lays them out; the boards' engine parameters
    are the solution's own, so a caller may have changed some, as a fault hypothesis
    does) give (M, R, P) and (M, n_nodes + 1, P).

    Readings of the board alone (currents, voltages when the meter is not modelled) take
    their rows from the forward sensitivities of that one board; a voltage read with
    the meter attached is the one function V(a) − V(b) of its probe board, whose row
    comes from one adjoint solve of that board."""
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        jac, dv = dc_jacobian(model, x[None, :], solution, node_derivatives=node_derivatives)
        return jac[0], None if dv is None else dv[0]
    m, p = x.shape
    slope = external_slopes(model, x)
    jac = np.zeros((m, len(model.observations), p))
    cols, owners = engine_columns(model)
    cols = tuple(cols)
    plan = model.plan
    base = [k for k, (kind, row, _) in enumerate(plan) if kind in DC_KINDS and row == 0]
    probed = [k for k, (kind, row, _) in enumerate(plan) if kind == "voltage" and row > 0]
    metered = [k for k, (kind, row, _) in enumerate(plan)
               if kind == "resistor_current" and row > 0]
    dv = np.zeros((m, model.circuit.n_nodes + 1, p)) if node_derivatives else None
    if cols and (base or node_derivatives):
        alone = slice(0, m * model.group, model.group)  # row 0 of each group, as views
        sens = dc_sensitivity(model.circuit, solution.params.take(alone),
                              _rows(solution.state, alone), cols,
                              None if solution.newton_matrix is None
                              else solution.newton_matrix[alone])
        for k in base:
            kind, _, what = plan[k]
            jac[:, k, owners] = _row_derivative(model, sens, kind, what) * slope[:, owners]
        if dv is not None:
            dv[:, :-1, owners] = sens.node_v * slope[:, None, owners]
    if cols and probed:
        d_probe = _probe_derivatives(model, solution, cols, m)
        for k in probed:
            jac[:, k, owners] = d_probe[:, plan[k][1] - 1] * slope[:, owners]
    if cols and metered:
        _ammeter_rows(model, solution, cols, metered, owners, slope, jac)
    for k, (kind, _, what) in enumerate(plan):
        if kind == "parameter":
            jac[:, k, what] = slope[:, what]
    return jac, dv


def _ammeter_rows(model: MeasurementModel, solution: BatchSolution, cols, metered: list[int],
                  owners: np.ndarray, slope: np.ndarray, jac: np.ndarray) -> None:
    """Rows (of each of the M groups) of the currents read through an ammeter, in place:
    the forward sensitivities of each ammeter's own board (its resistor carrying the
    burden in series, whose column is then the resistor's own: d(R + r)/dR = 1)."""
    m = jac.shape[0]
    rows = np.array(sorted({model.plan[k][1] for k in metered}), dtype=np.intp)
    boards = (np.arange(m)[:, None] * model.group + rows[None, :]).ravel()
    newton = None if solution.newton_matrix is None else solution.newton_matrix[boards]
    sens = dc_sensitivity(model.circuit, solution.params.take(boards),
                          _rows(solution.state, boards), cols, newton)
    current = sens.resistor_current.reshape(m, len(rows), *sens.resistor_current.shape[1:])
    for k in metered:
        _, row, what = model.plan[k]
        i = int(np.searchsorted(rows, row))
        jac[:, k, owners] = current[:, i, what] * slope[:, owners]


def _rows(state: DCState, rows: np.ndarray) -> DCState:
    """Some samples of a solved state."""
    return DCState(v=state.v[rows], vj=state.vj[rows], converged=state.converged[rows],
                   iterations=state.iterations[rows])


def apply_calibration(model: MeasurementModel, x: np.ndarray, f0: np.ndarray,
                      jac: np.ndarray) -> None:
    """Rows of readings predicted times a calibration factor c, in place: c·df/dx, and
    f·dc/dx = f0 (the scaled prediction, since dc/d(ln c) = c) in the factor's column.
    One point (x (P,), f0 (R,), jac (R, P)) or a batch (a leading axis M on each)."""
    cal = model.calibration_index
    ext = model.space.external(np.atleast_2d(np.asarray(x, dtype=float)))
    if np.ndim(x) == 1:
        ext = ext[0]
    for k in np.flatnonzero(cal >= 0):
        c = cal[k]
        jac[..., k, :] *= ext[..., c, None]
        jac[..., k, c] = f0[..., k]
