"""Analytic Jacobian rows of the small-signal readings in the fit's internal coordinates.

A gain, source gain, input or output resistance, at the ``[signal]`` frequency or at a
reading's own, is predicted from the board alone of each group
(:mod:`reconcile.inference.measure`). Its row is
:func:`reconcile.engine.small_signal_sensitivity.small_signal_sensitivity` of that board:
two solves and two transposed solves of its complex nodal matrix per frequency, the
operating point's movement entering through the DC node derivatives dV/dx that
:func:`reconcile.inference.dc_jacobian.dc_jacobian` returns for the same board, and each
parameter's own terms taken to the internal coordinates by its ``external_slope``
(as for the DC rows). A capacitance moves no DC voltage (its dV/dx is zero) but enters
the matrix as jω·C; a calibration factor touches no board (its column is filled by
:func:`~reconcile.inference.dc_jacobian.apply_calibration`).

The engine parameters are the solution's own, so a fault hypothesis's overrides are in
them (its held parts' columns are then zeroed by the caller, as for the DC rows).
"""

from __future__ import annotations

import numpy as np

from reconcile.engine import BatchSolution
from reconcile.engine.small_signal_sensitivity import small_signal_sensitivity
from reconcile.inference.dc_jacobian import (DC_FIELD, MeasurementModel, engine_columns,
                                             external_slopes)

#: plan kinds of the small-signal readings
SIGNAL_KINDS = frozenset({"small_signal", "small_signal_at"})
#: parameter kinds whose external value is an engine parameter the AC matrix reads
SIGNAL_FIELD = {**DC_FIELD, "capacitor": "capacitor_farads"}


def signal_rows(model: MeasurementModel) -> list[int]:
    """Indices of the readings predicted from the small-signal solution."""
    return [k for k, (kind, _, _) in enumerate(model.plan) if kind in SIGNAL_KINDS]


def fill_signal_rows(model: MeasurementModel, x: np.ndarray, solution: BatchSolution,
                     node_derivatives: np.ndarray, jac: np.ndarray) -> None:
    """The small-signal rows of ``jac`` (M, R, P) at internal x (M, P), in place.

    ``solution`` is the engine solution of the M groups at x, ``node_derivatives``
    (M, n_nodes + 1, P) dV/dx of each group's board alone."""
    rows = signal_rows(model)
    if not rows:
        return
    m = x.shape[0]
    cols, owners = engine_columns(model, SIGNAL_FIELD)
    alone = slice(0, m * model.group, model.group)  # row 0 of each group, as views
    freq = np.column_stack([solution.params.frequency[alone]]
                           + [np.full(m, f) for f in model.frequencies])
    sens = small_signal_sensitivity(
        solution.linear_at(alone), solution.state.v[alone], freq, cols,
        node_derivatives[:, :, owners], external_slopes(model, x)[:, owners])
    for k in rows:
        kind, _, what = model.plan[k]
        name, at = (what, 0) if kind == "small_signal" else (what[0], what[1] + 1)
        jac[:, k, owners] = sens[name][:, at, :]
