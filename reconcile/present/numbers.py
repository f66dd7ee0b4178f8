"""The one number formatter: every number the terminal, the report and the plots show.

Rules (the same everywhere):

- A value with an SI prefix and its unit: ``4700, "Ω"`` -> ``"4.7 kΩ"``. Units may be
  given as symbols (``"Ω"``, ``"V"``) or as the words the JSON uses (``"ohm"``).
- A value with its standard uncertainty: the uncertainty to two significant digits and
  the value rounded to the same decimal place, both under one prefix
  (JCGM 100:2008, GUM 7.2.6): ``4702.3, 12.34, "Ω"`` -> ``"4.702 ± 0.012 kΩ"``.
- Numerically zero values print as ``0`` with their unit: a value is zero when it is
  below the floor for its unit (far under any bench resolution) or below 1e-9 of the
  ``scale`` the caller gives (for example the target a share of the error budget is
  a part of), which removes float noise such as ``-3.1e-17``.
- Temperatures: kelvin inside; shown in °C unless the user typed kelvin.
- ``None`` prints as ``-``; infinity as ``∞`` with the unit.

Only the standard library and ``model.values`` (whose value-string writer supplies the
prefix rule) are used, so importing this module costs nothing.
"""

from __future__ import annotations

import math

from reconcile.model.values import UNIT_SYMBOLS, format_si

__all__ = [
    "si",
    "signed",
    "with_u",
    "percent",
    "plain",
    "temperature",
    "is_zero",
    "symbol",
]

_ZERO_CELSIUS_K = 273.15  # exact by the definition of the Celsius scale


#: below these magnitudes a value is zero, whatever the context (SI units)
_ZERO_FLOOR = {
    "V": 1e-12,
    "A": 1e-21,
    "Ω": 1e-9,
    "F": 1e-21,
    "W": 1e-18,
    "Hz": 1e-9,
    "S": 1e-15,
    "s": 1e-15,
    "K": 1e-9,
    "°C": 1e-9,
    "dB": 1e-9,
    "": 1e-12,
}

_PREFIXES = [
    (9, "G"), (6, "M"), (3, "k"), (0, ""), (-3, "m"), (-6, "µ"), (-9, "n"), (-12, "p"),
    (-15, "f"), (-18, "a"),
]
# units that are never given a prefix
_NO_PREFIX = {"", "%", "dB", "°C", "K", "°"}


def symbol(unit: str) -> str:
    """The symbol shown for ``unit`` (``"ohm"`` -> ``"Ω"``); unknown units unchanged."""
    return UNIT_SYMBOLS.get(unit, unit)


def quantity_symbol(name: str) -> str:
    """The unit symbol shown for a registered reading quantity (``"input_resistance"``
    -> ``"Ω"``); ``""`` for a plain ratio or a name the registry does not know."""
    from reconcile.model.quantities import REGISTRY

    q = REGISTRY.get(name)
    return "" if q is None else symbol(q.unit)


def is_zero(value: float, unit: str = "", *, scale: float | None = None) -> bool:
    """Whether ``value`` is numerically zero for its unit (and against ``scale``)."""
    if not math.isfinite(value):
        return False
    floor = _ZERO_FLOOR.get(symbol(unit), 1e-12)
    if scale is not None and math.isfinite(scale):
        floor = max(floor, 1e-9 * abs(scale))
    return abs(value) <= floor


def _join(number: str, prefix: str, unit: str) -> str:
    tail = f"{prefix}{unit}"
    if not tail:
        return number
    if tail == "°":
        return f"{number}°"
    return f"{number} {tail}"


def _exponent3(magnitude: float) -> int:
    """The engineering exponent (multiple of 3) for a magnitude, within G … a."""
    if magnitude <= 0 or not math.isfinite(magnitude):
        return 0
    e = 3 * math.floor(math.log10(magnitude) / 3)
    return max(_PREFIXES[-1][0], min(_PREFIXES[0][0], e))


def _prefix(e3: int) -> str:
    return next(p for e, p in _PREFIXES if e == e3)


def _special(value: float | None, unit: str) -> str | None:
    if value is None:
        return "-"
    if isinstance(value, float) and math.isnan(value):
        return "-"
    if value == math.inf:
        return _join("∞", "", unit)
    if value == -math.inf:
        return _join("-∞", "", unit)
    return None


def si(
    value: float | None,
    unit: str = "",
    digits: int = 4,
    *,
    scale: float | None = None,
    sign: bool = False,
) -> str:
    """A value with an SI prefix and its unit, to ``digits`` significant digits.

    ``si(0.000333, "A")`` -> ``"333 µA"``, ``si(3900, "ohm", 2)`` -> ``"3.9 kΩ"``,
    ``si(-3e-17, "")`` -> ``"0"``. Trailing zeros are dropped. ``sign`` prints ``+`` on
    positive values (for differences).
    """
    unit = symbol(unit)
    special = _special(value, unit)
    if special is not None:
        return special
    value = float(value)
    if is_zero(value, unit, scale=scale):
        return _join("0", "", unit)
    if unit in _NO_PREFIX:
        rounded = float(f"{value:.{digits}g}")
        decimals = max(0, digits - 1 - math.floor(math.log10(abs(rounded))))
        number = f"{rounded:.{decimals}f}"
        if "." in number:
            number = number.rstrip("0").rstrip(".")
        if abs(rounded) >= 1e9 or abs(rounded) < 1e-4:  # no prefix to carry it
            number = f"{rounded:.{digits}g}"
        text = _join(number, "", unit)
    else:  # the prefix rule is the value-string writer's, so what is shown reads back
        text = format_si(value, unit, digits)
    return "+" + text if sign and value > 0 else text


def signed(value: float | None, unit: str = "", digits: int = 3, *, scale: float | None = None) -> str:
    """A difference: ``si`` with ``+`` on positive values (``"+1.2 mV"``; zero is ``0``)."""
    return si(value, unit, digits, scale=scale, sign=True)


def plain(value: float | None, digits: int = 4, *, scale: float | None = None) -> str:
    """A dimensionless number (gain, χ²): ``12.35``; zero is ``0``."""
    return si(value, "", digits, scale=scale)


def with_u(
    value: float | None,
    u: float | None,
    unit: str = "",
    *,
    sign: bool = False,
    scale: float | None = None,
    compact: bool = False,
) -> str:
    """A value and its standard uncertainty, JCGM 100:2008 (GUM) 7.2.6.

    The uncertainty keeps two significant digits; the value is rounded to the same
    decimal place; both share one SI prefix chosen by the larger of the two:
    ``with_u(4702.3, 12.34, "Ω")`` -> ``"4.702 ± 0.012 kΩ"``. Without a usable
    uncertainty (``None``, 0, ``nan``) it is :func:`si` of the value. ``compact`` writes
    GUM 7.2.2's second form, the uncertainty in units of the last digits, for narrow
    table cells: ``"4.702(12) kΩ"``.
    """
    unit = symbol(unit)
    special = _special(value, unit)
    if special is not None:
        return special
    value = float(value)
    if u is None or not math.isfinite(u) or u <= 0:
        return si(value, unit, sign=sign, scale=scale)
    u = abs(float(u))
    step = math.floor(math.log10(u)) - 1  # the decimal place of u's second digit
    if round(u / 10.0**step) >= 100:  # 0.0996 -> 0.10: one place coarser
        step += 1
    u_r = round(u / 10.0**step) * 10.0**step
    zero = is_zero(value, unit, scale=scale)
    v_r = 0.0 if zero else round(value / 10.0**step) * 10.0**step
    e3 = 0 if unit in _NO_PREFIX else _exponent3(max(abs(v_r), u_r))
    decimals = max(0, e3 - step)
    v_text = "0" if zero else f"{v_r / 10.0**e3:.{decimals}f}"
    if v_text.startswith("-") and float(v_text) == 0.0:
        v_text = v_text[1:]
    if sign and v_r > 0:
        v_text = "+" + v_text
    u_text = f"{u_r / 10.0**e3:.{decimals}f}"
    if compact:  # GUM 7.2.2 form 2: the uncertainty in units of the last digits
        digits_of_u = u_text.replace(".", "").lstrip("0") or "0"
        return _join(f"{v_text}({digits_of_u})", _prefix(e3), unit)
    return _join(f"{v_text} ± {u_text}", _prefix(e3), unit)


def percent(fraction: float | None, digits: int = 1, *, sign: bool = True) -> str:
    """A relative value as a percentage with a fixed number of decimals: ``+3.8 %``."""
    special = _special(fraction, "%")
    if special is not None:
        return special
    pc = 100.0 * float(fraction)
    if abs(pc) < 0.5 * 10.0**-digits:
        return "0 %"
    text = f"{pc:+.{digits}f}" if sign else f"{pc:.{digits}f}"
    return f"{text} %"


def temperature(
    kelvin: float | None, u: float | None = None, *, typed: str = "C", digits: int = 1
) -> str:
    """A temperature shown the way the user typed it: °C (default) or K.

    ``temperature(300.15)`` -> ``"27.0 °C"``; ``typed="K"`` prints kelvin. With ``u``
    the GUM 7.2.6 rule applies (a temperature difference is the same in K and °C).
    """
    special = _special(kelvin, "K")
    if special is not None:
        return special
    kelvin_unit = typed.strip().upper() == "K"
    value = float(kelvin) if kelvin_unit else float(kelvin) - _ZERO_CELSIUS_K
    unit = "K" if kelvin_unit else "°C"
    if u is not None and math.isfinite(u) and u > 0:
        return with_u(value, u, unit)
    return _join(f"{value:.{digits}f}", "", unit)
