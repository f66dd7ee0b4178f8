"""One call, N boards: DC operating point, derived quantities and small signal.

:func:`solve_batch` is the engine's single entry point; solve, fit, diagnose, trim, lot
and capture all go through it.
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np

from reconcile.engine import devices
from reconcile.engine.circuit import FLOAT_SIEMENS, Circuit, Parameters
from reconcile.engine.dc import DCState, _Batch, solve_dc
from reconcile.engine.small_signal import LinearModel, SmallSignal

RO_INFINITE_OHMS = 1e15
"""An output resistance above this is reported as infinite (null in JSON)."""


@dataclass(frozen=True)
class BatchSolution:
    """Everything the engine computed, with a leading sample axis of length N.

    Transistor currents are signed, into each terminal; ``vbe`` and ``vce`` are
    V(b) − V(e) and V(c) − V(e) as measured (negative for a forward-active pnp).
    ``region`` indexes :data:`reconcile.devices.REGIONS`.
    """

    circuit: Circuit
    params: Parameters
    state: DCState
    node_v: np.ndarray  # (N, n_nodes)
    ic: np.ndarray  # (N, nT)
    ib: np.ndarray
    ie: np.ndarray
    vbe: np.ndarray
    vce: np.ndarray
    region: np.ndarray
    gm: np.ndarray
    rpi: np.ndarray
    ro: np.ndarray
    transistor_power: np.ndarray
    supply_current: np.ndarray  # (N, nS) delivered into the board
    resistor_current: np.ndarray  # (N, nR) from nodes[0] to nodes[1]
    resistor_power: np.ndarray  # (N, nR)
    kcl_residual: np.ndarray  # (N,) largest |KCL error| over free nodes, A
    small_signal: SmallSignal | None
    linear: LinearModel | None = None  # for AC responses at other frequencies (sweeps)
    #: (N, nF, nF) the free-node Newton matrix at the solution, floating-node ties
    #: included: :func:`reconcile.engine.dc.jacobian_at` without building it again
    newton_matrix: np.ndarray | None = None

    @property
    def converged(self) -> np.ndarray:
        return self.state.converged

    def take_dc(self, index: np.ndarray) -> BatchSolution:
        """The DC solution of some samples (their parameters, state, derived quantities
        and Newton matrix); small-signal results and the linear model are left out."""
        st = self.state
        state = DCState(v=st.v[index], vj=st.vj[index], converged=st.converged[index],
                        iterations=st.iterations[index],
                        is_t=None if st.is_t is None else st.is_t[index])
        arrays = {f.name: getattr(self, f.name)[index] for f in fields(self)
                  if isinstance(getattr(self, f.name), np.ndarray)}
        return replace(self, params=self.params.take(index), state=state, small_signal=None,
                       linear=None, **arrays)

    def linear_at(self, index: np.ndarray) -> LinearModel:
        """The linear model of some samples: the solve's own, or, when it made none
        (``small_signal=False``), the Newton matrix at the solution without the DC tie
        of floating nodes, which is the same matrix."""
        if self.linear is not None:
            return self.linear.take(index)
        jac_ff = self.newton_matrix[index]
        floating = self.circuit.free_position[self.circuit.dc_floating]
        if len(floating):
            jac_ff = jac_ff.copy()
            jac_ff[:, floating, floating] -= FLOAT_SIEMENS
        return LinearModel(self.circuit, self.params.take(index), jac_ff, self.gm[index])

    @property
    def n_samples(self) -> int:
        return self.params.n_samples

    def voltage(self, node: str) -> np.ndarray:
        """V(node) for every sample (0 for gnd)."""
        i = self.circuit.node_index(node)
        if i == self.circuit.gnd:
            return np.zeros(self.n_samples)
        return self.node_v[:, i]

    def quantity(self, name: str) -> np.ndarray:
        """A small-signal quantity by name (gain, input_resistance, ...)."""
        if self.small_signal is None:
            raise KeyError("the board has no [signal] set-up")
        return getattr(self.small_signal, name)


def bytes_per_board(circuit: Circuit) -> int:
    """Peak working memory of :func:`solve_batch` per board, bytes (an upper estimate).

    The real and complex nodal matrices and their LAPACK copies dominate (about 40
    bytes per entry of the nF × nF free-node system); the rest is per-node and
    per-part vectors, the parameters included. Fitted to ``tracemalloc`` peaks of the
    sample boards (2.4 kB per board for ``preamp_ce``) with a margin of about 20 %.
    """
    n_f = len(circuit.free)
    n_b = len(circuit.branch_nodes)
    n_t = len(circuit.transistor_refs)
    return int(48 * n_f * n_f + 64 * (circuit.n_nodes + 1) + 264 * n_t + 48 * n_b + 320)


def solve_batch(
    circuit: Circuit,
    params: Parameters,
    initial: DCState | None = None,
    *,
    small_signal: bool | np.ndarray = True,
) -> BatchSolution:
    """Solve every sample of ``params`` on ``circuit``.

    ``small_signal``: True for the small-signal results of every sample, False for none,
    or an index array of the samples that need them (the rest are NaN; the linear model
    still covers every sample)."""
    batch = _Batch(circuit, params)
    state = solve_dc(circuit, params, initial, batch=batch)
    v = state.v
    vbe_n, vbc_n = batch.junctions(v)
    # the devices at the solution, once: the final linear system and the outputs read them
    st = batch.device_state(slice(None), vbe_n, vbc_n) if len(circuit.transistor_refs) else None
    jac_ff, rhs, kcl = _final_linear_system(batch, params, v, vbe_n, vbc_n, st)
    leaving_fixed = batch.current_out_of_fixed(v)  # (N, n_fixed) through branches
    tr = _transistor_outputs(batch, circuit, params, v, vbe_n, vbc_n, leaving_fixed, st)

    rn = circuit.resistor_nodes
    dv = v[:, rn[:, 0]] - v[:, rn[:, 1]] if len(rn) else np.zeros((params.n_samples, 0))
    i_r = dv / params.resistor_ohms
    newton_matrix = jac_ff.copy() if len(batch.floating_rows) else jac_ff
    if len(batch.floating_rows):
        # The DC tie of floating nodes is not part of the board's small-signal model.
        jac_ff[:, batch.floating_rows, batch.floating_rows] -= FLOAT_SIEMENS
    linear = ss = None
    wanted = small_signal is not False and (small_signal is True or len(small_signal) > 0)
    if wanted and circuit.input_node is not None and circuit.output_node is not None:
        linear = LinearModel(circuit, params, jac_ff, tr["gm"])
        ss = _small_signal_of(linear, small_signal)
        if not state.converged.all():
            bad = ~state.converged
            for name in SmallSignal.QUANTITIES + ("gain_phase_deg",):
                getattr(ss, name)[bad] = np.nan
    return BatchSolution(
        circuit=circuit,
        params=params,
        state=state,
        node_v=v[:, : circuit.n_nodes].copy(),
        **tr,
        supply_current=leaving_fixed[:, : len(circuit.supply_refs)],
        resistor_current=i_r,
        resistor_power=dv * i_r,
        kcl_residual=kcl,
        small_signal=ss,
        linear=linear,
        newton_matrix=newton_matrix,
    )


def _small_signal_of(linear: LinearModel, rows: bool | np.ndarray) -> SmallSignal:
    """Small-signal results of every sample (``rows`` True) or of the samples ``rows``,
    NaN elsewhere."""
    if rows is True:
        return linear.at_signal_frequency()
    rows = np.asarray(rows, dtype=np.intp)
    part = linear.take(_evenly_spaced(rows)).at_signal_frequency()
    n = linear.params.n_samples
    fields = {"frequency": linear.params.frequency.copy()}
    for name in SmallSignal.QUANTITIES + ("gain_phase_deg",):
        full = np.full(n, np.nan)
        full[rows] = getattr(part, name)
        fields[name] = full
    return SmallSignal(**fields)


def _evenly_spaced(rows: np.ndarray) -> np.ndarray | slice:
    """``rows`` as the slice that selects the same rows when they are evenly spaced and
    increasing (one row, or a group's first row of each group: views instead of copies
    of the parameters), else ``rows``."""
    if len(rows) == 0 or rows[0] < 0:
        return rows
    if len(rows) == 1:
        return slice(int(rows[0]), int(rows[0]) + 1)
    step = int(rows[1] - rows[0])
    if step > 0 and np.array_equal(np.diff(rows), np.full(len(rows) - 1, step)):
        return slice(int(rows[0]), int(rows[-1]) + 1, step)
    return rows


def _final_linear_system(batch: _Batch, params: Parameters, v: np.ndarray,
                         vbe_n: np.ndarray, vbc_n: np.ndarray,
                         st: devices.JunctionState | None = None,
                         ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The Newton system at the solution and each sample's largest |KCL error| there:
    reused from the compiled kernel's last iteration where it was built at the final
    point, rebuilt for the rest; ``st`` is every sample's device state at the solution
    (None without transistors)."""
    if batch.final_system is None:
        jac_ff, rhs = batch.linear_system(slice(None), vbe_n, vbc_n, state=st)
        return jac_ff, rhs, _kcl_error(batch, jac_ff, rhs, v)
    jac_ff, rhs, valid, kcl = batch.final_system
    redo = np.flatnonzero(~valid)
    if len(redo):
        jac_ff[redo], rhs[redo] = batch.linear_system(redo, vbe_n[redo], vbc_n[redo])
        kcl[redo] = _kcl_error(batch, jac_ff[redo], rhs[redo], v[redo])
    return jac_ff, rhs, kcl


def _kcl_error(batch: _Batch, jac_ff: np.ndarray, rhs: np.ndarray, v: np.ndarray) -> np.ndarray:
    """(M,) the largest |KCL error| over the free nodes, A: at the linearisation point
    the linear model is exact, so the error is J·v − rhs."""
    if not batch.n_free:
        return np.zeros(v.shape[0])
    kcl_free = (jac_ff @ v[:, batch.free, None])[:, :, 0] - rhs
    return np.max(np.abs(kcl_free), axis=1)


def _transistor_outputs(batch: _Batch, circuit: Circuit, params: Parameters, v: np.ndarray,
                        vbe_n: np.ndarray, vbc_n: np.ndarray,
                        leaving_fixed: np.ndarray,
                        st: devices.JunctionState | None = None) -> dict[str, np.ndarray]:
    """Terminal currents, junction voltages, region, gm, rπ, ro and power of every
    transistor (the BatchSolution fields of that name); adds the terminal currents that
    leave the fixed nodes to ``leaving_fixed`` in place. ``st``: the device state at the
    solution (:meth:`_Batch.device_state`), worked out here when not given."""
    q = circuit.transistor_nodes
    pol = circuit.polarity
    n_t = q.shape[0]
    if not n_t:
        shape = (params.n_samples, 0)
        zero = np.zeros(shape)
        return dict(ic=zero, ib=zero, ie=zero, vbe=zero, vce=zero,
                    region=np.zeros(shape, dtype=np.int8), gm=zero, rpi=zero, ro=zero,
                    transistor_power=zero)
    if st is None:
        st = batch.device_state(slice(None), vbe_n, vbc_n)
    ic = pol * st.ic
    ib = pol * st.ib
    ie = -(ic + ib)
    vc, vb, ve = v[:, q[:, 0]], v[:, q[:, 1]], v[:, q[:, 2]]
    # over: a subnormal conductance (deep reverse bias, VA = inf) overflows to inf
    with np.errstate(divide="ignore", over="ignore"):
        rpi = 1.0 / (st.dib_dvbe + st.dib_dvbc)
        ro = 1.0 / (-st.dic_dvbc)
    ro = np.where(np.abs(ro) > RO_INFINITE_OHMS, np.inf, ro)
    for t in range(n_t):
        for k, current in enumerate((ic[:, t], ib[:, t], ie[:, t])):
            x = batch.q_fixed[t, k]
            if x >= 0:
                leaving_fixed[:, x] += current
    return dict(ic=ic, ib=ib, ie=ie, vbe=vb - ve, vce=vc - ve,
                region=devices.region_codes(vbe_n, vbc_n), gm=st.dic_dvbe + st.dic_dvbc,
                rpi=rpi, ro=ro, transistor_power=vc * ic + vb * ib + ve * ie)
