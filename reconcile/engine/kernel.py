"""The optional compiled kernel (numba, the ``[fast]`` extra) and when it is used.

The numpy path is the engine; the compiled kernel is a faster way to run two of its
steps for large batches, one board at a time with no numpy temporaries: the warm-start
DC Newton loop (the same stamps, junction limiting and convergence test, the device
equations compiled from their one copy, :func:`reconcile.engine.devices.junction_point`)
and the small-signal two-port solve (the stamps of
:class:`reconcile.engine.small_signal.LinearModel`, one complex solve per sample and
frequency, then closed with the load and source by its formulas). Both factorise with diagonal pivots first, as the numpy path's fixed-pattern
factorisation does, and fall back to partial pivoting where a pivot fails. Samples the
warm start does not bring home go through the numpy path's cold start, gmin and source
stepping as before.

Whether it is used is the user's choice, through the environment variable
``RECONCILE_KERNEL``: ``numpy`` (the default) never, ``numba`` for engine calls of at
least :data:`COMPILED_FROM_BATCH` boards on boards under
:data:`reconcile.engine.sparse.SPARSE_FROM_NODES` free nodes, ``numba-all`` for every
call (the tests). Measured side by side (``tests/benchmarks/bench_engine.py``, README's
benchmark table) it is faster but short of the 1 000 000 boards/s that would make it
the default; loading the compiled code costs 0.5–0.8 s per process, so a run pays for it
only from a few hundred thousand boards. Compiled code is
cached in the user's cache folder (``platformdirs.user_cache_dir("reconcile")/numba``).
"""

from __future__ import annotations

import os

import numpy as np

COMPILED_FROM_BATCH = 4096
"""With ``RECONCILE_KERNEL=numba``, the smallest engine call that uses the compiled kernel
(at most :data:`reconcile.engine.budget.THROUGHPUT_ROWS`, the size ``solve --samples``
calls the engine with). Measured side by side in one process on the sample boards, the
compiled ``solve_batch`` is 2.3–5× faster than the numpy path from 64 boards up; below
the threshold a call takes a few milliseconds either way, and the small calls of fits and
diagnoses stay on the numpy path their tests and benchmarks measure."""
ENV = "RECONCILE_KERNEL"

_state: dict = {}


def cache_dir() -> str:
    """Where numba keeps the compiled kernel."""
    from platformdirs import user_cache_dir

    return os.path.join(user_cache_dir("reconcile"), "numba")


def _load():
    """The compiled module, or None when numba is not installed."""
    if "module" not in _state:
        try:
            os.environ.setdefault("NUMBA_CACHE_DIR", cache_dir())
            import numba

            numba.config.CACHE_DIR = os.environ["NUMBA_CACHE_DIR"]
            from reconcile.engine import _numba_kernels
        except ImportError:
            _numba_kernels = None
        _state["module"] = _numba_kernels
    return _state["module"]


def available() -> bool:
    """Whether numba is installed (the compiled kernel can run)."""
    return _load() is not None


def use_compiled(n_boards: int) -> bool:
    """Whether a batch of ``n_boards`` runs on the compiled kernel."""
    choice = os.environ.get(ENV, "").strip().lower() or "numpy"
    if choice == "numpy":
        return False
    if choice not in ("numba", "numba-all"):
        from reconcile.errors import InputError

        raise InputError(f"{ENV}={choice!r}: give numpy, numba or numba-all", key=ENV)
    if not available():
        from reconcile.errors import ReconcileError

        raise ReconcileError(f"{ENV}={choice} but numba is not installed (pip install '.[fast]')")
    return choice == "numba-all" or n_boards >= COMPILED_FROM_BATCH


def newton_dc(batch, v0_free, vj0, max_iter: int, abs_tol: float, rel_tol: float):
    """Warm-started Newton over every sample of ``batch`` (a ``dc._Batch``) from free
    voltages ``v0_free`` (N, nF) and junction voltages ``vj0`` (N, nT, 2).

    Returns free voltages, junction voltages, converged mask, iteration counts, the
    Jacobian (N, nF, nF) and right-hand side (N, nF) linearised at the final voltages,
    and the largest |KCL error| of each sample there (N,).
    """
    k = _load()
    n, n_f = batch.n, batch.n_free
    n_t = batch.q_free.shape[0]
    v = np.empty((n, n_f))
    vj = np.empty((n, n_t, 2))
    conv = np.zeros(n, dtype=np.bool_)
    iters = np.zeros(n, dtype=np.int64)
    jac = np.empty((n, n_f, n_f))
    rhs = np.empty((n, n_f))
    kcl = np.empty(n)
    k.newton_dc(
        batch.g_ff, batch.store_of.astype(np.int64), batch.rhs_fixed, batch.vq_fixed, batch.q_free.astype(np.int64),
        np.ascontiguousarray(batch.circuit.polarity, dtype=float),
        batch.is_t, batch.n_vt, _f(batch.beta), _f(batch.beta_r), _f(batch.va), batch.v_crit,
        np.ascontiguousarray(v0_free), np.ascontiguousarray(vj0), int(max_iter),
        float(abs_tol), float(rel_tol), v, vj, conv, iters, jac, rhs, kcl,
    )
    return v, vj, conv, iters, jac, rhs, kcl


def two_port(circuit, params, jac_ff: np.ndarray, c_pi: np.ndarray, board_of: np.ndarray,
             freq: np.ndarray) -> np.ndarray:
    """The open-circuit two-port impedances (rows, 4): z_ii, z_oi, z_io, z_oo of board
    ``board_of[r]`` at ``freq[r]`` Hz, one compiled complex solve per row (the stamps of
    :class:`reconcile.engine.small_signal.LinearModel`; NaN where singular)."""
    pos = circuit.free_position
    probe = sorted({int(pos[circuit.input_node]), int(pos[circuit.output_node])} - {-1})
    z = np.empty((len(board_of), 4), dtype=complex)
    _load().two_port(
        np.ascontiguousarray(board_of, dtype=np.int64), _f(2.0 * np.pi * freq),
        _f(jac_ff), pos[circuit.capacitor_nodes].astype(np.int64).reshape(-1, 2),
        _f(params.capacitor_farads), pos[circuit.transistor_nodes].astype(np.int64).reshape(-1, 3),
        _f(params.c_mu), _f(c_pi), np.asarray(probe, dtype=np.int64),
        _f(params.probe_ac_siemens), _f(params.probe_ac_farads),
        int(pos[circuit.input_node]), int(pos[circuit.output_node]), z,
    )
    return z


CLOSED_QUANTITIES = ("gain", "gain_phase_deg", "source_gain", "input_resistance",
                     "output_resistance")
"""The columns :func:`close_two_port` gives, in order."""


def close_two_port(z: np.ndarray, load_ohms: np.ndarray, source_ohms: np.ndarray) -> dict:
    """The small-signal quantities of :data:`CLOSED_QUANTITIES` of each row's two-port
    ``z`` (rows, 4) closed with its load and source resistance, compiled (the formulas
    of :class:`reconcile.engine.small_signal.LinearModel`)."""
    out = np.empty((z.shape[0], len(CLOSED_QUANTITIES)))
    _load().close_two_port(np.ascontiguousarray(z), _f(load_ohms), _f(source_ohms), out)
    return {name: out[:, k] for k, name in enumerate(CLOSED_QUANTITIES)}


def _f(x: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(x, dtype=float)


def solve_small(a: np.ndarray, b: np.ndarray, sparse=None) -> np.ndarray:
    """Solve a stack of systems a (M, n, n) x = b (M, n, k); NaN where singular.

    With ``sparse`` (a :class:`reconcile.engine.sparse.SparseLU` of the matrices'
    pattern, given for large boards) the fixed-pattern factorisation where it pays off
    (:meth:`~reconcile.engine.sparse.SparseLU.pays_off`); else the compiled
    LU for large stacks when the kernel is in use, else :func:`numpy.linalg.solve` (one
    matrix at a time only if the stack has a singular one).
    """
    if sparse is not None and sparse.pays_off(a.shape[0]):
        x = sparse.solve(a, b)
        bad = np.flatnonzero(~np.isfinite(x).reshape(x.shape[0], -1).all(axis=1))
        if len(bad):  # a failed static pivot: dense LAPACK with row exchanges
            x[bad] = solve_small(a[bad], b[bad])
        return x
    if use_compiled(a.shape[0]):
        out = np.empty(b.shape, dtype=np.result_type(a, b))
        _load().solve_stack(np.ascontiguousarray(a), np.ascontiguousarray(b), out)
        return out
    try:
        return np.linalg.solve(a, b)
    except np.linalg.LinAlgError:
        out = np.full(b.shape, np.nan, dtype=np.result_type(a, b))
        for i in range(a.shape[0]):
            try:
                out[i] = np.linalg.solve(a[i], b[i])
            except np.linalg.LinAlgError:
                pass
        return out
