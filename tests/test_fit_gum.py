"""The fit's uncertainty of a spec quantity: linear propagation (the GUM) checked against
Monte Carlo propagation (JCGM 101:2008) over the same posterior.

For a fitted board with MAP vector x and covariance C (internal coordinates):

* GUM (JCGM 100:2008, law of propagation of uncertainty, first order):
  u = sqrt(g·C·gᵀ), g the central-difference gradient of the quantity at x;
* JCGM 101:2008 Monte Carlo: M = 20 000 draws from N(x, C), the quantity evaluated for
  every draw in one batched engine call on the board compiled without probes
  (``space.to_parameters(draws)``, ``solve_batch``); u_MC is their standard deviation.

The two must agree within 10 % (the Monte Carlo standard error of u_MC is about
u/sqrt(2M) ≈ 0.5 %, far inside that), and the GUM 95 % interval y ± 1.96·u must hold
95 % ± 1 % of the Monte Carlo draws.

Not asserted, for the record: the endpoints of the two 95 % intervals, compared as in
JCGM 101:2008 clause 8, differ by 0.1–0.25·u. The Monte Carlo distribution is shifted
by about 0.1·u from the value at the MAP, mostly through the curvature of the
quantities in ln beta (posterior sd about 12 %), and is slightly skewed for the
resistances; a tolerance of one significant digit of u would not validate the GUM
interval's endpoints, while its width and coverage agree.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
from fit_support import draw_truth, sample_board

from reconcile.engine import compile_board, solve_batch
from reconcile.inference.fitting import FitResult, fit_board
from reconcile.inference.priors import ParameterSpace
from reconcile.inference.simulate import full_plan

MC_DRAWS = 20_000
TOLERANCE = 0.10
K95 = 1.959963984540054  # two-sided 95 % point of the standard normal (scipy.stats.norm.ppf)
CASES = {
    "line_receiver_cb": (("resistance", "RE"),),
    "preamp_ce": (),
    "two_stage_npn_pnp": (),
}
PAIRS = [
    (case, q)
    for case, qs in (
        ("line_receiver_cb", ("gain", "input_resistance")),
        ("preamp_ce", ("gain", "input_resistance")),
        ("two_stage_npn_pnp", ("gain", "output_resistance")),
    )
    for q in qs
]


@dataclass(frozen=True)
class Propagation:
    fit: FitResult
    space: ParameterSpace  # on the board compiled without probes
    value: dict[str, float]
    u_gum: dict[str, float]
    samples: dict[str, np.ndarray]
    draws: np.ndarray


def central_gradient(space: ParameterSpace, x: np.ndarray, quantities: tuple[str, ...]):
    """Values at x and central-difference gradients (internal coordinates) of the
    small-signal ``quantities``, from one batched engine call."""
    p = x.size
    h = np.full(p, 1e-5)
    for j, fp in enumerate(space.parameters):
        if fp.kind == "supply":
            h[j] = 1e-5 * abs(x[j])
        elif fp.kind == "temperature":
            h[j] = 1e-3
    xs = np.repeat(x[None, :], 2 * p + 1, axis=0)
    xs[1 : p + 1][np.arange(p), np.arange(p)] += h
    xs[p + 1 :][np.arange(p), np.arange(p)] -= h
    sol = solve_batch(space.circuit, space.to_parameters(xs))
    values, grads = {}, {}
    for q in quantities:
        y = sol.quantity(q)
        values[q] = float(y[0])
        grads[q] = (y[1 : p + 1] - y[p + 1 :]) / (2.0 * h)
    return values, grads


@pytest.fixture(scope="module")
def propagations() -> dict[str, Propagation]:
    out = {}
    for i, (case, extra) in enumerate(CASES.items()):
        board = sample_board(case)
        rng = np.random.default_rng([7, i])
        truth = draw_truth(board, rng)
        plan = full_plan(board) + list(extra)
        readings = truth.read(plan, rng)
        fit = fit_board(board, readings)
        space = ParameterSpace(compile_board(board), fit.space.parameters)
        quantities = tuple(board.spec.targets)
        values, grads = central_gradient(space, fit.x, quantities)
        u_gum = {q: float(np.sqrt(grads[q] @ fit.covariance @ grads[q])) for q in quantities}
        draws = rng.multivariate_normal(fit.x, fit.covariance, size=MC_DRAWS, method="cholesky")
        sol = solve_batch(space.circuit, space.to_parameters(draws))
        samples = {q: sol.quantity(q)[sol.converged] for q in quantities}
        out[case] = Propagation(fit, space, values, u_gum, samples, draws)
    return out


@pytest.mark.parametrize("case", list(CASES))
def test_monte_carlo_draws_are_valid_jcgm101(propagations, case: str) -> None:
    """Every JCGM 101 draw lies inside the parameters' hard bounds and gives an
    operating point (no draw silently dropped or clipped)."""
    prop = propagations[case]
    assert prop.fit.verdict == "consistent"
    assert np.all(prop.draws > prop.space.lower) and np.all(prop.draws < prop.space.upper)
    assert all(s.size == MC_DRAWS for s in prop.samples.values())


@pytest.mark.parametrize(("case", "quantity"), PAIRS)
def test_gum_uncertainty_agrees_with_jcgm101_monte_carlo(propagations, case, quantity) -> None:
    prop = propagations[case]
    u_lin = prop.u_gum[quantity]
    u_mc = float(np.std(prop.samples[quantity], ddof=1))
    assert u_lin > 0.0
    assert abs(u_mc / u_lin - 1.0) <= TOLERANCE, f"u_MC/u_GUM = {u_mc / u_lin:.4f}"


@pytest.mark.parametrize(("case", "quantity"), PAIRS)
def test_gum_95_interval_holds_95_percent_of_jcgm101_distribution(
    propagations, case, quantity
) -> None:
    """The GUM 95 % interval y ± 1.96·u, built from the propagated standard uncertainty,
    holds 95 % ± 1 % of the Monte Carlo distribution (JCGM 101:2008 coverage
    probability; the Monte Carlo standard error of that fraction is 0.15 %)."""
    prop = propagations[case]
    y, u = prop.value[quantity], prop.u_gum[quantity]
    inside = float(np.mean(np.abs(prop.samples[quantity] - y) <= K95 * u))
    assert abs(inside - 0.95) <= 0.01, f"GUM interval holds {inside:.4f} of the MC draws"
