"""The fit's verdict: the readings' χ² on its effective degrees of freedom, the prior
penalty reported beside it and not mixed in.

References: the effective number of parameters of a linear-Gaussian model is the trace
of its hat matrix (Bishop, *Pattern Recognition and Machine Learning*, 2006, §3.5.3,
from memory), checked against the hat matrix written out with numpy; the p-value
against ``scipy.stats.chi2.sf``.
"""

from __future__ import annotations

import numpy as np
import pytest
from fit_support import draw_truth, sample_board
from scipy import stats

from reconcile.inference.chi_square import upper_tail
from reconcile.inference.fitting import P_INCONSISTENT, fit_board
from reconcile.inference.readings_verdict import effective_parameters, readings_chi_square
from reconcile.inference.simulate import full_plan, simulate_readings


def test_effective_parameters_are_the_trace_of_the_hat_matrix():
    """Bishop (2006) §3.5.3: for y = A·w + noise (unit noise after whitening) with the
    prior w ~ N(0, S), the effective number of parameters is tr(H), the hat matrix
    H = A (AᵀA + S⁻¹)⁻¹ Aᵀ. Ours takes it from the posterior covariance alone."""
    rng = np.random.default_rng(3)
    a = rng.normal(size=(9, 5)) * np.array([30.0, 3.0, 1.0, 0.3, 0.01])
    prior_sd = np.array([1.0, 2.0, 0.5, 1.5, 1.0])
    precision = a.T @ a + np.diag(prior_sd**-2.0)
    hat = a @ np.linalg.inv(precision) @ a.T
    covariance = np.linalg.inv(precision)
    assert effective_parameters(covariance, prior_sd) == pytest.approx(np.trace(hat), rel=1e-10)
    # a parameter the readings pin counts 1, one they do not see counts 0
    assert 0.0 < effective_parameters(covariance, prior_sd) < 5.0


def test_p_value_against_scipy_chi2_with_fractional_dof():
    """scipy.stats.chi2.sf at the effective (fractional) degrees of freedom."""
    rng = np.random.default_rng(4)
    z = rng.normal(size=7)
    cov = np.diag([0.1, 0.5, 0.9, 0.99])
    out = readings_chi_square(z, np.full(4, 0.3), np.zeros(4), np.ones(4), cov)
    assert out.dof == pytest.approx(7 - (0.9 + 0.5 + 0.1 + 0.01))
    assert out.p_value == pytest.approx(stats.chi2.sf(np.sum(z**2), out.dof), rel=1e-9)
    assert out.prior_penalty == pytest.approx(4 * 0.09)
    assert out.prior_p_value == pytest.approx(stats.chi2.sf(0.36, 1.51), rel=1e-9)


def test_small_residuals_are_consistent_whatever_the_prior_penalty():
    """The issue's case: every |z| < 0.6, yet the old verdict (the whole objective,
    prior rows included, on as many degrees of freedom as readings) said "does NOT
    explain". The parts are built at 1.7 times their tolerance (outside the prior): the
    readings' verdict is consistent; the prior penalty, beside it, flags the parts."""
    board = sample_board("preamp_ce")
    truth = board
    for ref, r in board.resistors.items():
        truth = truth.with_resistor_ohms(ref, r.ohms * (1 + 1.7 * r.tolerance))
    readings = simulate_readings(truth, full_plan(board), rng=None, temperature=board.temperature)
    fit = fit_board(board, readings)
    assert max(abs(r.normalized_residual) for r in fit.readings) < 0.6
    assert upper_tail(fit.objective, fit.readings_count) < P_INCONSISTENT  # the old rule
    assert fit.verdict == "consistent"
    assert fit.objective == pytest.approx(fit.chi_square + fit.prior_penalty)
    assert not fit.parts_plausible
    data = fit.to_dict()
    assert data["chi_square"] == fit.chi_square and data["dof"] == pytest.approx(
        fit.readings_count - fit.effective_parameters)
    assert data["prior_penalty"] == fit.prior_penalty and data["readings_count"] == len(readings)


@pytest.mark.slow
def test_verdict_p_values_are_roughly_uniform_on_boards_from_the_model_self_consistency():
    """Self-consistency (our engine generates the readings it fits): boards drawn inside
    their tolerances, read with their default uncertainties' noise. The verdict's
    p-values should then be roughly uniform: Kolmogorov–Smirnov against U(0, 1)
    (scipy.stats.kstest) not rejected at 0.001, and no more than a fifth below 0.05."""
    board = sample_board("line_receiver_cb")
    plan = full_plan(board)
    rng = np.random.default_rng(20261203)
    p = []
    for _ in range(48):
        truth = draw_truth(board, rng)
        fit = fit_board(board, truth.read(plan, rng))
        assert fit.success
        p.append(fit.p_value)
    p = np.array(p)
    assert stats.kstest(p, "uniform").pvalue > 1e-3, np.round(np.sort(p), 3)
    assert np.mean(p < 0.05) <= 0.2
