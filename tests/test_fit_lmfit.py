"""The fit uses lmfit properly: named Parameters made safe from the keys, lmfit's own
covariance, the ``MinimizerResult`` kept on the result.

References: Python's own rules for identifiers (``str.isidentifier``, ``keyword``);
the Gauss–Newton covariance inv(JᵀJ) of the weighted system (self-consistency with our
own Jacobian, named so).
"""

from __future__ import annotations

import keyword

import numpy as np
import pytest
from fit_support import SAMPLE_DATA, sample_board

from reconcile.data.readings import load_readings
from reconcile.inference.fitting import fit_board
from reconcile.inference.parameter_names import ParameterNames, safe_names


def test_safe_names_are_unique_identifiers_and_reversible():
    keys = ["RE1", "Q1.IS", "Q1_IS", "temperature", "DMM-A:voltage:20V", "1R", "lambda",
            "print", "scope CH1/CH2:gain", ""]
    names = safe_names(keys)
    assert len(set(names)) == len(keys)
    for n in names:
        assert n.isidentifier() and not keyword.iskeyword(n), n
    assert names[:3] == ["RE1", "Q1_IS", "Q1_IS_2"]
    mapping = ParameterNames(keys)
    assert [mapping.key_of[mapping.name_of[k]] for k in keys] == keys


@pytest.fixture(scope="module")
def sample_fit():
    board = sample_board("line_receiver_cb")
    readings = load_readings(SAMPLE_DATA / "line_receiver_built.csv", board)
    return fit_board(board, readings)


def test_minimizer_result_holds_named_parameters_at_the_fit(sample_fit):
    fit = sample_fit
    result = fit.minimizer_result
    assert result.method == "least_squares"
    assert fit.covariance_source == "lmfit"
    assert [fit.names.key_of[n] for n in result.params] == list(fit.space.keys)
    assert fit.names.name_of["Q1.IS"] == "Q1_IS"
    x = np.array([result.params[fit.names.name_of[k]].value for k in fit.space.keys])
    np.testing.assert_array_equal(x, fit.x)
    sd = np.array([result.params[fit.names.name_of[k]].stderr for k in fit.space.keys])
    np.testing.assert_allclose(sd, np.sqrt(np.diag(fit.covariance)), rtol=1e-12)
    # lmfit's χ² is the whole objective: readings plus prior rows (scale_covar=False)
    assert result.chisqr == pytest.approx(fit.objective, rel=1e-9)


def test_lmfit_covariance_is_the_gauss_newton_one_self_consistency(sample_fit):
    """lmfit's covar (scale_covar=False) against inv(JᵀJ) of our weighted Jacobian at
    the fit (our own Jacobian: self-consistency)."""
    fit = sample_fit
    j_w = fit.problem.weighted_jacobian(fit.x)
    np.testing.assert_allclose(fit.covariance, np.linalg.inv(j_w.T @ j_w), rtol=1e-6,
                               atol=1e-12 * np.max(np.abs(fit.covariance)))
