"""Readings computed from other readings, with first-order (GUM) uncertainty.

Two bench quantities are not read directly but worked out from AC voltmeter readings:

- the small-signal gain, ``G = V_out / V_in`` (two rms readings);
- the input resistance by the series-resistor method: a known resistor ``Rs`` sits
  between generator and board input; ``V1`` is read at its generator side and ``V2``
  at the board input. The same current flows through ``Rs`` and into the board, so
  ``(V1 − V2)/Rs = V2/Rin`` and ``Rin = Rs·V2/(V1 − V2)``. This assumes the input looks
  resistive at the test frequency (V1 and V2 in phase); otherwise the rms readings do
  not subtract.

Uncertainty is propagated by the law of propagation of uncertainty, JCGM 100:2008
eq. (10) for uncorrelated inputs, with the correlation term of eq. (16) (5.2.2, from
memory) when two readings share an error (one meter on one range often makes them
positively correlated, which lowers the uncertainty of a ratio). Sensitivity
coefficients are written out analytically in each function. First order is sound when
relative uncertainties are small; for ``V1 − V2`` close to its own uncertainty it is
not, and a Monte Carlo run (JCGM 101:2008) should be preferred.
"""

from __future__ import annotations

import math
from typing import NamedTuple

from reconcile.errors import InputError
from reconcile.model.quantities import REGISTRY

__all__ = [
    "SERIES_RESISTOR_RANGE_OHM",
    "Derived",
    "check_series_resistor",
    "gain_from_ac",
    "input_resistance_series_method",
    "series_resistor_uncertainty",
]

SERIES_RESISTOR_RANGE_OHM = (1.0, 1e9)
"""The series resistor of the series-resistor method, ohm: 1 ohm to 1 Gohm (docs/formats.md
§3.3). It should be near the input resistance it measures; outside this range the
method's arithmetic says nothing."""


class Derived(NamedTuple):
    """A derived value and its standard uncertainty (same unit)."""

    value: float
    uncertainty: float


def _number(value: float, key: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"expected a number, got {value!r}", key=key) from exc
    if not math.isfinite(number):
        raise InputError(f"expected a finite number, got {value!r}", key=key)
    return number


def _volts(value: float, key: str) -> float:
    number = _number(value, key)
    low, high = REGISTRY["voltage"].value_range
    if not low <= number <= high:
        raise InputError(
            f"an rms voltage of {number:g} V is outside the physical limits {low:g} V to "
            f"{high:g} V (docs/formats.md §3.3)", key=key)
    return number


def check_series_resistor(r_ohm: float, key: str = "r_series") -> float:
    """The series resistor as a float, refused outside :data:`SERIES_RESISTOR_RANGE_OHM`."""
    rs = _number(r_ohm, key)
    low, high = SERIES_RESISTOR_RANGE_OHM
    if not low <= rs <= high:
        raise InputError(
            f"the series resistor must be > 0 ohm and within {low:g} to {high:g} ohm "
            f"(docs/formats.md §3.3), got {rs:g} ohm", key=key)
    return rs


def _result(quantity: str, value: float, u: float, from_: str) -> Derived:
    """The derived reading, refused when the readings loader would refuse it."""
    from reconcile.data.readings import Reading
    from reconcile.data.validation import reading_problems

    problems = reading_problems(Reading.from_si(quantity, "", value, u))
    if problems:
        raise InputError(
            f"the derived {quantity.replace('_', ' ')} cannot be a reading: {problems[0]} "
            f"(check {from_})", key=quantity)
    return Derived(value, u)


def _uncertainty(value: float, key: str) -> float:
    number = _number(value, key)
    if number < 0:
        raise InputError(f"a standard uncertainty cannot be negative, got {value!r}", key=key)
    return number


def _correlation(value: float) -> float:
    number = _number(value, "correlation")
    if not -1.0 <= number <= 1.0:
        raise InputError(f"a correlation coefficient lies in [-1, 1], got {value!r}",
                         key="correlation")
    return number


def gain_from_ac(
    v_in: float,
    u_v_in: float,
    v_out: float,
    u_v_out: float,
    correlation: float = 0.0,
) -> Derived:
    """Voltage gain from two AC rms readings, with its standard uncertainty.

    ``G = V_out / V_in``. Sensitivity coefficients::

        c_in  = ∂G/∂V_in  = −V_out / V_in²
        c_out = ∂G/∂V_out =  1 / V_in

    and (JCGM 100:2008 eq. (10), plus the eq. (16) correlation term)::

        u²(G) = c_in²·u²(V_in) + c_out²·u²(V_out) + 2·r·c_in·c_out·u(V_in)·u(V_out)

    Parameters
    ----------
    v_in : float
        Input rms voltage, V; > 0.
    u_v_in : float
        Its standard uncertainty, V.
    v_out : float
        Output rms voltage, V; >= 0.
    u_v_out : float
        Its standard uncertainty, V.
    correlation : float
        Correlation coefficient r of the two readings' errors, in [-1, 1] (default 0).

    Returns
    -------
    Derived
        ``(gain, u)``, both dimensionless.

    Raises
    ------
    InputError
        ``v_in <= 0``, ``v_out < 0``, a negative uncertainty, or ``|r| > 1``.
    """
    vi = _volts(v_in, "v_in")
    vo = _volts(v_out, "v_out")
    ui = _uncertainty(u_v_in, "u_v_in")
    uo = _uncertainty(u_v_out, "u_v_out")
    r = _correlation(correlation)
    if vi <= 0:
        raise InputError(f"the input rms voltage must be > 0 V, got {vi:g} V", key="v_in")
    if vo < 0:
        raise InputError(f"an rms voltage cannot be negative, got {vo:g} V", key="v_out")
    gain = vo / vi
    c_in = -gain / vi
    c_out = 1.0 / vi
    variance = _square(c_in * ui) + _square(c_out * uo) + 2.0 * r * c_in * c_out * ui * uo
    return _result("gain", gain, math.sqrt(max(variance, 0.0)), "the two voltages and their uncertainties")


def input_resistance_series_method(
    v1: float,
    u_v1: float,
    v2: float,
    u_v2: float,
    r_series: float,
    u_r_series: float,
    correlation: float = 0.0,
) -> Derived:
    """Input resistance from the series-resistor method, with its standard uncertainty.

    ``Rin = Rs·V2 / (V1 − V2)``, where ``V1`` is the rms voltage at the generator side of
    the series resistor ``Rs`` and ``V2`` the rms voltage at the board input. With
    ``D = V1 − V2`` the sensitivity coefficients are::

        c_Rs = ∂Rin/∂Rs = V2 / D
        c_V1 = ∂Rin/∂V1 = −Rs·V2 / D²
        c_V2 = ∂Rin/∂V2 = Rs/D + Rs·V2/D² = Rs·V1 / D²

    and (JCGM 100:2008 eq. (10), plus the eq. (16) term for correlated V1, V2)::

        u²(Rin) = c_Rs²·u²(Rs) + c_V1²·u²(V1) + c_V2²·u²(V2) + 2·r·c_V1·c_V2·u(V1)·u(V2)

    Parameters
    ----------
    v1 : float
        Rms voltage at the generator side of ``Rs``, V.
    u_v1 : float
        Its standard uncertainty, V.
    v2 : float
        Rms voltage at the board input, V; > 0 and < ``v1``.
    u_v2 : float
        Its standard uncertainty, V.
    r_series : float
        The series resistor, ohm; > 0.
    u_r_series : float
        Its standard uncertainty, ohm.
    correlation : float
        Correlation coefficient r of the V1 and V2 errors, in [-1, 1] (default 0).

    Returns
    -------
    Derived
        ``(rin, u)``, ohm.

    Raises
    ------
    InputError
        ``v1 <= v2`` (impossible for a resistive load: the leads may be swapped),
        ``v2 <= 0``, ``r_series <= 0``, a negative uncertainty, or ``|r| > 1``.
    """
    a, b = _volts(v1, "v1"), _volts(v2, "v2")
    rs = check_series_resistor(r_series)
    ua, ub = _uncertainty(u_v1, "u_v1"), _uncertainty(u_v2, "u_v2")
    urs = _uncertainty(u_r_series, "u_r_series")
    r = _correlation(correlation)
    _check_series_readings(a, b)
    d = a - b
    rin = rs * b / d
    c_rs, c_v1, c_v2 = b / d, -rin / d, rs * a / d / d
    variance = (
        _square(c_rs * urs)
        + _square(c_v1 * ua)
        + _square(c_v2 * ub)
        + 2.0 * r * c_v1 * c_v2 * ua * ub
    )
    return _result("input_resistance", rin, math.sqrt(max(variance, 0.0)),
                   "V1, V2, the series resistor and their uncertainties")


def _check_series_readings(a: float, b: float) -> None:
    """Refuse series-resistor readings no resistive input can give (V1 <= V2: the
    probe leads are likely swapped)."""
    if b <= 0:
        raise InputError(f"the board-input voltage V2 must be > 0 V, got {b:g} V", key="v2")
    if a <= b:
        raise InputError(
            f"V1 (generator side of the series resistor, {a:g} V) must be greater than "
            f"V2 (board input, {b:g} V) for a resistive load; the probe leads may be "
            "swapped between the two points",
            key="v1",
        )


def _square(x: float) -> float:
    """x², inf where it overflows (``**`` raises OverflowError there)."""
    return x * x


def series_resistor_uncertainty(r_series: float, tolerance: float) -> float:
    """Standard uncertainty of a series resistor known only by its tolerance, ohm.

    The tolerance ``t`` (a fraction: 0.01 for 1 %) is read as the half-width of a
    rectangular distribution, so ``u = t·R/√3`` (JCGM 100:2008 4.3.7). This is the one
    copy of the rule: the ``derive`` command, the capture run and the simulated bench
    all call it.
    """
    rs = _number(r_series, "r_series")
    t = _number(tolerance, "tolerance")
    if t < 0:
        raise InputError(f"a tolerance cannot be negative, got {tolerance!r}", key="tolerance")
    return abs(rs) * t / math.sqrt(3.0)
