"""The chi-square upper tail against mpmath and scipy (reference libraries)."""

from __future__ import annotations

import mpmath
import numpy as np
import pytest
from scipy import stats

from reconcile.inference.chi_square import upper_tail


def _reference(x: float, dof: float) -> float:
    # Q(ν/2, x/2), the regularized upper incomplete gamma, at 40 digits
    with mpmath.workdps(40):
        return float(mpmath.gammainc(mpmath.mpf(dof) / 2, mpmath.mpf(x) / 2,
                                     mpmath.inf, regularized=True))


@pytest.mark.parametrize("dof", [0.3, 1, 2, 3, 4.5, 7, 10, 33.3, 120, 1000])
def test_upper_tail_matches_mpmath_to_1e_12_relative(dof):
    for x in (1e-6, 0.01, 0.5, 1, dof / 2, dof, dof + 1, 2 * dof, 5 * dof + 30, 700):
        ref = _reference(x, dof)
        if ref < 1e-290:
            continue
        assert upper_tail(x, dof) == pytest.approx(ref, rel=1e-12, abs=1e-300), (x, dof)


def test_upper_tail_agrees_with_scipy_chi2_sf_on_random_points():
    rng = np.random.default_rng(7)
    dof = rng.uniform(0.5, 200, 2000)
    x = dof * rng.lognormal(0.0, 0.6, dof.size)
    ours = upper_tail(x, dof)
    assert ours.shape == x.shape
    np.testing.assert_allclose(ours, stats.chi2.sf(x, dof), rtol=1e-10, atol=1e-300)


def test_upper_tail_edges():
    assert upper_tail(0.0, 3) == 1.0
    assert upper_tail(-1.0, 3) == 1.0
    assert upper_tail(np.inf, 3) == 0.0
    assert np.isnan(upper_tail(np.nan, 3))
    assert isinstance(upper_tail(2.0, 2), float)
    # two degrees of freedom: exactly exp(-x/2) (the exponential distribution)
    assert upper_tail(3.7, 2) == pytest.approx(np.exp(-3.7 / 2), rel=1e-14)
    with pytest.raises(ValueError):
        upper_tail(1.0, 0)
