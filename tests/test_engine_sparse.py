"""The fixed-pattern factorisation used for large boards (reconcile/engine/sparse.py).

Outside references: numpy.linalg.solve (LAPACK gesv, dense with partial pivoting) on the
same systems; Kirchhoff's current law at every free node of the solved boards. The
comparison of the sparse and the dense engine paths is a self-consistency check.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

from reconcile.engine import compile_board, nominal_parameters, solve_batch, sparse
from reconcile.engine.dc import _Batch
from reconcile.inference.priors import build_space, prior_draws
from reconcile.model.board_loader import board_from_text

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
from tests.benchmarks.bench_engine import stages_board_toml  # noqa: E402


def _system(stages: int, n: int = 200):
    circuit = compile_board(board_from_text(stages_board_toml(stages)))
    space = build_space(circuit)
    params = space.to_parameters(prior_draws(space, n, np.random.default_rng(3)))
    sol = solve_batch(circuit, params)
    batch = _Batch(circuit, params)
    vbe, vbc = batch.junctions(sol.state.v)
    a, rhs = batch.linear_system(np.arange(n), vbe, vbc)
    return circuit, a, rhs


@pytest.mark.parametrize("stages", [4, 12])
def test_sparse_solve_matches_lapack(stages: int) -> None:
    # Reference: numpy.linalg.solve (LAPACK) on the same Newton matrices, and on the
    # same matrices with a capacitive imaginary part on the capacitor pattern.
    circuit, a, rhs = _system(stages)
    lu = sparse.SparseLU(sparse.free_pattern(circuit, capacitors=False))
    got = lu.solve(a, rhs[..., None])
    want = np.linalg.solve(a, rhs[..., None])
    np.testing.assert_allclose(got, want, rtol=1e-10, atol=1e-12)
    pattern = sparse.free_pattern(circuit, capacitors=True)
    rng = np.random.default_rng(1)
    y = a + 1j * 1e-4 * rng.random(a.shape) * pattern
    b = rng.standard_normal((a.shape[0], a.shape[1], 2)) + 0j
    got = sparse.SparseLU(pattern).solve(y, b)
    np.testing.assert_allclose(got, np.linalg.solve(y, b), rtol=1e-9, atol=1e-12)
    # fill stays near the band: far fewer stored entries than the dense matrix
    assert lu.fill < 0.25 * a.shape[1] ** 2


def test_zero_pivot_gives_nan_for_that_sample_only() -> None:
    circuit, a, rhs = _system(4, n=5)
    a = a.copy()
    a[2] = 0.0
    lu = sparse.SparseLU(sparse.free_pattern(circuit, capacitors=False))
    x = lu.solve(a, rhs[..., None])
    assert np.all(np.isnan(x[2]))
    assert np.all(np.isfinite(np.delete(x, 2, axis=0)))


def test_large_board_sparse_and_dense_paths_agree_self_consistency(monkeypatch) -> None:
    # Self-consistency check: an 8-stage board (34 free nodes, above the threshold)
    # solved with the fixed-pattern factorisation and, with the threshold raised, with
    # dense LAPACK: same operating points and small signal. Reference: KCL holds at
    # every free node (residual under 1e-12 A).
    circuit = compile_board(board_from_text(stages_board_toml(8)))
    assert len(circuit.free) >= sparse.SPARSE_FROM_NODES
    space = build_space(circuit)
    params = space.to_parameters(prior_draws(space, 500, np.random.default_rng(8)))
    seed = solve_batch(circuit, nominal_parameters(circuit, 1)).state
    fast = solve_batch(circuit, params, seed)
    monkeypatch.setattr(sparse, "SPARSE_FROM_NODES", 10**6)
    monkeypatch.setattr(sparse, "SPARSE_FROM_BATCH", 10**9)
    dense = solve_batch(circuit, params, seed)
    assert np.all(fast.converged) and np.all(dense.converged)
    np.testing.assert_allclose(fast.node_v, dense.node_v, rtol=0, atol=1e-11)
    for q in ("gain", "input_resistance", "output_resistance"):
        np.testing.assert_allclose(fast.quantity(q), dense.quantity(q), rtol=1e-9)
    assert float(np.max(fast.kcl_residual)) < 1e-12


def test_pays_off_follows_matrices_times_nodes() -> None:
    # The rule of reconcile/engine/sparse.py (measured there): the fixed pattern for
    # many matrices, dense LAPACK for few, the break-even falling as the board grows.
    lu = sparse.SparseLU(sparse.free_pattern(
        compile_board(board_from_text(stages_board_toml(8))), capacitors=False))
    assert not lu.pays_off(1)
    assert lu.pays_off(sparse.SPARSE_FROM_WORK // lu.n + 1)
    assert not lu.pays_off(sparse.SPARSE_FROM_WORK // lu.n - 1)


def test_large_board_jacobian_sparse_and_dense_solves_agree_self_consistency(
        monkeypatch) -> None:
    # Self-consistency check: the measurement model's analytic Jacobian (DC node
    # derivatives, the probe boards' adjoint solves, the small-signal adjoint) of an
    # 8-stage board at 100 parameter vectors, its solves on the fixed pattern where that
    # pays off, and with every solve dense LAPACK: the same rows. Each path is held to
    # mpmath on small boards in tests/test_sensitivity.py.
    from reconcile.inference.measure import MeasurementModel, observations_from
    from reconcile.inference.simulate import full_plan, simulate_readings

    board = board_from_text(stages_board_toml(8))
    plan = [key for key in full_plan(board) if key[0] != "gain"]  # 8 stages: gain ~1e8
    readings = simulate_readings(board, plan, rng=np.random.default_rng(5))
    model = MeasurementModel(board, observations_from(readings, board))
    x = prior_draws(model.space, 100, np.random.default_rng(6))

    def rows():
        sol = model.solve(x, warm=False)
        jac, dv = model.raw_jacobian(x, sol)
        return jac, dv

    fast, fast_dv = rows()
    monkeypatch.setattr(sparse.SparseLU, "pays_off", lambda self, m: False)
    dense, dense_dv = rows()
    assert np.isfinite(fast).all()
    scale = np.maximum(np.max(np.abs(dense), axis=(0, 2), keepdims=True), 1e-300)
    np.testing.assert_allclose(fast / scale, dense / scale, rtol=0, atol=1e-9)
    np.testing.assert_allclose(fast_dv, dense_dv, rtol=1e-8, atol=1e-12)
