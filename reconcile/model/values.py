"""Value strings: numbers as people write them on schematics, in board and readings files.

Rules (docs/formats.md §1):

- a plain number: ``2.5``, ``-5``, ``1e-15``; ``inf`` / ``infinity`` in any case;
- an SI prefix, then optionally a unit, with or without spaces: ``27k``, ``27 k``,
  ``27kohm``, ``27 kΩ``, ``10uF``, ``2.5mA``. Prefixes ``f p n u µ m k K M G``.
  Case matters: ``1M`` is 1e6, ``1m`` is 1e-3. ``K`` is kilo everywhere except in a
  temperature, where it is kelvin. ``meg`` is refused with the hint to write ``M``
  (contract version 2, §6.1);
- an IEC 60062 letter-and-digit (RKM) code, the letter standing for the decimal point:
  ``4k7`` = 4 700, ``470R`` = 470, ``R47`` = 0.47, ``2M2``, ``1u5`` = 1.5e-6, ``4K7``.
  Codes with ``R`` are for resistance only;
- a unit must fit the field (``ohms = "10 V"`` is an error). Units per kind: ohms
  ``ohm``, ``ohms`` (any case), ``Ω``, ``R``; farads ``F``; volts ``V``; amps ``A``;
  watts ``W``; hertz ``Hz``; seconds ``s``; plain numbers take no unit;
- a temperature needs a unit: ``25 C``, ``25C``, ``25 °C``, ``298.15 K``; returned in
  kelvin. No prefixes, no RKM codes;
- a tolerance is ``5%``, ``0.1 %``, ``50 ppm``, a bare fraction (``0.05`` is 5 %) or an
  IEC 60062 tolerance letter (``F`` 1 %, ``G`` 2 %, ``J`` 5 %, ``K`` 10 %, ``M`` 20 %;
  :data:`TOLERANCE_LETTERS`), returned as a relative fraction; a leading ``±`` is
  allowed.

Every result is rounded to 12 significant digits, so ``10u`` is ``1e-05`` and not
``9.999999999999999e-06``. Errors are :class:`reconcile.errors.InputError` without a
location; callers add it with :meth:`~reconcile.errors.InputError.located`.

This module uses the standard library only and parses a value in a few microseconds.
"""

from __future__ import annotations

import math
import re

from reconcile.errors import InputError

__all__ = [
    "KINDS",
    "PREFIXES",
    "ZERO_CELSIUS_K",
    "format_si",
    "parse_temperature",
    "parse_tolerance",
    "parse_value",
    "TOLERANCE_LETTERS",
    "si_unit",
]

#: 0 °C in kelvin; exact by the definition of the Celsius scale (same value as
#: ``scipy.constants.zero_Celsius``, kept here so this module needs only the stdlib).
ZERO_CELSIUS_K = 273.15

#: SI prefixes accepted after a number (``meg`` is handled apart, in any case).
PREFIXES: dict[str, float] = {
    "f": 1e-15,
    "p": 1e-12,
    "n": 1e-9,
    "u": 1e-6,
    "\u00b5": 1e-6,  # MICRO SIGN
    "\u03bc": 1e-6,  # GREEK SMALL LETTER MU
    "m": 1e-3,
    "k": 1e3,
    "K": 1e3,
    "M": 1e6,
    "G": 1e9,
}

# unit as written -> kind it belongs to (ohm words are matched case-insensitively)
_UNIT_KIND: dict[str, str] = {
    "ohm": "ohms",
    "ohms": "ohms",
    "\u03a9": "ohms",  # GREEK CAPITAL LETTER OMEGA
    "\u2126": "ohms",  # OHM SIGN
    "R": "ohms",
    "F": "farads",
    "V": "volts",
    "A": "amps",
    "W": "watts",
    "Hz": "hertz",
    "s": "seconds",
    "C": "temperature",
    "\u00b0C": "temperature",  # DEGREE SIGN
    "\u00baC": "temperature",  # MASCULINE ORDINAL INDICATOR, a common look-alike
    "\u2103": "temperature",  # DEGREE CELSIUS
    "degC": "temperature",
    "%": "tolerance",
    "ppm": "tolerance",
}

#: kind -> (what the field holds, the units it takes), for messages.
KINDS: dict[str, tuple[str, str]] = {
    "ohms": ("a resistance", "ohm, Ω or an RKM code such as 4k7 or 470R"),
    "farads": ("a capacitance", "F"),
    "volts": ("a voltage", "V"),
    "amps": ("a current", "A"),
    "watts": ("a power", "W"),
    "hertz": ("a frequency", "Hz"),
    "seconds": ("a time", "s"),
    "plain": ("a plain number", "no unit"),
    "temperature": ("a temperature", "C, °C or K, e.g. 25 C or 298.15 K"),
    "tolerance": ("a tolerance", "%, ppm or a bare fraction, e.g. 5% or 0.05"),
}

#: IEC 60062 tolerance letters for symmetric tolerances, as relative fractions. (For
#: capacitors under 10 pF the same B, C, D, F letters also stand for absolute tolerances
#: in pF; a tolerance field here is always relative.)
TOLERANCE_LETTERS: dict[str, float] = {
    "L": 0.0001,
    "P": 0.0002,
    "W": 0.0005,
    "B": 0.001,
    "C": 0.0025,
    "D": 0.005,
    "F": 0.01,
    "G": 0.02,
    "J": 0.05,
    "K": 0.10,
    "M": 0.20,
    "N": 0.30,
}

UNIT_SYMBOLS = {
    "ohms": "Ω",
    "ohm": "Ω",  # the unit word the JSON and the quantity registry write
    "\u03a9": "\u03a9",  # GREEK CAPITAL LETTER OMEGA
    "\u2126": "\u03a9",  # OHM SIGN, shown as the letter the fonts carry
    "deg": "°",
    "farads": "F",
    "volts": "V",
    "amps": "A",
    "watts": "W",
    "hertz": "Hz",
    "seconds": "s",
    "siemens": "S",
    "plain": "",
}
"""The one table of unit words (value kinds, JSON unit words) and the symbols shown."""



def si_unit(kind: str) -> str:
    """The SI unit a value of ``kind`` is held in, as the JSON writes it: ``"V"``,
    ``"A"``, ``"ohm"``, ``"F"``, ``"K"`` for temperatures, ``""`` for plain numbers and
    tolerances (fractions)."""
    if kind == "temperature":
        return "K"
    if kind == "ohms":
        return "ohm"
    return UNIT_SYMBOLS.get(kind, "")


_NUMBER = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_NUMBER_RE = re.compile(rf"\s*({_NUMBER}|[+-]?inf(?:inity)?)\s*(.*?)\s*$", re.IGNORECASE)
_RKM_RE = re.compile("\\s*([+-]?)(\\d*)([fpnu\u00b5\u03bcmkKMGR])(\\d*)\\s*(.*?)\\s*$")
_EXAMPLES = "write e.g. 4.7k, 4k7, 27 kΩ, 10uF, 2.5mA, 1e-6 or inf"


def _round12(x: float) -> float:
    """``x`` rounded to 12 significant digits (strips binary float noise)."""
    if x == 0.0 or not math.isfinite(x):
        return x
    return float(f"{x:.12g}")


def _describe(kind: str) -> str:
    return KINDS[kind][0]


def _unit_kind(unit: str) -> str | None:
    if unit in _UNIT_KIND:
        return _UNIT_KIND[unit]
    if unit.lower() in ("ohm", "ohms"):
        return "ohms"
    return None


def _check_unit(text: str, unit: str, kind: str) -> None:
    """Raise unless ``unit`` (already without prefix; may be '') fits ``kind``."""
    if not unit:
        return
    found = _unit_kind(unit)
    if found == kind:
        return
    takes = KINDS[kind][1]
    if found is None:
        near = [u for u, k in _UNIT_KIND.items() if k == kind and u.lower() == unit.lower()]
        hint = f" (units are case-sensitive: did you mean {near[0]!r}?)" if near else ""
        raise InputError(
            f"cannot read {text!r} as {_describe(kind)}: unknown unit {unit!r}; "
            f"this field takes {takes}{hint}"
        )
    raise InputError(
        f"{text!r} is {KINDS[found][0]} (unit {unit}) but this field is "
        f"{_describe(kind)} and takes {takes}"
    )


def _split_prefix(text: str, rest: str, kind: str) -> tuple[float, str]:
    """Split what follows the number into (prefix multiplier, unit)."""
    if not rest:
        return 1.0, ""
    if rest == "K" or _unit_kind(rest) is None:
        # not a bare unit: a prefix, possibly followed by a unit
        if rest[:3].lower() == "meg":
            raise InputError(
                f"{text!r}: 'meg' is not a prefix here; write M for mega "
                f"(e.g. {text[: len(text) - len(rest)].strip() or '1'}M; m is milli)"
            )
        if rest[0] in PREFIXES:
            return PREFIXES[rest[0]], rest[1:].strip()
    return 1.0, rest


def _parse_temperature(text: str | int | float) -> float:
    if isinstance(text, bool) or not isinstance(text, str):
        raise InputError(
            f"a temperature needs a unit: write \"{text} C\" or \"{text} K\", not a bare number"
        )
    m = _NUMBER_RE.match(text)
    if not m or not text.strip():
        raise InputError(f"cannot read {text!r} as a temperature; write e.g. 25 C or 298.15 K")
    number, unit = float(m.group(1)), m.group(2).replace(" ", "")
    if not unit:
        raise InputError(
            f"temperature {text!r} has no unit: write \"{text.strip()} C\" or "
            f"\"{text.strip()} K\""
        )
    if unit == "K":
        kelvin = number
    elif _UNIT_KIND.get(unit) == "temperature":
        kelvin = number + ZERO_CELSIUS_K
    else:
        raise InputError(
            f"cannot read {text!r} as a temperature: unit {unit!r} is not C, °C or K "
            "(no prefixes)"
        )
    if not math.isfinite(kelvin) or kelvin <= 0.0:
        raise InputError(f"temperature {text!r} is not a finite value above absolute zero")
    return _round12(kelvin)


def _parse_tolerance(text: str | int | float) -> float:
    if isinstance(text, bool) or not isinstance(text, str | int | float):
        raise InputError(f"cannot read {text!r} as a tolerance; write e.g. 5% or 0.05")
    if not isinstance(text, str):
        return _round12(float(text))
    body = text.strip().removeprefix("±")
    if body in TOLERANCE_LETTERS:
        return TOLERANCE_LETTERS[body]
    if len(body) == 1 and body.upper() in TOLERANCE_LETTERS:
        raise InputError(
            f"tolerance letter {body!r}: the IEC 60062 letters are capitals; "
            f"write {body.upper()!r} ({100 * TOLERANCE_LETTERS[body.upper()]:g}%)"
        )
    m = _NUMBER_RE.match(body)
    if not m or not body:
        raise InputError(f"cannot read {text!r} as a tolerance; write e.g. 5%, 0.1% or 0.05")
    number, unit = float(m.group(1)), m.group(2)
    if unit == "%":
        return _round12(number / 100.0)
    if unit == "ppm":
        return _round12(number * 1e-6)
    if unit:
        raise InputError(
            f"cannot read {text!r} as a tolerance: {unit!r} is not % or ppm "
            "(a bare number is a fraction: 0.05 is 5%)"
        )
    return _round12(number)


def parse_value(text: str | int | float, kind: str) -> float:
    """Read a value string (or a number) as an SI float.

    Parameters
    ----------
    text
        What the file holds: a string such as ``"4k7"``, ``"27 kΩ"``, ``"25 C"``,
        ``"5%"``, or an int or float (taken as already in SI units).
    kind
        The field's kind: ``"ohms"``, ``"farads"``, ``"volts"``, ``"amps"``,
        ``"watts"``, ``"hertz"``, ``"seconds"``, ``"plain"`` (dimensionless),
        ``"temperature"`` (returns kelvin; a bare number is an error) or
        ``"tolerance"`` (returns a relative fraction; a bare number is taken as a
        fraction, so ``0.05`` is 5 %).

    Returns
    -------
    float
        The value in SI units (ohm, F, V, A, W, Hz, s, K, or a fraction), rounded to
        12 significant digits. Negative values are returned as such; the caller
        decides what may be negative.

    Raises
    ------
    InputError
        The text is empty, does not read as a number, has a unit that does not fit
        ``kind``, or is an R code outside a resistance field. No location is attached.
    """
    if kind not in KINDS:
        raise ValueError(f"unknown value kind {kind!r}; one of {', '.join(KINDS)}")
    if kind == "temperature":
        return _parse_temperature(text)
    if kind == "tolerance":
        return _parse_tolerance(text)
    if isinstance(text, bool):
        raise InputError(f"expected {_describe(kind)}, found true/false")
    if not isinstance(text, str):
        if isinstance(text, int | float):
            if math.isnan(text):
                raise InputError(f"expected {_describe(kind)}, found nan")
            return _round12(float(text))
        raise InputError(f"expected {_describe(kind)}, found {type(text).__name__} {text!r}")
    if not text.strip():
        raise InputError(f"empty value where {_describe(kind)} is expected; {_EXAMPLES}")

    m = _RKM_RE.match(text)
    if m and (m.group(2) or m.group(4)) and (m.group(4) or m.group(3) == "R"):
        sign, before, letter, after, unit = m.groups()
        if letter == "R" and kind != "ohms":
            raise InputError(
                f"{text!r} is an R code (IEC 60062), which is for resistance only; "
                f"this field is {_describe(kind)} and takes {KINDS[kind][1]}"
            )
        _check_unit(text, unit, kind)
        mult = 1.0 if letter == "R" else PREFIXES[letter]
        number = float(f"{sign}{before or '0'}.{after or '0'}")
        return _round12(number * mult)

    m = _NUMBER_RE.match(text)
    if not m:
        raise InputError(f"cannot read {text!r} as {_describe(kind)}; {_EXAMPLES}")
    number = float(m.group(1))
    mult, unit = _split_prefix(text, m.group(2), kind)
    if unit == "R" and kind != "ohms":
        raise InputError(
            f"{text!r} uses R, which is for resistance only; this field is "
            f"{_describe(kind)} and takes {KINDS[kind][1]}"
        )
    _check_unit(text, unit, kind)
    return _round12(number * mult)


def parse_temperature(text: str | int | float) -> float:
    """``parse_value(text, "temperature")``: ``"25 C"`` -> 298.15 (K)."""
    return _parse_temperature(text)


def parse_tolerance(text: str | int | float) -> float:
    """``parse_value(text, "tolerance")``: ``"5%"`` -> 0.05; a bare ``0.05`` is 0.05."""
    return _parse_tolerance(text)


_FORMAT_PREFIXES = [(1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"),
                    (1e-6, "µ"), (1e-9, "n"), (1e-12, "p"), (1e-15, "f")]


def format_si(value: float, unit: str = "", digits: int = 6) -> str:
    """A value for display with an SI prefix: ``4700, "Ω"`` -> ``"4.7 kΩ"``.

    Parameters
    ----------
    value
        The value in SI units.
    unit
        The unit symbol to print (``"Ω"``, ``"F"``, ``"A"``...), or a kind name from
        :data:`KINDS` (``"ohms"`` prints ``Ω``); ``""`` for a plain number.
    digits
        Significant digits kept (trailing zeros dropped), which also removes float
        noise: ``1e-5, "F"`` -> ``"10 µF"``, ``0.000333, "A"`` -> ``"333 µA"``.

    Returns
    -------
    str
        ``"<mantissa> <prefix><unit>"`` with the mantissa in [1, 1000) where a prefix
        from f to G allows; :func:`parse_value` reads it back.
    """
    symbol = UNIT_SYMBOLS.get(unit, unit)
    if not math.isfinite(value) or value == 0.0:
        text = "inf" if value == math.inf else "-inf" if value == -math.inf else f"{value:g}"
        return f"{text} {symbol}".strip()
    rounded = float(f"{value:.{digits}g}")
    magnitude = abs(rounded)
    scale, prefix = _FORMAT_PREFIXES[-1]
    for scale_i, prefix_i in _FORMAT_PREFIXES:
        if magnitude >= scale_i:
            scale, prefix = scale_i, prefix_i
            break
    mantissa = float(f"{rounded / scale:.{digits}g}")
    if abs(mantissa) >= 1e3 and scale < 1e9:  # division noise carried into the next prefix
        scale *= 1e3
        prefix = next(p for s, p in _FORMAT_PREFIXES if s == scale)
        mantissa = float(f"{rounded / scale:.{digits}g}")
    # fixed decimals, not %g: 580 to 2 digits is "580", never "5.8e+02"
    decimals = max(0, digits - 1 - math.floor(math.log10(abs(mantissa)))) if mantissa else 0
    text = f"{mantissa:.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return f"{text} {prefix}{symbol}".strip()
