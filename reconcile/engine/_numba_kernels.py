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
def _lu_solve(a, b):
    """Solve a x = b in place (a: n×n, b: n×k), partial pivoting; False if singular."""
    n = a.shape[0]
    k = b.shape[1]
    for col in range(n):
        piv = col
        best = abs(a[col, col])
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
    for col in range(n - 1, -1, -1):
        inv = 1.0 / a[col, col]
        for j in range(k):
            s = b[col, j]
            for c in range(col + 1, n):
                s -= a[col, c] * b[c, j]
            b[col, j] = s * inv
    return True


@numba.njit(**_OPTS)
def solve_stack(a, b, out):
    """out[i] = solve(a[i], b[i]) for a stack (M, n, n) and (M, n, k); NaN where singular.
    ``a`` and ``b`` are left unchanged."""
    m = a.shape[0]
    for i in range(m):
        ai = a[i].copy()
        bi = b[i].copy()
        if _lu_solve(ai, bi):
            out[i] = bi
        else:
            out[i] = np.nan


@numba.njit(**_OPTS)
def _terminal_voltage(v, vq, row, s, t, k):
    return v[row] if row >= 0 else vq[s, t, k]


@numba.njit(**_OPTS)
def _assemble(s, v, vbe, vbc, g_ff, store_of, rhs_fixed, vq, q_free, pol, is_t, n_vt, beta,
              beta_r, va, a, b):
    """The Newton system of board ``s`` with every transistor linearised at (vbe, vbc):
    the same stamp as ``dc._Batch.linear_system``. ``store_of[i*nF + j]`` is where entry
    (i, j) is stored in ``g_ff`` (-1: a structural zero)."""
    nf = a.shape[0]
    for i in range(nf):
        b[i, 0] = rhs_fixed[s, i]
        for j in range(nf):
            k = store_of[i * nf + j]
            a[i, j] = g_ff[s, k] if k >= 0 else 0.0
    for t in range(q_free.shape[0]):
        ic, ib, c_be, c_bc, b_be, b_bc = junction_point(
            vbe[t], vbc[t], is_t[s, t], beta[s, t], beta_r[s, t], va[s, t], n_vt[s, t]
        )
        p = pol[t]
        ic0 = p * (ic - c_be * vbe[t] - c_bc * vbc[t])
        ib0 = p * (ib - b_be * vbe[t] - b_bc * vbc[t])
        # d(current into c, b, e)/d(V of c, b, e); the polarity sign cancels
        rc = (-c_bc, c_be + c_bc, -c_be)
        rb = (-b_bc, b_be + b_bc, -b_be)
        re_ = (c_bc + b_bc, -(c_be + c_bc + b_be + b_bc), c_be + b_be)
        i0 = (ic0, ib0, -(ic0 + ib0))
        for k in range(3):
            pk = q_free[t, k]
            if pk < 0:
                continue
            row = rc if k == 0 else (rb if k == 1 else re_)
            b[pk, 0] -= i0[k]
            for j in range(3):
                pj = q_free[t, j]
                if pj >= 0:
                    a[pk, pj] += row[j]
                else:
                    b[pk, 0] -= row[j] * vq[s, t, j]


@numba.njit(**_OPTS)
def newton_dc(
    g_ff, store_of, rhs_fixed, vq, q_free, pol, is_t, n_vt, beta, beta_r, va, v_crit,
    v0, vj0, max_iter, abs_tol, rel_tol,
    v_out, vj_out, conv_out, iters_out, jac_out, rhs_out,
):
    """Warm-started Newton for every board, from free voltages ``v0`` (M, nF) and
    junction voltages ``vj0`` (M, nT, 2) at which the first step linearises. On return
    ``jac_out``/``rhs_out`` hold the system linearised at the final node voltages."""
    m = g_ff.shape[0]
    nf = rhs_fixed.shape[1]
    nt = q_free.shape[0]
    a = np.empty((nf, nf))
    b = np.empty((nf, 1))
    v = np.empty(nf)
    vbe = np.empty(nt)
    vbc = np.empty(nt)
    for s in range(m):
        for i in range(nf):
            v[i] = v0[s, i]
        for t in range(nt):
            vbe[t] = vj0[s, t, 0]
            vbc[t] = vj0[s, t, 1]
        converged = False
        it = 0
        while it < max_iter:
            limited = False
            if it > 0:
                for t in range(nt):
                    vc = _terminal_voltage(v, vq, q_free[t, 0], s, t, 0)
                    vb = _terminal_voltage(v, vq, q_free[t, 1], s, t, 1)
                    ve = _terminal_voltage(v, vq, q_free[t, 2], s, t, 2)
                    x, l1 = _limit(pol[t] * (vb - ve), vbe[t], n_vt[s, t], v_crit[s, t])
                    y, l2 = _limit(pol[t] * (vb - vc), vbc[t], n_vt[s, t], v_crit[s, t])
                    vbe[t] = x
                    vbc[t] = y
                    limited = limited or l1 or l2
            else:
                limited = True  # the first step is never the last
            _assemble(s, v, vbe, vbc, g_ff, store_of, rhs_fixed, vq, q_free, pol, is_t, n_vt,
                      beta, beta_r, va, a, b)
            it += 1
            if not _lu_solve(a, b):
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
            vc = _terminal_voltage(v, vq, q_free[t, 0], s, t, 0)
            vb = _terminal_voltage(v, vq, q_free[t, 1], s, t, 1)
            ve = _terminal_voltage(v, vq, q_free[t, 2], s, t, 2)
            vbe[t] = pol[t] * (vb - ve)
            vbc[t] = pol[t] * (vb - vc)
        _assemble(s, v, vbe, vbc, g_ff, store_of, rhs_fixed, vq, q_free, pol, is_t, n_vt,
                  beta, beta_r, va, a, b)
        for i in range(nf):
            rhs_out[s, i] = b[i, 0]
            for j in range(nf):
                jac_out[s, i, j] = a[i, j]
