"""Batched DC operating point: nodal analysis solved by Newton–Raphson.

Unknowns are the voltages of the free nodes (every node that no supply fixes). Each
iteration linearises every transistor at its present junction voltages (after junction
limiting, see :func:`reconcile.devices.limit_junction`), stamps the resulting
conductances and equivalent currents next to the fixed branch conductances, and solves
the linear system for all samples at once with :func:`numpy.linalg.solve`.

Only samples that have not converged are iterated. A sample that fails from the warm
start is restarted cold; one that still fails is taken through gmin stepping (a
conductance from every free node to gnd, shrunk by decades to zero) and then source
stepping (the supplies ramped from zero), each stage starting from the last solution.
A sample that survives none of these is reported with ``converged = False``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reconcile.engine import devices
from reconcile.engine.circuit import FLOAT_SIEMENS, Circuit, Parameters

V_ABS_TOL = 1e-9
V_REL_TOL = 1e-9
WARM_ITERATIONS = 40
COLD_ITERATIONS = 120
STEP_ITERATIONS = 60
GMIN_STEPS = tuple(10.0**-k for k in range(2, 13)) + (0.0,)


@dataclass(frozen=True)
class DCState:
    """A solution (or an iterate): node voltages (N, n_nodes + 1; gnd last, 0 V) and the
    npn-frame junction voltages (N, nT, 2: vbe, vbc)."""

    v: np.ndarray
    vj: np.ndarray
    converged: np.ndarray
    iterations: np.ndarray


class _Batch:
    """Everything per sample that Newton iterations need, computed once.

    Matrices live in free-node space: ``g_ff`` couples free nodes to each other and
    ``g_fx`` free nodes to the fixed ones (supplies, then gnd).
    """

    def __init__(self, circuit: Circuit, params: Parameters) -> None:
        self.circuit = circuit
        n = params.n_samples
        self.n = n
        size = circuit.n_nodes + 1
        branch = circuit.branch_nodes
        g = np.concatenate(
            [1.0 / params.resistor_ohms, params.capacitor_leak_siemens, params.probe_siemens],
            axis=1,
        )
        incidence = np.zeros((len(branch), size))
        if len(branch):
            rows = np.arange(len(branch))
            incidence[rows, branch[:, 0]] += 1.0
            incidence[rows, branch[:, 1]] -= 1.0
        self.free = circuit.free
        self.fixed = np.concatenate([circuit.supply_nodes, [circuit.gnd]]).astype(np.intp)
        inc_f = incidence[:, self.free]
        inc_x = incidence[:, self.fixed]
        # G = A^T diag(g) A, restricted to the blocks the solver needs.
        self.g_ff = np.einsum("bi,nb,bj->nij", inc_f, g, inc_f, optimize=True)
        self.g_fx = np.einsum("bi,nb,bj->nij", inc_f, g, inc_x, optimize=True)
        self.g_xall = np.einsum("bi,nb,bj->nij", inc_x, g, incidence, optimize=True)
        self.floating_rows = circuit.free_position[circuit.dc_floating]
        if len(self.floating_rows):
            self.g_ff[:, self.floating_rows, self.floating_rows] += FLOAT_SIEMENS
        self.v_fixed = np.zeros((n, len(self.fixed)))
        self.v_fixed[:, : params.supply_volts.shape[1]] = params.supply_volts
        self.rhs_fixed = -np.einsum("nij,nj->ni", self.g_fx, self.v_fixed)
        t = params.temperature[:, None]
        self.n_vt = params.n * devices.thermal_voltage(t)
        self.is_t = devices.saturation_current(params.IS, t, params.xti, params.bandgap)
        self.beta = params.beta
        self.beta_r = params.beta_r
        self.va = params.VA
        self.v_crit = devices.critical_voltage(self.is_t, self.n_vt)
        # Per transistor terminal (c, b, e): row in free space or -1, and column in the
        # fixed block or -1.
        pos_free = circuit.free_position
        pos_fixed = np.full(size, -1, dtype=np.intp)
        pos_fixed[self.fixed] = np.arange(len(self.fixed))
        q = circuit.transistor_nodes
        self.q_free = pos_free[q] if len(q) else np.zeros((0, 3), dtype=np.intp)
        self.q_fixed = pos_fixed[q] if len(q) else np.zeros((0, 3), dtype=np.intp)

    # ------------------------------------------------------------------ pieces
    def full_voltages(self, idx: np.ndarray, v_free: np.ndarray, scale: float = 1.0) -> np.ndarray:
        size = self.circuit.n_nodes + 1
        v = np.zeros((len(idx), size))
        v[:, self.free] = v_free
        v[:, self.fixed] = self.v_fixed[idx] * scale
        return v

    def junctions(self, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """npn-frame vbe, vbc (M, nT) from full node voltages (M, size)."""
        q = self.circuit.transistor_nodes
        s = self.circuit.polarity
        vc, vb, ve = v[:, q[:, 0]], v[:, q[:, 1]], v[:, q[:, 2]]
        return s * (vb - ve), s * (vb - vc)

    def device_state(self, idx: np.ndarray, vbe: np.ndarray, vbc: np.ndarray):
        return devices.junction_currents(
            vbe, vbc, self.is_t[idx], self.beta[idx], self.beta_r[idx], self.va[idx], self.n_vt[idx]
        )

    def linear_system(self, idx, vbe, vbc, *, gmin: float = 0.0, scale: float = 1.0):
        """Free-space matrix (M, nF, nF) and right-hand side (M, nF) of the Newton step,
        every transistor linearised at (vbe, vbc)."""
        a = self.g_ff[idx]
        rhs = self.rhs_fixed[idx] * scale if scale != 1.0 else self.rhs_fixed[idx].copy()
        if gmin:
            k = np.arange(a.shape[1])
            a[:, k, k] += gmin
        if len(self.circuit.transistor_refs):
            st = self.device_state(idx, vbe, vbc)
            self._stamp_devices(a, rhs, st, vbe, vbc, self.v_fixed[idx] * scale)
        return a, rhs

    def _stamp_devices(self, a, rhs, st, vbe, vbc, v_fixed) -> None:
        pol = self.circuit.polarity
        for t in range(self.q_free.shape[0]):
            s = pol[t]
            dc_be, dc_bc = st.dic_dvbe[:, t], st.dic_dvbc[:, t]
            db_be, db_bc = st.dib_dvbe[:, t], st.dib_dvbc[:, t]
            ic0 = s * (st.ic[:, t] - dc_be * vbe[:, t] - dc_bc * vbc[:, t])
            ib0 = s * (st.ib[:, t] - db_be * vbe[:, t] - db_bc * vbc[:, t])
            # d(current into terminal)/d(V of c, b, e); the polarity sign cancels.
            row_c = (-dc_bc, dc_be + dc_bc, -dc_be)
            row_b = (-db_bc, db_be + db_bc, -db_be)
            row_e = tuple(-(x + y) for x, y in zip(row_c, row_b, strict=True))
            for k, (row, i0) in enumerate(((row_c, ic0), (row_b, ib0), (row_e, -(ic0 + ib0)))):
                pk = self.q_free[t, k]
                if pk < 0:
                    continue
                rhs[:, pk] -= i0
                for j in range(3):
                    pj = self.q_free[t, j]
                    if pj >= 0:
                        a[:, pk, pj] += row[j]
                    else:
                        rhs[:, pk] -= row[j] * v_fixed[:, self.q_fixed[t, j]]

    # ----------------------------------------------------------------- newton
    def newton(
        self,
        idx: np.ndarray,
        v: np.ndarray,
        vj: np.ndarray,
        *,
        gmin: float = 0.0,
        scale: float = 1.0,
        max_iter: int = COLD_ITERATIONS,
        fresh: bool = False,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Iterate samples ``idx`` from full node voltages ``v`` and junction voltages
        ``vj``; returns the new v, vj, a converged mask and iteration counts."""
        free = self.free
        v = v.copy()
        vj = vj.copy()
        m = len(idx)
        converged = np.zeros(m, dtype=bool)
        iters = np.zeros(m, dtype=np.int64)
        v[:, self.fixed] = self.v_fixed[idx] * scale
        active = np.arange(m)
        has_q = vj.shape[1] > 0
        first = True
        for _ in range(max_iter):
            if not len(active):
                break
            sub = idx[active]
            va = v[active]
            if first and fresh:
                vbe_l, vbc_l = vj[active, :, 0], vj[active, :, 1]
                limited = np.ones(len(active), dtype=bool)
            elif has_q:
                vbe_raw, vbc_raw = self.junctions(va)
                n_vt, v_crit = self.n_vt[sub], self.v_crit[sub]
                vbe_l, lim_be = devices.limit_junction(vbe_raw, vj[active, :, 0], n_vt, v_crit)
                vbc_l, lim_bc = devices.limit_junction(vbc_raw, vj[active, :, 1], n_vt, v_crit)
                limited = np.any(lim_be | lim_bc, axis=1)
            else:
                vbe_l = vbc_l = np.zeros((len(active), 0))
                limited = np.zeros(len(active), dtype=bool)
            first = False
            a, rhs = self.linear_system(sub, vbe_l, vbc_l, gmin=gmin, scale=scale)
            v_free = _solve(a, rhs)
            old = va[:, free]
            ok_num = np.all(np.isfinite(v_free), axis=1)
            small = np.all(np.abs(v_free - old) <= V_ABS_TOL + V_REL_TOL * np.abs(v_free), axis=1)
            va[:, free] = np.where(ok_num[:, None], v_free, old)
            v[active] = va
            if has_q:
                vj[active, :, 0] = vbe_l
                vj[active, :, 1] = vbc_l
            iters[active] += 1
            done = small & ~limited & ok_num
            converged[active[done]] = True
            active = active[~done & ok_num]
        return v, vj, converged, iters


def _solve(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve a stack of small systems; a singular one gives NaN."""
    try:
        return np.linalg.solve(a, b[..., None])[..., 0]
    except np.linalg.LinAlgError:
        out = np.full(b.shape, np.nan, dtype=np.result_type(a, b))
        for i in range(a.shape[0]):
            try:
                out[i] = np.linalg.solve(a[i], b[i])
            except np.linalg.LinAlgError:
                pass
        return out


def _cold_start(batch: _Batch, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    m = len(idx)
    size = batch.circuit.n_nodes + 1
    v = np.zeros((m, size))
    n_t = len(batch.circuit.transistor_refs)
    vj = np.zeros((m, n_t, 2))
    if n_t:
        vj[:, :, 0] = np.clip(batch.v_crit[idx], 0.0, 0.9)
    return v, vj


def solve_dc(
    circuit: Circuit,
    params: Parameters,
    initial: DCState | None = None,
    *,
    batch: _Batch | None = None,
) -> DCState:
    """The DC operating point of every sample.

    ``initial`` (one sample, or one per sample) seeds Newton; without it a small batch is
    solved cold and a large one is seeded from the solution of its first sample.
    """
    if batch is None:
        batch = _Batch(circuit, params)
    n = batch.n
    size = circuit.n_nodes + 1
    n_t = len(circuit.transistor_refs)
    all_idx = np.arange(n)
    v = np.zeros((n, size))
    vj = np.zeros((n, n_t, 2))
    converged = np.zeros(n, dtype=bool)
    iters = np.zeros(n, dtype=np.int64)

    if initial is None and n > 4:
        seed = solve_dc(circuit, params.take(slice(0, 1)))
        if seed.converged[0]:
            initial = seed
    if initial is not None:
        v[:] = initial.v if initial.v.shape[0] == n else initial.v[:1]
        vj[:] = initial.vj if initial.vj.shape[0] == n else initial.vj[:1]
        v, vj, converged, iters = batch.newton(all_idx, v, vj, max_iter=WARM_ITERATIONS)

    todo = np.nonzero(~converged)[0]
    if len(todo):
        v0, vj0 = _cold_start(batch, todo)
        vv, jj, ok, it = batch.newton(todo, v0, vj0, max_iter=COLD_ITERATIONS, fresh=True)
        v[todo], vj[todo], converged[todo] = vv, jj, ok
        iters[todo] += it

    todo = np.nonzero(~converged)[0]
    if len(todo):
        ok, vv, jj, it = _gmin_stepping(batch, todo)
        v[todo[ok]], vj[todo[ok]], converged[todo[ok]] = vv[ok], jj[ok], True
        iters[todo] += it

    todo = np.nonzero(~converged)[0]
    if len(todo):
        ok, vv, jj, it = _source_stepping(batch, todo)
        v[todo[ok]], vj[todo[ok]], converged[todo[ok]] = vv[ok], jj[ok], True
        iters[todo] += it

    v[:, circuit.gnd] = 0.0
    return DCState(v=v, vj=vj, converged=converged, iterations=iters)


def _gmin_stepping(batch: _Batch, idx: np.ndarray):
    v, vj = _cold_start(batch, idx)
    ok = np.ones(len(idx), dtype=bool)
    total = np.zeros(len(idx), dtype=np.int64)
    fresh = True
    for gmin in GMIN_STEPS:
        sub = np.nonzero(ok)[0]
        if not len(sub):
            break
        vv, jj, conv, it = batch.newton(
            idx[sub], v[sub], vj[sub], gmin=gmin, max_iter=STEP_ITERATIONS, fresh=fresh
        )
        fresh = False
        v[sub], vj[sub] = vv, jj
        total[sub] += it
        ok[sub[~conv]] = False
    return ok, v, vj, total


def _source_stepping(batch: _Batch, idx: np.ndarray):
    """Ramp the supplies from zero, one sample at a time with an adaptive step."""
    m = len(idx)
    size = batch.circuit.n_nodes + 1
    n_t = len(batch.circuit.transistor_refs)
    v_out = np.zeros((m, size))
    vj_out = np.zeros((m, n_t, 2))
    ok = np.zeros(m, dtype=bool)
    total = np.zeros(m, dtype=np.int64)
    for k in range(m):
        one = idx[k : k + 1]
        v, vj = np.zeros((1, size)), np.zeros((1, n_t, 2))
        scale, step = 0.0, 0.1
        while scale < 1.0 and step > 1e-4:
            trial = min(1.0, scale + step)
            vv, jj, conv, it = batch.newton(one, v, vj, scale=trial, max_iter=STEP_ITERATIONS)
            total[k] += it[0]
            if conv[0]:
                v, vj, scale = vv, jj, trial
                step = min(step * 2.0, 0.25)
            else:
                step /= 4.0
        if scale >= 1.0:
            ok[k] = True
            v_out[k], vj_out[k] = v[0], vj[0]
    return ok, v_out, vj_out, total


def jacobian_at(circuit: Circuit, params: Parameters, state: DCState) -> np.ndarray:
    """The Jacobian of the free-node KCL equations at the solved point ``state``.

    d(current leaving each free node)/d(free node voltages), (N, nF, nF): the Newton
    matrix built by the same stamps as the iterations (floating-node ties included), at
    the junction voltages of ``state.v`` with no limiting. At a converged point this is
    the exact Jacobian, which :mod:`reconcile.engine.sensitivity` factorises for the
    parameter sensitivities (implicit function theorem).
    """
    batch = _Batch(circuit, params)
    idx = np.arange(batch.n)
    v = np.asarray(state.v, dtype=float)
    vbe, vbc = batch.junctions(v)
    a, _ = batch.linear_system(idx, vbe, vbc)
    return a
