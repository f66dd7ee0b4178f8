"""A factorisation that uses the board's fixed sparsity pattern, for large boards.

Every sample of a batch has the same nodal pattern: which free nodes a branch, a
transistor or a capacitor joins never changes. So the ordering and the whole list of
elimination steps can be worked out once (the symbolic factorisation) and then run on all
samples at once, each step one vector operation over the sample axis on the structural
nonzeros only. For the cascaded boards of the growth benchmark the filled pattern stays
banded, and the work per board grows about linearly with the board instead of with the
cube of its node count, as dense LU does.

The ordering is reverse Cuthill–McKee (:func:`scipy.sparse.csgraph.reverse_cuthill_mckee`)
of the symmetrised pattern, which keeps the fill inside a narrow band; boards under
:data:`SPARSE_FROM_NODES` free nodes keep their natural order (their fill is a few
entries, and scipy.sparse's import would cost more than the solve). Pivots are taken
on the diagonal in that order, without row exchanges (the usual choice for nodal
matrices, whose diagonal holds every conductance at the node); a pivot that is zero or
not finite makes that sample's answer NaN here (the callers then fall back to dense
LAPACK for it).

Used for every batch of :data:`SPARSE_FROM_BATCH` samples or more and for every board of
:data:`SPARSE_FROM_NODES` free nodes or more; a sample whose pivot fails is solved again
by dense LAPACK with partial pivoting (:func:`numpy.linalg.solve`) before it counts as
a failed step.
"""

from __future__ import annotations

import functools

import numpy as np

SPARSE_FROM_NODES = 25
"""Free-node count from which the engine always factorises with the fixed pattern."""
SPARSE_FROM_BATCH = 64
"""Batch size from which smaller boards use it too: run over a batch, each elimination
step is one vector operation over the samples, which beats LAPACK's per-matrix overhead
even on a 6-node board (measured side by side: 20 000 systems of the sample preamp in
2 ms against 33 ms for ``numpy.linalg.solve``); on a handful of samples the Python-level
steps cost more than LAPACK."""
SPARSE_FROM_WORK = 3000
"""Matrices × free nodes from which one solve runs on the fixed pattern rather than by
dense LAPACK (:meth:`SparseLU.pays_off`). The pattern's steps cost about 20 µs per node
whatever the number of matrices (Python-level vector operations), dense LAPACK about
0.0066·n² µs per matrix; measured side by side on the cascades of the growth benchmark
(10, 18, 34 and 66 free nodes, 8 to 1 024 matrices, one core) the two break even at 280,
170, 100 and 45 matrices, i.e. at matrices × nodes ≈ 3 000. Newton's last steps, where
only the samples still moving are solved, fall below it."""


def free_pattern(circuit, *, capacitors: bool) -> np.ndarray:
    """(nF, nF) bool: the entries of the free-node matrix that can be nonzero (the
    diagonal always), from branches and transistors, and capacitors if asked."""
    pos = circuit.free_position
    n = len(circuit.free)
    pattern = np.eye(n, dtype=bool)
    pairs = [circuit.branch_nodes]
    if capacitors and len(circuit.capacitor_nodes):
        pairs.append(circuit.capacitor_nodes)
    for nodes in pairs:
        for a, b in nodes.tolist():
            ra, rb = pos[a], pos[b]
            if ra >= 0 and rb >= 0:
                pattern[ra, rb] = pattern[rb, ra] = True
    for terminals in circuit.transistor_nodes.tolist():
        rows = [pos[t] for t in terminals if pos[t] >= 0]
        for r in rows:
            for c in rows:
                pattern[r, c] = True
    return pattern


class SparseLU:
    """The symbolic factorisation of one pattern, and the numeric solve over a batch."""

    def __init__(self, pattern: np.ndarray) -> None:
        n = pattern.shape[0]
        self.n = n
        if n < SPARSE_FROM_NODES:
            # a small board: the fill of any order is a few entries, and importing
            # scipy.sparse (about 0.2 s) would cost more than the whole solve
            perm = np.arange(n, dtype=np.intp)
        else:
            from scipy.sparse import csr_matrix
            from scipy.sparse.csgraph import reverse_cuthill_mckee

            sym = csr_matrix(pattern | pattern.T)
            perm = np.asarray(reverse_cuthill_mckee(sym, symmetric_mode=True), dtype=np.intp)
        self.perm = perm
        filled = (pattern | pattern.T)[np.ix_(perm, perm)].copy()
        steps = []
        for k in range(n):
            lower = np.flatnonzero(filled[k + 1 :, k]) + k + 1
            upper = np.flatnonzero(filled[k, k + 1 :]) + k + 1
            if len(lower) and len(upper):
                filled[np.ix_(lower, upper)] = True
            steps.append((lower, upper))
        rows, cols = np.nonzero(filled)
        self.n_slots = len(rows)
        slot = np.full((n, n), -1, dtype=np.intp)
        slot[rows, cols] = np.arange(len(rows))
        # where each slot's value comes from in the original (unpermuted) matrix
        self.gather = perm[rows] * n + perm[cols]
        self.steps = [
            (
                slot[k, k],
                lower,
                slot[lower, k],
                upper,
                slot[k, upper],
                slot[np.ix_(lower, upper)],
            )
            for k, (lower, upper) in enumerate(steps)
        ]
        self.natural_order = bool(np.array_equal(perm, np.arange(n)))
        """Whether the elimination runs in the caller's own node order."""
        self.diagonal = np.array([step[0] for step in self.steps], dtype=np.intp)
        """The slots of the pivots, in elimination order."""

    def pays_off(self, m: int) -> bool:
        """Whether solving ``m`` matrices on the pattern beats dense LAPACK
        (:data:`SPARSE_FROM_WORK`)."""
        return m * self.n >= SPARSE_FROM_WORK

    @property
    def fill(self) -> int:
        """Stored entries after elimination (structural nonzeros plus fill-in)."""
        return self.n_slots

    def solve(self, a: np.ndarray, b: np.ndarray) -> np.ndarray:
        """x with a x = b for every sample: a (M, n, n), b (M, n, k) → (M, n, k)."""
        m, n = a.shape[0], self.n
        return self.solve_slots(a.reshape(m, n * n)[:, self.gather], b)

    def solve_slots(self, a_slots: np.ndarray, b: np.ndarray) -> np.ndarray:
        """As :meth:`solve`, the matrices given by their slots (M, :attr:`fill`) in the
        order of :attr:`gather` (how the engine stores a large board's matrix)."""
        m = a_slots.shape[0]
        n = self.n
        vals = np.ascontiguousarray(a_slots.T)  # (slots, M)
        dtype = np.result_type(a_slots, b)
        natural = self.natural_order
        # (n, k, M), contiguous over the samples: one copy, gathered only when reordered
        rhs = np.ascontiguousarray(np.moveaxis(b if natural else b[:, self.perm, :], 0, -1),
                                   dtype=dtype)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            for kk, lower, s_l, upper, s_u, s_lu in self.steps:
                if len(lower):
                    col = vals[s_l] / vals[kk]
                    vals[s_l] = col
                    if len(upper):
                        vals[s_lu] -= col[:, None, :] * vals[s_u][None, :, :]
            # a pivot is never changed after its step: check them all at once
            piv = vals[self.diagonal]
            bad = ~np.all((np.abs(piv) > 0.0) & np.isfinite(piv), axis=0)
            # forward substitution (unit lower triangle)
            for k, (_, lower, s_l, _, _, _) in enumerate(self.steps):
                if len(lower):
                    rhs[lower] -= vals[s_l][:, None, :] * rhs[k][None, :, :]
            # back substitution
            for k in range(n - 1, -1, -1):
                kk, _, _, upper, s_u, _ = self.steps[k]
                if len(upper):
                    rhs[k] -= (vals[s_u][:, None, :] * rhs[upper]).sum(axis=0)
                rhs[k] /= vals[kk]
        if natural:
            out = np.moveaxis(rhs, -1, 0)  # a view, in the caller's order
        else:
            out = np.empty((m, n, rhs.shape[1]), dtype=rhs.dtype)
            out[:, self.perm, :] = np.moveaxis(rhs, -1, 0)  # back to the caller's order
        if np.any(bad):
            out[bad] = np.nan
        return out


@functools.lru_cache(maxsize=32)
def _cached(n: int, packed: bytes) -> SparseLU:
    return SparseLU(np.unpackbits(np.frombuffer(packed, dtype=np.uint8))[: n * n]
                    .reshape(n, n).astype(bool))


def factorisation_for(circuit, *, capacitors: bool, n_samples: int) -> SparseLU | None:
    """The fixed-pattern factorisation of ``circuit``'s free-node matrix (with the
    capacitors for small signal), or None when dense LAPACK is the better choice: a
    board under :data:`SPARSE_FROM_NODES` free nodes in a batch under
    :data:`SPARSE_FROM_BATCH` samples. Symbolic factorisations are cached by pattern."""
    n = len(circuit.free)
    if n < SPARSE_FROM_NODES and n_samples < SPARSE_FROM_BATCH:
        return None
    pattern = free_pattern(circuit, capacitors=capacitors)
    return _cached(n, np.packbits(pattern.ravel()).tobytes())
