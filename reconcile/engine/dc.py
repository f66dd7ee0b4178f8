"""Batched DC operating point: nodal analysis solved by Newton–Raphson.

Unknowns are the voltages of the free nodes (every node that no supply fixes). Each
iteration linearises every transistor at its present junction voltages (after junction
limiting, see :func:`reconcile.devices.limit_junction`), stamps the resulting
conductances and equivalent currents next to the fixed branch conductances, and solves
the linear system for all samples at once with :func:`numpy.linalg.solve`. Every stamp
is a fixed gather-and-sum built once from the topology (:class:`_Scatter`).

A warm start from another solution (by default the batch's first sample) is carried to
each sample's own IS first (:func:`is_corrected_shift`).

Only samples that have not converged are iterated. A sample that fails from the warm
start is restarted cold; one that still fails is taken through gmin stepping (a
conductance from every free node to gnd, shrunk by decades to zero) and then source
stepping (the supplies ramped from zero), each stage starting from the last solution.
A sample that survives none of these is reported with ``converged = False``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reconcile.engine import devices, kernel
from reconcile.engine.circuit import FLOAT_SIEMENS, Circuit, Parameters
from reconcile.engine.sparse import SPARSE_FROM_NODES, factorisation_for

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
    is_t: np.ndarray | None = None  # (N, nT) the IS(T) it was solved with, if known


class _Scatter:
    """A fixed sum-into map: ``out[:, t] += Σ sign·src[:, s]`` over the pairs (s, t) of a
    stamp pattern, built once from the topology and applied pair by pair as column
    operations over the sample axis: the cost grows with the number of nonzero entries,
    not with the square of the board, and no index arrays are built per call.

    (Measured on the sample board, side by side: faster than a dense BLAS product with
    the pattern matrix, which also suffers most when the machine is loaded, and than a
    gather with a segmented sum.)
    """

    def __init__(self, targets, sources, signs) -> None:
        self.pairs = list(
            zip(
                np.asarray(targets, dtype=np.intp).tolist(),
                np.asarray(sources, dtype=np.intp).tolist(),
                np.asarray(signs, dtype=float).tolist(),
                strict=True,
            )
        )

        self._by_width: dict[int, list[tuple[int, int, int, float]]] = {}

    def add_to(self, out: np.ndarray, src: np.ndarray) -> None:
        """Add the mapped ``src`` (M, n_src) into ``out`` (M, n_out) in place."""
        _add_pairs(out, (src,), self.split(1))

    def add_columns(self, out: np.ndarray, sources: tuple[np.ndarray, ...]) -> None:
        """As :meth:`add_to` for ``src`` the K arrays ``sources`` (M, n) interleaved,
        source column s being ``sources[s % K][:, s // K]`` (what stacking them on a last
        axis and flattening it would give, without making that array)."""
        _add_pairs(out, sources, self.split(len(sources)))

    def split(self, width: int) -> list[tuple[int, int, int, float]]:
        """The pairs as (t, s % width, s // width, sign), made once per width."""
        plan = self._by_width.get(width)
        if plan is None:
            plan = [(t, s % width, s // width, g) for t, s, g in self.pairs]
            self._by_width[width] = plan
        return plan


def _add_pairs(out: np.ndarray, sources, plan) -> None:
    """``out[:, t] += g·sources[k][:, c]`` for each (t, k, c, g) of ``plan``, in order,
    each column added in place through the transposed views (one ufunc call a pair)."""
    o_t = out.T
    cols = [src.T for src in sources]
    add, subtract = np.add, np.subtract
    for t, k, c, g in plan:
        target = o_t[t]
        if g == 1.0:
            add(target, cols[k][c], out=target)
        elif g == -1.0:
            subtract(target, cols[k][c], out=target)
        else:
            add(target, g * cols[k][c], out=target)


# The device stamp in the npn frame, per transistor: which of its four partial
# derivatives (0 dIC/dVBE, 1 dIC/dVBC, 2 dIB/dVBE, 3 dIB/dVBC) enter
# d(current into terminal k)/d(V of terminal j), with which sign; terminals c, b, e.
# The polarity sign cancels (both the junction voltages and the currents flip).
_DEVICE_PATTERN = {
    (0, 0): ((1, -1.0),),
    (0, 1): ((0, 1.0), (1, 1.0)),
    (0, 2): ((0, -1.0),),
    (1, 0): ((3, -1.0),),
    (1, 1): ((2, 1.0), (3, 1.0)),
    (1, 2): ((2, -1.0),),
    (2, 0): ((1, 1.0), (3, 1.0)),
    (2, 1): ((0, -1.0), (1, -1.0), (2, -1.0), (3, -1.0)),
    (2, 2): ((0, 1.0), (2, 1.0)),
}


_STAMPS: dict = {}
_STAMPS_KEPT = 256


def _stamps_once(build, *args):
    """``build(*args)``, built once per topology: a board's stamps depend only on its
    index arrays and sizes, so they are kept by their bytes (a :class:`_Scatter` is never
    changed after it is made) and a batch of the same board, as every chunk of
    ``solve --samples`` and every call of a fit is, does not build them again."""
    key = (build.__name__,) + tuple(
        (a.shape, a.dtype.str, a.tobytes()) if isinstance(a, np.ndarray) else a for a in args)
    if key not in _STAMPS:
        if len(_STAMPS) >= _STAMPS_KEPT:
            _STAMPS.clear()
        _STAMPS[key] = build(*args)
    return _STAMPS[key]


def _branch_stamps(branch: np.ndarray, pos_free: np.ndarray, pos_fixed: np.ndarray,
                   slot_of: np.ndarray, n_f: int, n_x: int) -> tuple[_Scatter, _Scatter, _Scatter]:
    """The branch stamps: conductances into the free-node matrix slots, the fixed nodes'
    pull on each free node (one source per (branch, fixed node)), and the current leaving
    each fixed node through each branch."""
    ff, fx, out_x = ([], [], []), ([], [], []), ([], [], [])
    for b, (i, j) in enumerate(branch.tolist()):
        for p, sp in ((i, 1.0), (j, -1.0)):
            if pos_fixed[p] >= 0:
                # current leaving fixed node p through branch b: sp * i_b
                out_x[0].append(pos_fixed[p])
                out_x[1].append(b)
                out_x[2].append(sp)
                continue
            for q, sq in ((i, 1.0), (j, -1.0)):
                if pos_free[q] >= 0:
                    ff[0].append(slot_of[pos_free[p] * n_f + pos_free[q]])
                    ff[1].append(b)
                    ff[2].append(sp * sq)
                else:
                    fx[0].append(pos_free[p])
                    fx[1].append(b * n_x + pos_fixed[q])
                    fx[2].append(-sp * sq)
    return _Scatter(*ff), _Scatter(*fx), _Scatter(*out_x)


def _device_stamps(q_free: np.ndarray, slot_of: np.ndarray, n_f: int) -> tuple[_Scatter, _Scatter]:
    """The transistor stamps: the four partials of each device into the free-node matrix
    slots (:data:`_DEVICE_PATTERN`), and the terminal currents into the free rows."""
    jac, cur = ([], [], []), ([], [], [])
    for tr in range(q_free.shape[0]):
        for k in range(3):
            pk = q_free[tr, k]
            if pk < 0:
                continue
            cur[0].append(pk)
            cur[1].append(tr * 3 + k)
            cur[2].append(-1.0)
            for j in range(3):
                pj = q_free[tr, j]
                if pj < 0:
                    continue
                for partial, sign in _DEVICE_PATTERN[(k, j)]:
                    jac[0].append(slot_of[pk * n_f + pj])
                    jac[1].append(tr * 4 + partial)
                    jac[2].append(sign)
    return _Scatter(*jac), _Scatter(*cur)


class _Batch:
    """Everything per sample that Newton iterations need, computed once.

    Matrices live in free-node space, flattened row-major: ``g_ff`` (N, nF·nF) holds the
    branch conductances between free nodes (for a board of :data:`SPARSE_FROM_NODES`
    free nodes or more, only the slots of its fixed-pattern factorisation, see
    :mod:`reconcile.engine.sparse`). ``rhs_fixed`` (N, nF) is the current the
    fixed nodes (supplies, then gnd) push into each free node through branches. Every
    stamp is a :class:`_Scatter` built once from the topology.
    """

    final_system = None
    """(jac, rhs, valid, kcl) linearised at the solution, with its largest |KCL error|,
    when the compiled kernel made it (``valid``: the samples it solved; the others were
    solved by the numpy path)."""

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
        self.g_branch = g
        self.free = circuit.free
        self.fixed = np.concatenate([circuit.supply_nodes, [circuit.gnd]]).astype(np.intp)
        n_f, n_x = len(self.free), len(self.fixed)
        self.n_free = n_f
        pos_free = circuit.free_position
        pos_fixed = np.full(size, -1, dtype=np.intp)
        pos_fixed[self.fixed] = np.arange(n_x)
        self.pos_fixed = pos_fixed
        # Storage of the free-node matrix: dense row-major (N, nF·nF), or for a large
        # board the slots of its fixed-pattern factorisation (N, slots).
        self.sparse = factorisation_for(circuit, capacitors=False, n_samples=n)
        if self.sparse is None:
            slot_of = np.arange(n_f * n_f, dtype=np.intp)
        else:
            slot_of = np.full(n_f * n_f, -1, dtype=np.intp)
            slot_of[self.sparse.gather] = np.arange(self.sparse.n_slots)
        self.store_of = slot_of
        self.n_store = n_f * n_f if self.sparse is None else self.sparse.n_slots
        self.diag_store = slot_of[np.arange(n_f) * (n_f + 1)]
        self._branch_ff, self._branch_fx, self._branch_out_fixed = _stamps_once(_branch_stamps,
            branch, pos_free, pos_fixed, slot_of, n_f, n_x)
        self.g_ff = np.zeros((n, self.n_store))
        self._branch_ff.add_to(self.g_ff, g)
        self.floating_rows = pos_free[circuit.dc_floating]
        if len(self.floating_rows):
            self.g_ff[:, self.diag_store[self.floating_rows]] += FLOAT_SIEMENS
        self.v_fixed = np.zeros((n, n_x))
        self.v_fixed[:, : params.supply_volts.shape[1]] = params.supply_volts
        # rhs_fixed[p] = -Σ G[p, x]·V[x] over fixed x: one source value g_b·V[x] per
        # (branch b, fixed node x) pair of the stamp, and only those (signs are ±1).
        self.rhs_fixed = np.zeros((n, n_f))
        r_t, g_t, v_t = self.rhs_fixed.T, g.T, self.v_fixed.T  # columns as rows (views)
        for t, x, b, sign in self._branch_fx.split(n_x):  # source b·n_x + x
            gv = g_t[b] * v_t[x]
            if sign == 1.0:
                np.add(r_t[t], gv, out=r_t[t])
            else:
                np.subtract(r_t[t], gv, out=r_t[t])
        t = params.temperature[:, None]
        self.n_vt = params.n * devices.thermal_voltage(t)
        self.is_t = devices.saturation_current(params.IS, t, params.xti, params.bandgap)
        self.beta = params.beta
        self.beta_r = params.beta_r
        self.va = params.VA
        self.v_crit = devices.critical_voltage(self.is_t, self.n_vt)
        # Per transistor terminal (c, b, e): row in free space or -1, and column in the
        # fixed block or -1.
        q = circuit.transistor_nodes
        n_t = q.shape[0]
        self._q_columns = (q[:, 0], q[:, 1], q[:, 2])  # collectors, bases, emitters
        self.q_free = pos_free[q] if n_t else np.zeros((0, 3), dtype=np.intp)
        self.q_fixed = pos_fixed[q] if n_t else np.zeros((0, 3), dtype=np.intp)
        self._device_jac, self._device_cur = _stamps_once(_device_stamps, self.q_free, slot_of,
                                                          n_f)
        # Fixed voltage at each transistor terminal (0 where the terminal is free).
        self.vq_fixed = np.zeros((n, n_t, 3))
        for tr, row in enumerate(self.q_fixed.tolist()):
            for k, x in enumerate(row):
                if x >= 0:
                    self.vq_fixed[:, tr, k] = self.v_fixed[:, x]

    # ------------------------------------------------------------------ pieces
    def junctions(self, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """npn-frame vbe, vbc (M, nT) from full node voltages (M, size)."""
        q_c, q_b, q_e = self._q_columns
        s = self.circuit.polarity
        vc, vb, ve = v[:, q_c], v[:, q_b], v[:, q_e]
        return s * (vb - ve), s * (vb - vc)

    def device_state(self, idx: np.ndarray, vbe: np.ndarray, vbc: np.ndarray):
        return devices.junction_currents(
            vbe, vbc, self.is_t[idx], self.beta[idx], self.beta_r[idx], self.va[idx], self.n_vt[idx]
        )

    def linear_system(self, idx, vbe, vbc, *, gmin: float = 0.0, scale: float = 1.0,
                      state: devices.JunctionState | None = None):
        """Free-space matrix (M, nF, nF) and right-hand side (M, nF) of the Newton step,
        every transistor linearised at (vbe, vbc); ``state``, when given, is
        :meth:`device_state` there (the caller has it already)."""
        a, rhs = self._system(idx, vbe, vbc, gmin=gmin, scale=scale, state=state)
        return self.dense(a), rhs

    def _system(self, idx, vbe, vbc, *, gmin: float = 0.0, scale: float | np.ndarray = 1.0,
                state: devices.JunctionState | None = None):
        """As :meth:`linear_system`, the matrix in storage form (M, n_store); ``scale``
        multiplies the supplies, one factor for all samples or one per sample (M,)."""
        a = self.g_ff[idx].copy() if isinstance(idx, slice) else self.g_ff[idx]
        per_sample = np.ndim(scale) == 1
        s = np.asarray(scale, dtype=float)[:, None] if per_sample else scale
        rhs = self.rhs_fixed[idx] * s if per_sample or scale != 1.0 else self.rhs_fixed[idx]
        if isinstance(idx, slice) and np.may_share_memory(rhs, self.rhs_fixed):
            rhs = rhs.copy()  # a slice is a view: the stamps below add into it
        if gmin:
            a[:, self.diag_store] += gmin
        if len(self.circuit.transistor_refs):
            st = self.device_state(idx, vbe, vbc) if state is None else state
            vq = self.vq_fixed[idx]
            if per_sample or s != 1.0:
                vq = vq * (s[:, :, None] if per_sample else s)
            self._stamp_devices(a, rhs, st, vbe, vbc, vq)
        return a, rhs

    def dense(self, a: np.ndarray) -> np.ndarray:
        """A matrix in storage form (M, n_store) as (M, nF, nF)."""
        m, n_f = a.shape[0], self.n_free
        if self.sparse is None:
            return a.reshape(m, n_f, n_f)
        out = np.zeros((m, n_f * n_f))
        out[:, self.sparse.gather] = a
        return out.reshape(m, n_f, n_f)

    def solve_stored(self, a: np.ndarray, rhs: np.ndarray) -> np.ndarray:
        """Solve systems in storage form; a singular one gives NaN. Stored on the fixed
        pattern, they are solved on it where that pays off (many systems; see
        :meth:`reconcile.engine.sparse.SparseLU.pays_off`), else by dense LAPACK."""
        if self.sparse is None or not self.sparse.pays_off(len(a)):
            return _solve(self.dense(a), rhs)
        x = self.sparse.solve_slots(a, rhs[..., None])[..., 0]
        bad = np.flatnonzero(~np.isfinite(x).all(axis=1))
        if len(bad):  # a failed static pivot: dense LAPACK with row exchanges
            x[bad] = _solve(self.dense(a[bad]), rhs[bad])
        return x

    def _stamp_devices(self, a, rhs, st, vbe, vbc, vq) -> None:
        """Add the linearised transistors: their partials into ``a`` (M, nF·nF) and their
        equivalent currents (with the part that flows from fixed terminals) into ``rhs``."""
        pol = self.circuit.polarity
        self._device_jac.add_columns(a, (st.dic_dvbe, st.dic_dvbc, st.dib_dvbe, st.dib_dvbc))
        ic0 = pol * (st.ic - st.dic_dvbe * vbe - st.dic_dvbc * vbc)
        ib0 = pol * (st.ib - st.dib_dvbe * vbe - st.dib_dvbc * vbc)
        vc, vb, ve = vq[:, :, 0], vq[:, :, 1], vq[:, :, 2]
        # row_c·vq, row_b·vq with the rows of _DEVICE_PATTERN (fixed terminals only).
        v_be, v_bc = vb - ve, vb - vc
        fc = st.dic_dvbe * v_be + st.dic_dvbc * v_bc
        fb = st.dib_dvbe * v_be + st.dib_dvbc * v_bc
        cc, cb = ic0 + fc, ib0 + fb
        self._device_cur.add_columns(rhs, (cc, cb, -(cc + cb)))

    def current_out_of_fixed(self, v: np.ndarray) -> np.ndarray:
        """(N, n_fixed) current leaving each fixed node through the branches."""
        br = self.circuit.branch_nodes
        out = np.zeros((v.shape[0], len(self.fixed)))
        # every branch's current (the same products as one branch at a time), then added
        # for the branches at a fixed node only
        i_branch = self.g_branch * (v[:, br[:, 0]] - v[:, br[:, 1]])
        self._branch_out_fixed.add_to(out, i_branch)
        return out

    # ----------------------------------------------------------------- newton
    def newton(
        self,
        idx: np.ndarray,
        v: np.ndarray,
        vj: np.ndarray,
        *,
        gmin: float = 0.0,
        scale: float | np.ndarray = 1.0,
        max_iter: int = COLD_ITERATIONS,
        fresh: bool = False,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Iterate samples ``idx`` from full node voltages ``v`` and junction voltages
        ``vj``; returns the new v, vj, a converged mask and iteration counts. ``scale``
        multiplies the supplies: one factor, or one per sample of ``idx``."""
        free = self.free
        v = v.copy()
        vj = vj.copy()
        m = len(idx)
        converged = np.zeros(m, dtype=bool)
        iters = np.zeros(m, dtype=np.int64)
        per_sample = np.ndim(scale) == 1
        scale_of = np.asarray(scale, dtype=float) if per_sample else None
        v[:, self.fixed] = self.v_fixed[idx] * (scale_of[:, None] if per_sample else scale)
        active = np.arange(m)
        has_q = vj.shape[1] > 0
        first = True
        whole = bool(np.array_equal(idx, np.arange(self.n)))  # every sample, in order
        for _ in range(max_iter):
            if not len(active):
                break
            # while every sample is still iterating, slices instead of gathers
            full = whole and len(active) == m
            at = slice(None) if full else active
            sub = at if full else idx[active]
            va = v if full else v[active]
            if first and fresh:
                vbe_l, vbc_l = vj[at, :, 0], vj[at, :, 1]
                limited = np.ones(len(active), dtype=bool)
            elif has_q:
                vbe_raw, vbc_raw = self.junctions(va)
                n_vt, v_crit = self.n_vt[sub], self.v_crit[sub]
                vbe_l, lim_be = devices.limit_junction(vbe_raw, vj[at, :, 0], n_vt, v_crit)
                vbc_l, lim_bc = devices.limit_junction(vbc_raw, vj[at, :, 1], n_vt, v_crit)
                limited = (lim_be | lim_bc).any(axis=1)
            else:
                vbe_l = vbc_l = np.zeros((len(active), 0))
                limited = np.zeros(len(active), dtype=bool)
            first = False
            a, rhs = self._system(sub, vbe_l, vbc_l, gmin=gmin,
                                  scale=scale_of[at] if per_sample else scale)
            v_free = self.solve_stored(a, rhs)
            old = va[:, free]
            ok_num = np.isfinite(v_free).all(axis=1)
            small = (np.abs(v_free - old) <= V_ABS_TOL + V_REL_TOL * np.abs(v_free)).all(axis=1)
            va[:, free] = v_free if ok_num.all() else np.where(ok_num[:, None], v_free, old)
            if not full:
                v[active] = va
            if has_q:
                vj[at, :, 0] = vbe_l
                vj[at, :, 1] = vbc_l
            iters[at] += 1
            done = small & ~limited & ok_num
            converged[active[done]] = True
            active = active[~done & ok_num]
        return v, vj, converged, iters


def _solve(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve a stack of small dense systems; a singular one gives NaN."""
    return kernel.solve_small(a, b[..., None])[..., 0]


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
        shifted = initial.is_t is not None and n_t > 0
        if shifted:
            seed_is = initial.is_t if initial.is_t.shape[0] == n else initial.is_t[:1]
            vj += is_corrected_shift(batch, seed_is)[:, :, None]
        if batch.n_free < SPARSE_FROM_NODES and kernel.use_compiled(n):
            if not shifted and n_t:
                vj[:, :, 0], vj[:, :, 1] = batch.junctions(v)
            v_free, vj, converged, iters, jac, rhs, kcl = kernel.newton_dc(
                batch, v[:, batch.free], vj, WARM_ITERATIONS, V_ABS_TOL, V_REL_TOL
            )
            v[:, batch.free] = v_free
            v[:, batch.fixed] = batch.v_fixed
            batch.final_system = (jac, rhs, converged.copy(), kcl)
        else:
            v, vj, converged, iters = batch.newton(
                all_idx, v, vj, max_iter=WARM_ITERATIONS, fresh=shifted
            )

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
    return DCState(v=v, vj=vj, converged=converged, iterations=iters, is_t=batch.is_t)


def is_corrected_shift(batch: _Batch, seed_is_t: np.ndarray) -> np.ndarray:
    """(N, nT) junction-voltage shift that carries a seed's operating point to each
    sample's own saturation current: at the same junction current,
    V_i = V_seed + n·VT·ln(IS_seed / IS_i). Started there, Newton needs fewer steps
    when IS varies between samples (IS spans decades across a device's range)."""
    seed = np.broadcast_to(seed_is_t, batch.is_t.shape)
    return batch.n_vt * np.log(seed / batch.is_t)


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
    """Ramp the supplies from zero with an adaptive step, each sample on its own ramp
    (its own scale and step), all of them batched in one Newton call per round."""
    m = len(idx)
    size = batch.circuit.n_nodes + 1
    n_t = len(batch.circuit.transistor_refs)
    v = np.zeros((m, size))
    vj = np.zeros((m, n_t, 2))
    scale = np.zeros(m)
    step = np.full(m, 0.1)
    total = np.zeros(m, dtype=np.int64)
    live = np.arange(m)
    while len(live):
        trial = np.minimum(1.0, scale[live] + step[live])
        vv, jj, conv, it = batch.newton(idx[live], v[live], vj[live], scale=trial,
                                        max_iter=STEP_ITERATIONS)
        total[live] += it
        good, bad = live[conv], live[~conv]
        v[good], vj[good], scale[good] = vv[conv], jj[conv], trial[conv]
        step[good] = np.minimum(step[good] * 2.0, 0.25)
        step[bad] /= 4.0
        live = live[(scale[live] < 1.0) & (step[live] > 1e-4)]
    ok = scale >= 1.0
    return ok, v, vj, total


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
