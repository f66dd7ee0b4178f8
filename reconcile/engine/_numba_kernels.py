"""The compiled per-board kernels (numba). Imported only through
:mod:`reconcile.engine.kernel`, which sets the compile cache folder first.

One board at a time, every loop explicit: the DC Newton iteration (the same stamps,
junction limiting and convergence test as :mod:`reconcile.engine.dc`, with the device
equations compiled from :func:`reconcile.engine.devices.junction_point`, their only
copy) and a dense LU solve with partial pivoting for stacks of small real or complex
systems.
"""

from __future__ import annotations

import math

import numba
import numpy as np

from reconcile.engine import devices

_OPTS = {"cache": True, "nogil": True, "error_model": "numpy"}

junction_point = numba.njit(**_OPTS)(devices.junction_point)


@numba.njit(**_OPTS)
def _limit(v_new, v_old, n_vt, v_crit):
    """Scalar form of :func:`reconcile.engine.devices.limit_junction`."""
    if not (v_new > v_crit and abs(v_new - v_old) > 2.0 * n_vt):
        return v_new, False
    if v_old > 0.0:
        arg = 1.0 + (v_new - v_old) / n_vt
        if arg > 0.0:
            return v_old + n_vt * math.log(max(arg, 1e-300)), True
        return v_crit, True
    return n_vt * math.log(max(v_new / n_vt, 1e-300)), True


@numba.njit(**_OPTS)
def _back_substitute(a, b):
    """b ← U⁻¹ b in place, U the upper triangle of ``a`` after elimination."""
    n = a.shape[0]
    k = b.shape[1]
    for col in range(n - 1, -1, -1):
        inv = 1.0 / a[col, col]
        for j in range(k):
            s = b[col, j]
            for c in range(col + 1, n):
                s -= a[col, c] * b[c, j]
            b[col, j] = s * inv


@numba.njit(**_OPTS)
def _lu_solve(a, b, pivot):
    """Solve a x = b in place (a: n×n, b: n×k); False at a pivot that is zero or not
    finite. With ``pivot`` partial pivoting; without, the pivots are taken on the
    diagonal with no row exchanges (the numpy path's fixed-pattern order,
    :mod:`reconcile.engine.sparse`; a caller falls back to pivoting when it fails)."""
    n = a.shape[0]
    k = b.shape[1]
    for col in range(n):
        piv = col
        best = abs(a[col, col])
        if pivot:
            for r in range(col + 1, n):
                m = abs(a[r, col])
                if m > best:
                    best = m
                    piv = r
        if not best > 0.0 or not math.isfinite(best):
            return False
        if piv != col:
            for j in range(n):
                t = a[col, j]
                a[col, j] = a[piv, j]
                a[piv, j] = t
            for j in range(k):
                t = b[col, j]
                b[col, j] = b[piv, j]
                b[piv, j] = t
        inv = 1.0 / a[col, col]
        for r in range(col + 1, n):
            f = a[r, col] * inv
            if f != 0.0:
                for j in range(col + 1, n):
                    a[r, j] -= f * a[col, j]
                for j in range(k):
                    b[r, j] -= f * b[col, j]
    _back_substitute(a, b)
    return True


@numba.njit(**_OPTS)
def solve_stack(a, b, out):
    """out[i] = solve(a[i], b[i]) for a stack (M, n, n) and (M, n, k); NaN where singular.
    ``a`` and ``b`` are left unchanged."""
    m = a.shape[0]
    for i in range(m):
        ai = a[i].copy()
        bi = b[i].copy()
        if _lu_solve(ai, bi, True):
            out[i] = bi
        else:
            out[i] = np.nan


@numba.njit(**_OPTS)
def _fixed_part(s, g_ff, store_of, rhs_fixed, a0, b0):
    """Board ``s``'s branch conductances as a dense matrix ``a0`` (nF×nF) and the
    current the fixed nodes push into each free node, ``b0`` (nF): the part of the
    Newton system that does not change between iterations."""
    nf = a0.shape[0]
    for i in range(nf):
        b0[i] = rhs_fixed[s, i]
        for j in range(nf):
            k = store_of[i * nf + j]
            a0[i, j] = g_ff[s, k] if k >= 0 else 0.0


@numba.njit(**_OPTS)
def _junctions(s, v, vq, q_free, pol, vbe, vbc):
    """npn-frame vbe, vbc of every transistor of board ``s`` at free voltages ``v``."""
    for t in range(q_free.shape[0]):
        r = q_free[t, 0]
        vc = v[r] if r >= 0 else vq[s, t, 0]
        r = q_free[t, 1]
        vb = v[r] if r >= 0 else vq[s, t, 1]
        r = q_free[t, 2]
        ve = v[r] if r >= 0 else vq[s, t, 2]
        vbe[t] = pol[t] * (vb - ve)
        vbc[t] = pol[t] * (vb - vc)


@numba.njit(**_OPTS)
def _assemble(s, vbe, vbc, a0, b0, vq, q_free, pol, is_t, n_vt, beta, beta_r, va, a, b):
    """The Newton system of board ``s`` with every transistor linearised at (vbe, vbc):
    the same stamp as ``dc._Batch.linear_system``, on top of the fixed part (a0, b0)."""
    nf = a.shape[0]
    for i in range(nf):
        b[i, 0] = b0[i]
        for j in range(nf):
            a[i, j] = a0[i, j]
    for t in range(q_free.shape[0]):
        ic, ib, c_be, c_bc, b_be, b_bc = junction_point(
            vbe[t], vbc[t], is_t[s, t], beta[s, t], beta_r[s, t], va[s, t], n_vt[s, t]
        )
        p = pol[t]
        ic0 = p * (ic - c_be * vbe[t] - c_bc * vbc[t])
        ib0 = p * (ib - b_be * vbe[t] - b_bc * vbc[t])
        for k in range(3):
            pk = q_free[t, k]
            if pk < 0:
                continue
            # d(current into terminal k)/d(V of c, b, e); the polarity sign cancels
            if k == 0:
                d0, d1, d2, i0 = -c_bc, c_be + c_bc, -c_be, ic0
            elif k == 1:
                d0, d1, d2, i0 = -b_bc, b_be + b_bc, -b_be, ib0
            else:
                d0 = c_bc + b_bc
                d1 = -(c_be + c_bc + b_be + b_bc)
                d2 = c_be + b_be
                i0 = -(ic0 + ib0)
            acc = b[pk, 0] - i0
            for j in range(3):
                dj = d0 if j == 0 else (d1 if j == 1 else d2)
                pj = q_free[t, j]
                if pj >= 0:
                    a[pk, pj] += dj
                else:
                    acc -= dj * vq[s, t, j]
            b[pk, 0] = acc


@numba.njit(**_OPTS)
def newton_dc(
    g_ff, store_of, rhs_fixed, vq, q_free, pol, is_t, n_vt, beta, beta_r, va, v_crit,
    v0, vj0, max_iter, abs_tol, rel_tol,
    v_out, vj_out, conv_out, iters_out, jac_out, rhs_out, kcl_out,
):
    """Warm-started Newton for every board, from free voltages ``v0`` (M, nF) and
    junction voltages ``vj0`` (M, nT, 2) at which the first step linearises. On return
    ``jac_out``/``rhs_out`` hold the system linearised at the final node voltages and
    ``kcl_out`` its largest |KCL error| there, max |jac·v − rhs| over the free nodes."""
    m = g_ff.shape[0]
    nf = rhs_fixed.shape[1]
    nt = q_free.shape[0]
    a0 = np.empty((nf, nf))
    b0 = np.empty(nf)
    a = np.empty((nf, nf))
    b = np.empty((nf, 1))
    v = np.empty(nf)
    vbe = np.empty(nt)
    vbc = np.empty(nt)
    raw_be = np.empty(nt)
    raw_bc = np.empty(nt)
    for s in range(m):
        _fixed_part(s, g_ff, store_of, rhs_fixed, a0, b0)
        for i in range(nf):
            v[i] = v0[s, i]
        for t in range(nt):
            vbe[t] = vj0[s, t, 0]
            vbc[t] = vj0[s, t, 1]
        converged = False
        it = 0
        while it < max_iter:
            limited = it == 0  # the first step is never the last
            if it > 0:
                _junctions(s, v, vq, q_free, pol, raw_be, raw_bc)
                for t in range(nt):
                    x, l1 = _limit(raw_be[t], vbe[t], n_vt[s, t], v_crit[s, t])
                    y, l2 = _limit(raw_bc[t], vbc[t], n_vt[s, t], v_crit[s, t])
                    vbe[t] = x
                    vbc[t] = y
                    limited = limited or l1 or l2
            _assemble(s, vbe, vbc, a0, b0, vq, q_free, pol, is_t, n_vt, beta, beta_r, va, a, b)
            it += 1
            if not _lu_solve(a, b, False):
                _assemble(s, vbe, vbc, a0, b0, vq, q_free, pol, is_t, n_vt, beta, beta_r, va,
                          a, b)
                if not _lu_solve(a, b, True):
                    break
            small = True
            finite = True
            for i in range(nf):
                x = b[i, 0]
                if not math.isfinite(x):
                    finite = False
                    break
                if abs(x - v[i]) > abs_tol + rel_tol * abs(x):
                    small = False
            if not finite:
                break
            for i in range(nf):
                v[i] = b[i, 0]
            if small and not limited:
                converged = True
                break
        conv_out[s] = converged
        iters_out[s] = it
        for i in range(nf):
            v_out[s, i] = v[i]
        for t in range(nt):
            vj_out[s, t, 0] = vbe[t]
            vj_out[s, t, 1] = vbc[t]
        _junctions(s, v, vq, q_free, pol, raw_be, raw_bc)
        _assemble(s, raw_be, raw_bc, a0, b0, vq, q_free, pol, is_t, n_vt, beta, beta_r, va,
                  a, b)
        worst = 0.0
        for i in range(nf):
            rhs_out[s, i] = b[i, 0]
            acc = 0.0
            for j in range(nf):
                jac_out[s, i, j] = a[i, j]
                acc += a[i, j] * v[j]
            err = abs(acc - b[i, 0])
            if err > worst or err != err:  # NaN wins, as in numpy's max
                worst = err
        kcl_out[s] = worst


@numba.njit(**_OPTS)
def _stamp_admittance(y, a, b, value):
    """Add the admittance ``value`` between free rows a and b (-1: AC ground)."""
    if a >= 0:
        y[a, a] += value
    if b >= 0:
        y[b, b] += value
    if a >= 0 and b >= 0:
        y[a, b] -= value
        y[b, a] -= value


@numba.njit(**_OPTS)
def _ac_matrix(s, w, jac, cap_rows, cap_f, dev_rows, c_mu, c_pi, probe_rows, g_probe,
               c_probe, y):
    """Board ``s``'s complex nodal matrix at angular frequency ``w``: the DC Jacobian,
    the capacitors, the hybrid-pi capacitances (c_mu base-collector, c_pi base-emitter)
    and the AC probe on the signal nodes (the stamps of ``LinearModel.admittance``)."""
    nf = y.shape[0]
    for i in range(nf):
        for j in range(nf):
            y[i, j] = jac[s, i, j]
    for k in range(cap_rows.shape[0]):
        _stamp_admittance(y, cap_rows[k, 0], cap_rows[k, 1], 1j * (w * cap_f[s, k]))
    for t in range(dev_rows.shape[0]):
        _stamp_admittance(y, dev_rows[t, 1], dev_rows[t, 0], 1j * (w * c_mu[s, t]))
        _stamp_admittance(y, dev_rows[t, 1], dev_rows[t, 2], 1j * (w * c_pi[s, t]))
    for r in probe_rows:
        y[r, r] += g_probe[s] + 1j * (w * c_probe[s])


@numba.njit(**_OPTS)
def two_port(board_of, omega, jac, cap_rows, cap_f, dev_rows, c_mu, c_pi, probe_rows,
             g_probe, c_probe, i_in, i_out, z_out):
    """The open-circuit two-port impedances of each row (board ``board_of[r]`` at angular
    frequency ``omega[r]``): 1 A into the input row, then into the output row, one complex
    solve with both right-hand sides; ``z_out[r]`` = (z_ii, z_oi, z_io, z_oo), NaN where
    the matrix is singular."""
    nf = jac.shape[1]
    y = np.empty((nf, nf), dtype=np.complex128)
    rhs = np.empty((nf, 2), dtype=np.complex128)
    for r in range(board_of.shape[0]):
        s = board_of[r]
        solved = False
        for attempt in range(2):
            _ac_matrix(s, omega[r], jac, cap_rows, cap_f, dev_rows, c_mu, c_pi, probe_rows,
                       g_probe, c_probe, y)
            for i in range(nf):
                rhs[i, 0] = 0.0
                rhs[i, 1] = 0.0
            rhs[i_in, 0] = 1.0
            rhs[i_out, 1] = 1.0
            solved = _lu_solve(y, rhs, attempt > 0)
            if solved:
                break
        if solved:
            z_out[r, 0] = rhs[i_in, 0]
            z_out[r, 1] = rhs[i_out, 0]
            z_out[r, 2] = rhs[i_in, 1]
            z_out[r, 3] = rhs[i_out, 1]
        else:
            for c in range(4):
                z_out[r, c] = np.nan


@numba.njit(**_OPTS)
def close_two_port(z, rl, rs, out):
    """The test set-up closed around each row's two-port ``z`` (z_ii, z_oi, z_io, z_oo)
    with its load ``rl`` (inf: none) and source resistance ``rs``, the formulas of
    ``LinearModel._close_two_port``: ``out[r]`` = gain, its phase in degrees, source gain,
    input resistance, output resistance."""
    for r in range(z.shape[0]):
        z_ii, z_oi, z_io, z_oo = z[r, 0], z[r, 1], z[r, 2], z[r, 3]
        if math.isfinite(rl[r]):
            v_out = z_oi * rl[r] / (rl[r] + z_oo)
            v_in = z_ii - z_io * z_oi / (rl[r] + z_oo)
        else:
            v_out = z_oi
            v_in = z_ii
        gain = v_out / v_in
        out[r, 0] = abs(gain)
        out[r, 1] = math.degrees(math.atan2(gain.imag, gain.real))
        out[r, 2] = abs(gain * v_in / (v_in + rs[r]))
        out[r, 3] = abs(v_in)
        out[r, 4] = abs(z_oo - z_oi * z_io / (rs[r] + z_ii))
