"""Preferred-number series of IEC 60063 (E3 to E192) for standard resistor and capacitor values.

The tables are typed out from IEC 60063 rather than computed: the rounded geometric
series ``round(10**(i/N), digits)`` differs from the standard in eight places of E24
(2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2) and in one place of E192 (9.20), so no formula
reproduces them. E3 to E24 have two significant digits, E48 to E192 three.

Every standard value this module returns is the float nearest to its decimal value
(``4.7e3`` is exactly ``4700.0``, ``4.7e-9`` is ``float("4.7e-9")``), so results compare
equal to values parsed from text.

A value within a relative ``1e-9`` of a standard value counts as that value in
:func:`neighbours`, :func:`nearest` and the bounds of :func:`values_in_range`; this only
absorbs float noise such as ``4699.999999999999``.
"""

from __future__ import annotations

import math
from bisect import bisect_left
from collections.abc import Mapping
from functools import lru_cache
from types import MappingProxyType

import numpy as np

from reconcile.errors import InputError

__all__ = [
    "SERIES",
    "TOLERANCE_SERIES",
    "decade_slips",
    "is_standard",
    "nearest",
    "neighbours",
    "series_for_tolerance",
    "series_names",
    "smallest_series_containing",
    "values_in_range",
]

# IEC 60063 mantissas in [1, 10), one tuple per series, typed from the standard.
SERIES: dict[str, tuple[float, ...]] = {
    "E3": (1.0, 2.2, 4.7),
    "E6": (1.0, 1.5, 2.2, 3.3, 4.7, 6.8),
    "E12": (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2),
    "E24": (
        1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
        3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
    ),
    "E48": (
        1.00, 1.05, 1.10, 1.15, 1.21, 1.27, 1.33, 1.40, 1.47, 1.54, 1.62, 1.69,
        1.78, 1.87, 1.96, 2.05, 2.15, 2.26, 2.37, 2.49, 2.61, 2.74, 2.87, 3.01,
        3.16, 3.32, 3.48, 3.65, 3.83, 4.02, 4.22, 4.42, 4.64, 4.87, 5.11, 5.36,
        5.62, 5.90, 6.19, 6.49, 6.81, 7.15, 7.50, 7.87, 8.25, 8.66, 9.09, 9.53,
    ),
    "E96": (
        1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30,
        1.33, 1.37, 1.40, 1.43, 1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74,
        1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10, 2.15, 2.21, 2.26, 2.32,
        2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
        3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12,
        4.22, 4.32, 4.42, 4.53, 4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49,
        5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65, 6.81, 6.98, 7.15, 7.32,
        7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76,
    ),
    "E192": (
        1.00, 1.01, 1.02, 1.04, 1.05, 1.06, 1.07, 1.09, 1.10, 1.11, 1.13, 1.14,
        1.15, 1.17, 1.18, 1.20, 1.21, 1.23, 1.24, 1.26, 1.27, 1.29, 1.30, 1.32,
        1.33, 1.35, 1.37, 1.38, 1.40, 1.42, 1.43, 1.45, 1.47, 1.49, 1.50, 1.52,
        1.54, 1.56, 1.58, 1.60, 1.62, 1.64, 1.65, 1.67, 1.69, 1.72, 1.74, 1.76,
        1.78, 1.80, 1.82, 1.84, 1.87, 1.89, 1.91, 1.93, 1.96, 1.98, 2.00, 2.03,
        2.05, 2.08, 2.10, 2.13, 2.15, 2.18, 2.21, 2.23, 2.26, 2.29, 2.32, 2.34,
        2.37, 2.40, 2.43, 2.46, 2.49, 2.52, 2.55, 2.58, 2.61, 2.64, 2.67, 2.71,
        2.74, 2.77, 2.80, 2.84, 2.87, 2.91, 2.94, 2.98, 3.01, 3.05, 3.09, 3.12,
        3.16, 3.20, 3.24, 3.28, 3.32, 3.36, 3.40, 3.44, 3.48, 3.52, 3.57, 3.61,
        3.65, 3.70, 3.74, 3.79, 3.83, 3.88, 3.92, 3.97, 4.02, 4.07, 4.12, 4.17,
        4.22, 4.27, 4.32, 4.37, 4.42, 4.48, 4.53, 4.59, 4.64, 4.70, 4.75, 4.81,
        4.87, 4.93, 4.99, 5.05, 5.11, 5.17, 5.23, 5.30, 5.36, 5.42, 5.49, 5.56,
        5.62, 5.69, 5.76, 5.83, 5.90, 5.97, 6.04, 6.12, 6.19, 6.26, 6.34, 6.42,
        6.49, 6.57, 6.65, 6.73, 6.81, 6.90, 6.98, 7.06, 7.15, 7.23, 7.32, 7.41,
        7.50, 7.59, 7.68, 7.77, 7.87, 7.96, 8.06, 8.16, 8.25, 8.35, 8.45, 8.56,
        8.66, 8.76, 8.87, 8.98, 9.09, 9.20, 9.31, 9.42, 9.53, 9.65, 9.76, 9.88,
    ),
}

# Common practice: the tolerance class each series is usually made in (fractions).
TOLERANCE_SERIES: Mapping[float, str] = MappingProxyType({
    0.4: "E3",
    0.2: "E6",
    0.1: "E12",
    0.05: "E24",
    0.02: "E48",
    0.01: "E96",
    0.005: "E192",
})

_NAMES: tuple[str, ...] = ("E3", "E6", "E12", "E24", "E48", "E96", "E192")
_BY_UPPER: dict[str, str] = {name.upper(): name for name in _NAMES}
# Mantissas as integers 100..988, private copies so that the public table stays data only.
_INTS: dict[str, tuple[int, ...]] = {
    name: tuple(round(m * 100) for m in SERIES[name]) for name in _NAMES
}
_POW10: tuple[float, ...] = tuple(float(10**k) for k in range(23))  # exact in binary64
_SNAP_REL = 1e-9
_MIN_VALUE = 1e-300
_MAX_VALUE = 1e300


def series_names() -> tuple[str, ...]:
    """Names of the IEC 60063 series, coarsest first.

    Returns
    -------
    tuple of str
        ``("E3", "E6", "E12", "E24", "E48", "E96", "E192")``.
    """
    return _NAMES


def _series_name(series: str) -> str:
    """The canonical name of ``series`` (case-insensitive), or an :class:`InputError`."""
    name = _BY_UPPER.get(series.strip().upper()) if isinstance(series, str) else None
    if name is None:
        raise InputError(f"unknown E-series {series!r}; expected one of {', '.join(_NAMES)}")
    return name


def _positive(value: float, what: str = "value") -> float:
    """``value`` as a float, or an :class:`InputError` unless positive and finite."""
    try:
        number = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{what} must be a positive number, got {value!r}") from exc
    if not math.isfinite(number) or number <= 0.0:
        raise InputError(f"{what} must be a positive finite number, got {value!r}")
    if not _MIN_VALUE <= number <= _MAX_VALUE:
        raise InputError(
            f"{what} {value!r} is outside the supported range {_MIN_VALUE:g} to {_MAX_VALUE:g}"
        )
    return number


def _decimal(mantissa: int, exponent: int) -> float:
    """The float nearest to ``mantissa * 10**exponent``.

    With both factors exact in binary64 one IEEE multiplication or division rounds
    correctly; beyond ``10**22`` the decimal string is parsed instead.
    """
    if 0 <= exponent <= 22:
        return mantissa * _POW10[exponent]
    if -22 <= exponent < 0:
        return mantissa / _POW10[-exponent]
    return float(f"{mantissa}e{exponent}")


@lru_cache(maxsize=4096)
def _decade(name: str, exponent: int) -> tuple[float, ...]:
    """The standard values of series ``name`` in ``[10**exponent, 10**(exponent + 1))``."""
    return tuple(_decimal(m, exponent - 2) for m in _INTS[name])


def _bracket(value: float, name: str) -> tuple[float, float]:
    """Largest standard value ``<= value`` and smallest ``>= value`` (no snapping)."""
    exponent = math.floor(math.log10(value))
    grid = _decade(name, exponent)
    i = bisect_left(grid, value)
    upper = grid[i] if i < len(grid) else _decade(name, exponent + 1)[0]
    if upper == value:
        return value, value
    lower = grid[i - 1] if i > 0 else _decade(name, exponent - 1)[-1]
    return lower, upper


def neighbours(value: float, series: str) -> tuple[float, float]:
    """The standard values at or below and at or above ``value``.

    Parameters
    ----------
    value : float
        A positive value in any unit (ohm, farad...).
    series : str
        Series name, ``"E3"`` to ``"E192"`` (case-insensitive).

    Returns
    -------
    tuple of float
        ``(lower, upper)`` with ``lower <= value <= upper``; both equal ``value``'s
        standard value when ``value`` is standard (to within a relative 1e-9).

    Raises
    ------
    InputError
        For an unknown series or a value that is not positive and finite.
    """
    name = _series_name(series)
    number = _positive(value)
    lower, upper = _bracket(number, name)
    if lower != upper:
        if upper - number <= _SNAP_REL * upper:
            return upper, upper
        if number - lower <= _SNAP_REL * lower:
            return lower, lower
    return lower, upper


def nearest(value: float, series: str) -> float:
    """The standard value nearest to ``value`` on a logarithmic scale.

    The lower neighbour wins when ``value / lower < upper / value``, i.e. when ``value``
    lies below the geometric mean of its two neighbours. No two neighbouring standard
    values have a rational geometric mean, so an exact tie arises only through float
    rounding; it goes to the upper value.

    Parameters
    ----------
    value : float
        A positive value in any unit.
    series : str
        Series name, ``"E3"`` to ``"E192"`` (case-insensitive).

    Returns
    -------
    float
        The nearest standard value.

    Raises
    ------
    InputError
        For an unknown series or a value that is not positive and finite.
    """
    lower, upper = neighbours(value, series)
    if lower == upper:
        return lower
    number = float(value)
    return lower if number / lower < upper / number else upper


def is_standard(value: float, series: str, rel_tol: float = 1e-6) -> bool:
    """Whether ``value`` is a standard value of ``series``.

    Parameters
    ----------
    value : float
        A positive value in any unit.
    series : str
        Series name, ``"E3"`` to ``"E192"`` (case-insensitive).
    rel_tol : float, optional
        Accepted relative distance from the nearest standard value (default 1e-6).

    Returns
    -------
    bool
        True when ``|value - nearest| <= rel_tol * nearest``.

    Raises
    ------
    InputError
        For an unknown series, a value that is not positive and finite, or a negative
        ``rel_tol``.
    """
    if not (math.isfinite(rel_tol) and rel_tol >= 0.0):
        raise InputError(f"rel_tol must be a finite number >= 0, got {rel_tol!r}")
    closest = nearest(value, series)
    return abs(float(value) - closest) <= rel_tol * closest


def decade_slips(value: float, series: str, rel_tol: float = 1e-6) -> list[float]:
    """The values one decade up and down from ``value`` that are standard.

    For calling out a part fitted a decade off the drawing (a 2k2 where 22k was drawn):
    give the drawn value and get ``[value * 10, value / 10]``, each kept only when it is
    a standard value of ``series``, as the clean standard float.

    Parameters
    ----------
    value : float
        A positive value in any unit.
    series : str
        Series name, ``"E3"`` to ``"E192"`` (case-insensitive).
    rel_tol : float, optional
        Passed to :func:`is_standard` (default 1e-6).

    Returns
    -------
    list of float
        Up to two values, the decade above first. Empty when ``value`` is not standard
        (every series repeats each decade, so both slips are standard exactly when
        ``value`` is).

    Raises
    ------
    InputError
        For an unknown series or a value that is not positive and finite.
    """
    number = _positive(value)
    slips = []
    for candidate in (number * 10.0, number / 10.0):
        if _MIN_VALUE <= candidate <= _MAX_VALUE and is_standard(candidate, series, rel_tol):
            slips.append(nearest(candidate, series))
    return slips


def smallest_series_containing(value: float, rel_tol: float = 1e-6) -> str | None:
    """The coarsest series, in the order E3 ... E192, that has ``value`` as a standard value.

    Note that E24 is not part of E48: ``1.2e3`` gives ``"E12"``, ``1.21e3`` ``"E48"``.

    Parameters
    ----------
    value : float
        A positive value in any unit.
    rel_tol : float, optional
        Passed to :func:`is_standard` (default 1e-6).

    Returns
    -------
    str or None
        The series name, or None when no series has the value.

    Raises
    ------
    InputError
        For a value that is not positive and finite.
    """
    _positive(value)
    for name in _NAMES:
        if is_standard(value, name, rel_tol):
            return name
    return None


def values_in_range(series: str, low: float, high: float) -> np.ndarray:
    """Every standard value of ``series`` in ``[low, high]``, across decades.

    Parameters
    ----------
    series : str
        Series name, ``"E3"`` to ``"E192"`` (case-insensitive).
    low, high : float
        Inclusive bounds, positive, ``low <= high``; a bound within a relative 1e-9 of a
        standard value includes it.

    Returns
    -------
    numpy.ndarray
        Ascending float64 values, each the float nearest its decimal value
        (``4.7e3`` is exactly ``4700.0``). May be empty.

    Raises
    ------
    InputError
        For an unknown series, a bound that is not positive and finite, or
        ``low > high``.
    """
    name = _series_name(series)
    low_f = _positive(low, "low")
    high_f = _positive(high, "high")
    if low_f > high_f:
        raise InputError(f"low {low!r} is above high {high!r}")
    lo_bound = low_f * (1.0 - _SNAP_REL)
    hi_bound = high_f * (1.0 + _SNAP_REL)
    first = math.floor(math.log10(lo_bound)) - 1
    last = math.floor(math.log10(hi_bound)) + 1
    grid = np.fromiter(
        (v for e in range(first, last + 1) for v in _decade(name, e)),
        dtype=np.float64,
        count=len(_INTS[name]) * (last - first + 1),
    )
    return grid[(grid >= lo_bound) & (grid <= hi_bound)]


def series_for_tolerance(tolerance: float, mapping: Mapping[float, str] | None = None) -> str:
    """The series whose values are usually made in a tolerance that meets ``tolerance``.

    Common practice: 40 % E3, 20 % E6, 10 % E12, 5 % E24, 2 % E48, 1 % E96, 0.5 % E192
    (:data:`TOLERANCE_SERIES`). The answer is the series of the loosest class that is
    no looser than ``tolerance`` (3 % gives E48, whose 2 % parts meet it); a tolerance
    tighter than every class gives the series of the tightest class (0.1 % gives E192).

    Parameters
    ----------
    tolerance : float
        Relative tolerance as a fraction (0.05 for 5 %), ``>= 0``.
    mapping : Mapping of float to str, optional
        Tolerance class (fraction) to series name, replacing :data:`TOLERANCE_SERIES`.

    Returns
    -------
    str
        A series name.

    Raises
    ------
    InputError
        For a negative or non-finite tolerance, or a mapping that is empty, has a
        negative or non-finite class or an unknown series name.
    """
    try:
        tol = float(tolerance)
    except (TypeError, ValueError) as exc:
        raise InputError(f"tolerance must be a number, got {tolerance!r}") from exc
    if not (math.isfinite(tol) and tol >= 0.0):
        raise InputError(f"tolerance must be a finite fraction >= 0, got {tolerance!r}")
    table = TOLERANCE_SERIES if mapping is None else mapping
    if not table:
        raise InputError("the tolerance-to-series mapping is empty")
    classes: list[tuple[float, str]] = []
    for cls, series in table.items():
        cls_f = float(cls)
        if not (math.isfinite(cls_f) and cls_f >= 0.0):
            raise InputError(f"tolerance class {cls!r} must be a finite fraction >= 0")
        classes.append((cls_f, _series_name(series)))
    classes.sort()
    meeting = [c for c in classes if c[0] <= tol * (1.0 + _SNAP_REL)]
    return meeting[-1][1] if meeting else classes[0][1]
