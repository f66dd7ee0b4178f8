"""The one batched Levenberg–Marquardt core (reconcile/inference/optimiser.py).

Outside reference: scipy.optimize.least_squares (trust-region reflective, with the same
box) on standard test problems: the Rosenbrock function as least squares (Rosenbrock
1960; r = (10(x₂ − x₁²), 1 − x₁), minimum 0 at (1, 1)), an exponential decay fitted to
noisy samples (a textbook non-linear regression), and Powell's singular function
(minimum 0 at the origin, singular Jacobian there; Moré, Garbow & Hillstrom 1981, from
memory). Each problem is solved from several starts in one batch, every row on its own.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import least_squares

from reconcile.inference.optimiser import (
    CONVERGED,
    DECREMENT_TOL,
    ITERATION_LIMIT,
    difference_steps,
    minimise,
)


def _batched(fun, jac):
    """``residuals`` and ``jacobian`` callbacks from one-row functions."""
    def residuals(x, rows):
        r = np.array([fun(row) for row in x])
        return r, r.copy()

    def jacobian(x, rows, aux):
        return np.array([jac(row) for row in x])

    return residuals, jacobian


def _rosenbrock(x):
    return np.array([10.0 * (x[1] - x[0] ** 2), 1.0 - x[0]])


def _rosenbrock_jac(x):
    return np.array([[-20.0 * x[0], 10.0], [-1.0, 0.0]])


T = np.linspace(0.0, 4.0, 25)
_rng = np.random.default_rng(7)
Y = 2.5 * np.exp(-1.3 * T) + 0.5 + 0.02 * _rng.standard_normal(T.size)
SIGMA = 0.02


def _decay(p):
    a, k, c = p
    return (a * np.exp(-k * T) + c - Y) / SIGMA


def _decay_jac(p):
    a, k, c = p
    e = np.exp(-k * T)
    return np.stack([e, -a * T * e, np.ones_like(T)], axis=1) / SIGMA


def _powell(x):
    return np.array([x[0] + 10 * x[1], np.sqrt(5) * (x[2] - x[3]), (x[1] - 2 * x[2]) ** 2,
                     np.sqrt(10) * (x[0] - x[3]) ** 2])


def _powell_jac(x):
    return np.array([
        [1.0, 10.0, 0.0, 0.0],
        [0.0, 0.0, np.sqrt(5), -np.sqrt(5)],
        [0.0, 2 * (x[1] - 2 * x[2]), -4 * (x[1] - 2 * x[2]), 0.0],
        [2 * np.sqrt(10) * (x[0] - x[3]), 0.0, 0.0, -2 * np.sqrt(10) * (x[0] - x[3])],
    ])


def _reference(fun, jac, x0, lower, upper):
    out = least_squares(fun, x0, jac=jac, bounds=(lower, upper), method="trf",
                        xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=10_000)
    return out.x, 2.0 * out.cost


def _distance(x, x_ref, jac_ref) -> float:
    """(x − x_ref)ᵀ JᵀJ (x − x_ref): how much sum of squares the gap is worth near the
    minimum, what the convergence test bounds (the Newton decrement)."""
    d = np.asarray(x) - x_ref
    return float(d @ (jac_ref.T @ jac_ref) @ d)


def test_rosenbrock_matches_scipy_least_squares():
    starts = np.array([[-1.2, 1.0], [2.0, -1.0], [0.0, 3.0], [-3.0, -3.0]])
    lower, upper = np.array([-5.0, -5.0]), np.array([5.0, 5.0])
    res, jac = _batched(_rosenbrock, _rosenbrock_jac)
    got = minimise(res, jac, starts, lower, upper, max_iterations=200)
    assert list(got.status) == [CONVERGED] * len(starts)
    for i, x0 in enumerate(starts):
        x_ref, cost_ref = _reference(_rosenbrock, _rosenbrock_jac, x0, lower, upper)
        assert _distance(got.x[i], x_ref, _rosenbrock_jac(x_ref)) <= 2 * DECREMENT_TOL
        assert got.cost[i] <= cost_ref + DECREMENT_TOL
    np.testing.assert_allclose(got.aux, got.residual)


def test_exponential_fit_matches_scipy_least_squares():
    starts = np.array([[1.0, 0.5, 0.0], [5.0, 3.0, 1.0], [0.5, 0.1, -1.0]])
    lower, upper = np.array([0.0, 0.0, -5.0]), np.array([10.0, 10.0, 5.0])
    res, jac = _batched(_decay, _decay_jac)
    got = minimise(res, jac, starts, lower, upper)
    x_ref, cost_ref = _reference(_decay, _decay_jac, starts[0], lower, upper)
    assert list(got.status) == [CONVERGED] * len(starts)
    for i in range(len(starts)):
        # The gap in units of the parameters' standard errors, (Δx)ᵀ JᵀJ (Δx).
        assert _distance(got.x[i], x_ref, _decay_jac(x_ref)) <= 2 * DECREMENT_TOL
        assert abs(got.cost[i] - cost_ref) <= DECREMENT_TOL


def test_active_bound_matches_scipy_least_squares():
    # The exponential fit with the offset c held below its free minimum (c ≤ 0.3): the
    # bound is active at the constrained minimum, which scipy's trf finds too.
    lower, upper = np.array([0.0, 0.0, -5.0]), np.array([10.0, 10.0, 0.3])
    x0 = np.array([[1.0, 0.5, 0.0]])
    res, jac = _batched(_decay, _decay_jac)
    got = minimise(res, jac, x0, lower, upper)
    x_ref, cost_ref = _reference(_decay, _decay_jac, x0[0], lower, upper)
    assert got.status[0] == CONVERGED
    assert got.x[0, 2] == pytest.approx(0.3, abs=1e-12)
    assert _distance(got.x[0], x_ref, _decay_jac(x_ref)) <= 2 * DECREMENT_TOL
    assert abs(got.cost[0] - cost_ref) <= DECREMENT_TOL


def test_singular_minimum_and_fixed_parameters():
    # Powell's singular function: the core reaches the minimum 0 however singular JᵀJ is
    # there; a parameter marked not free keeps its start while the others move.
    lower, upper = np.full(4, -10.0), np.full(4, 10.0)
    x0 = np.array([[3.0, -1.0, 0.0, 1.0], [3.0, -1.0, 0.0, 1.0]])
    free = np.array([[True] * 4, [True, True, True, False]])
    res, jac = _batched(_powell, _powell_jac)
    got = minimise(res, jac, x0, lower, upper, free=free, max_iterations=200)
    assert got.converged.all()
    assert got.cost[0] <= DECREMENT_TOL
    assert got.x[1, 3] == 1.0
    fixed = lambda y: _powell(np.array([*y, 1.0]))  # noqa: E731
    _, cost_ref = _reference(fixed, lambda y: _powell_jac(np.array([*y, 1.0]))[:, :3],
                             x0[1, :3], lower[:3], upper[:3])
    assert abs(got.cost[1] - cost_ref) <= DECREMENT_TOL


def test_iteration_limit_is_an_upper_bound_and_said_so():
    # Stopped after three iterations, a Rosenbrock start is not converged, and its sum of
    # squares is above the true minimum (0) and at most its start's (every accepted step
    # lowers it).
    x0 = np.array([[-1.2, 1.0]])
    res, jac = _batched(_rosenbrock, _rosenbrock_jac)
    got = minimise(res, jac, x0, np.array([-5.0, -5.0]), np.array([5.0, 5.0]), max_iterations=3)
    assert got.status[0] == ITERATION_LIMIT and not got.converged[0]
    assert 0.0 < got.cost[0] <= float(np.sum(_rosenbrock(x0[0]) ** 2))


def test_difference_steps_rule():
    # One rule: logarithmic coordinates 1e-6, a temperature 1e-4 K, a supply relative.
    x = np.array([[np.log(1e3), 300.0, 12.0, 0.5]])
    h = difference_steps(["resistor", "temperature", "supply", "supply"], x)
    np.testing.assert_allclose(h, [[1e-6, 1e-4, 12e-6, 1e-6]])
