"""Gain and series-resistor input resistance with first-order GUM uncertainty.

Law of propagation of uncertainty: JCGM 100:2008, eq. (10) (uncorrelated inputs) and
eq. (16) (with correlation coefficients, 5.2.2; from memory). Cross-checked by the
Monte Carlo method of JCGM 101:2008 (propagation of distributions, 7.) with a seeded
generator, and the sensitivity coefficients by central finite differences.
Series-resistor method: the same current flows through Rs and the input, so
(V1 − V2)/Rs = V2/Rin (Ohm's law; any circuits textbook, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from reconcile.data.derived_readings import Derived, gain_from_ac, input_resistance_series_method
from reconcile.errors import InputError


def test_gain_by_hand_jcgm100_eq10():
    # V_in = 0.1 V (u 1e-4 V), V_out = 1.2 V (u 1e-3 V): G = 12
    # c_in = −V_out/V_in² = −1.2/0.01 = −120 /V ; c_out = 1/V_in = 10 /V
    # u²(G) = (−120·1e-4)² + (10·1e-3)² = 1.44e-4 + 1.0e-4 = 2.44e-4 → u = 0.01562050
    # (JCGM 100:2008, eq. (10))
    gain, u = gain_from_ac(0.1, 1e-4, 1.2, 1e-3)
    assert gain == pytest.approx(12.0, rel=1e-12)
    assert u == pytest.approx(0.01562050, rel=1e-6)


def test_gain_fully_correlated_by_hand_jcgm100_eq16():
    # r = 1 adds 2·r·c_in·c_out·u_in·u_out = 2·(−120)·10·1e-4·1e-3 = −2.4e-4:
    # u² = 2.44e-4 − 2.4e-4 = 4e-6 → u = 0.002 = |0.012 − 0.010| (JCGM 100:2008, eq. (16))
    result = gain_from_ac(0.1, 1e-4, 1.2, 1e-3, correlation=1.0)
    assert isinstance(result, Derived)
    assert result.uncertainty == pytest.approx(0.002, rel=1e-9)


def test_series_resistor_by_hand_jcgm100_eq10():
    # Rs = 100 Ω (u 0.5 Ω), V1 = 0.2 V (u 2e-4 V), V2 = 0.1 V (u 1e-4 V); D = V1 − V2 = 0.1 V
    # Rin = Rs·V2/D = 100·0.1/0.1 = 100 Ω
    # c_Rs = V2/D = 1 ; c_V1 = −Rs·V2/D² = −100·0.1/0.01 = −1000 Ω/V
    # c_V2 = Rs·V1/D² = 100·0.2/0.01 = 2000 Ω/V
    # u² = (1·0.5)² + (−1000·2e-4)² + (2000·1e-4)² = 0.25 + 0.04 + 0.04 = 0.33
    # u = √0.33 = 0.5744563 Ω   (JCGM 100:2008, eq. (10))
    rin, u = input_resistance_series_method(0.2, 2e-4, 0.1, 1e-4, 100.0, 0.5)
    assert rin == pytest.approx(100.0, rel=1e-12)
    assert u == pytest.approx(0.5744563, rel=1e-6)


def test_series_resistor_correlated_by_hand_jcgm100_eq16():
    # r(V1, V2) = 0.5 adds 2·0.5·(−1000)·2000·2e-4·1e-4 = −0.04: u² = 0.29, u = 0.5385165 Ω
    _, u = input_resistance_series_method(0.2, 2e-4, 0.1, 1e-4, 100.0, 0.5, correlation=0.5)
    assert u == pytest.approx(0.5385165, rel=1e-6)


def _central_difference(f, x: list[float], i: int, h: float) -> float:
    up, down = list(x), list(x)
    up[i] += h
    down[i] -= h
    return (f(*up) - f(*down)) / (2 * h)


def test_sensitivity_coefficients_match_finite_differences():
    # the analytic coefficients in the docstring, checked numerically on a board-like case
    def rin(v1, v2, rs):
        return rs * v2 / (v1 - v2)

    v1, v2, rs = 0.150, 0.0645, 100.0
    d = v1 - v2
    analytic = [-rs * v2 / d**2, rs * v1 / d**2, v2 / d]
    for i, (c, h) in enumerate(zip(analytic, [1e-7, 1e-7, 1e-4], strict=True)):
        assert _central_difference(rin, [v1, v2, rs], i, h) == pytest.approx(c, rel=1e-6)
    # each coefficient alone, through the function: u(Rin) = |c_i|·u_i
    only = {"V1": (1e-4, 0, 0), "V2": (0, 1e-4, 0), "Rs": (0, 0, 0.5)}
    for (u1, u2, urs), c, u_in in zip(only.values(), analytic, [1e-4, 1e-4, 0.5], strict=True):
        _, u = input_resistance_series_method(v1, u1, v2, u2, rs, urs)
        assert u == pytest.approx(abs(c) * u_in, rel=1e-12)


def test_series_resistor_monte_carlo_jcgm101():
    # JCGM 101:2008: propagate normal distributions for V1, V2, Rs by sampling
    # (M = 200 000, seeded); small relative uncertainties (0.1 %, 0.15 %, 0.5 %), so the
    # first-order GUM u should agree with the sample standard deviation within a few %.
    v1, u1, v2, u2, rs, urs = 0.150, 1.5e-4, 0.0645, 1e-4, 100.0, 0.5
    rin, u = input_resistance_series_method(v1, u1, v2, u2, rs, urs)
    rng = np.random.default_rng(20240611)
    m = 200_000
    s1 = rng.normal(v1, u1, m)
    s2 = rng.normal(v2, u2, m)
    srs = rng.normal(rs, urs, m)
    samples = srs * s2 / (s1 - s2)
    assert np.std(samples, ddof=1) == pytest.approx(u, rel=0.03)
    assert np.mean(samples) == pytest.approx(rin, abs=5 * u / math.sqrt(m) + 1e-3 * u)


def test_gain_monte_carlo_with_correlation_jcgm101():
    # JCGM 101:2008 with a bivariate normal (r = 0.6) for the two rms readings.
    v_in, u_in, v_out, u_out, r = 0.05, 5e-5, 0.6, 4e-4, 0.6
    gain, u = gain_from_ac(v_in, u_in, v_out, u_out, correlation=r)
    rng = np.random.default_rng(7)
    cov = np.array([[u_in**2, r * u_in * u_out], [r * u_in * u_out, u_out**2]])
    draws = rng.multivariate_normal([v_in, v_out], cov, size=200_000)
    samples = draws[:, 1] / draws[:, 0]
    assert np.std(samples, ddof=1) == pytest.approx(u, rel=0.03)
    assert np.mean(samples) == pytest.approx(gain, rel=1e-4)


@pytest.mark.parametrize(
    ("args", "key", "words"),
    [
        ((0.1, 1e-4, 0.1, 1e-4, 100.0, 0.5), "v1", "leads may be swapped"),
        ((0.09, 1e-4, 0.1, 1e-4, 100.0, 0.5), "v1", "must be greater than V2"),
        ((0.1, 1e-4, 0.0, 1e-4, 100.0, 0.5), "v2", "> 0"),
        ((0.2, 1e-4, 0.1, 1e-4, 0.0, 0.5), "r_series", "> 0"),
        ((0.2, -1e-4, 0.1, 1e-4, 100.0, 0.5), "u_v1", "negative"),
        ((0.2, 1e-4, 0.1, 1e-4, 100.0, float("nan")), "u_r_series", "finite"),
        ((0.2, 1e-4, 0.1, 1e-4, 100.0, 0.5, 1.5), "correlation", "[-1, 1]"),
    ],
)
def test_series_resistor_bad_inputs(args, key, words):
    with pytest.raises(InputError) as info:
        input_resistance_series_method(*args)
    assert info.value.key == key
    assert words in info.value.message


@pytest.mark.parametrize(
    ("args", "key"),
    [((0.0, 1e-4, 1.0, 1e-3), "v_in"), ((0.1, 1e-4, -1.0, 1e-3), "v_out"),
     ((0.1, 1e-4, 1.0, -1e-3), "u_v_out"), ((0.1, 1e-4, 1.0, 1e-3, -2.0), "correlation"),
     (("a", 1e-4, 1.0, 1e-3), "v_in")],
)
def test_gain_bad_inputs(args, key):
    with pytest.raises(InputError) as info:
        gain_from_ac(*args)
    assert info.value.key == key
