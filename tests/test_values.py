"""Value strings (reconcile.values) against the contract's section 1.

Outside references: IEC 60062 (letter-and-digit "RKM" codes), the SI prefixes as given
by scipy.constants, the Celsius zero from scipy.constants.zero_Celsius.
"""

from __future__ import annotations

import math
import time

import pytest
import scipy.constants as sc
from hypothesis import given
from hypothesis import strategies as st

from reconcile.errors import InputError
from reconcile.model.values import (
    ZERO_CELSIUS_K,
    format_si,
    parse_temperature,
    parse_tolerance,
    parse_value,
)


def _round12(x: float) -> float:
    return float(f"{x:.12g}")


# IEC 60062: the letter stands for the decimal point and the multiplier.
@pytest.mark.parametrize(
    ("text", "kind", "expected"),
    [
        ("4k7", "ohms", 4.7 * sc.kilo),
        ("470R", "ohms", 470.0),
        ("R47", "ohms", 0.47),
        ("2M2", "ohms", 2.2 * sc.mega),
        ("1u5", "farads", 1.5 * sc.micro),
        ("4K7", "ohms", 4.7 * sc.kilo),
        ("1R0", "ohms", 1.0),
        ("4n7", "farads", 4.7 * sc.nano),
        ("6p8", "farads", 6.8 * sc.pico),
        ("2G2", "ohms", 2.2 * sc.giga),
        ("k47", "ohms", 0.47 * sc.kilo),
        ("4k7 Ω", "ohms", 4.7 * sc.kilo),
        ("1u5F", "farads", 1.5 * sc.micro),
    ],
)
def test_iec_60062_rkm_codes(text: str, kind: str, expected: float) -> None:
    assert parse_value(text, kind) == pytest.approx(expected, rel=1e-12)


# SI prefixes (values from scipy.constants, which follows the SI Brochure).
@pytest.mark.parametrize(
    ("prefix", "factor"),
    [
        ("f", sc.femto), ("p", sc.pico), ("n", sc.nano), ("u", sc.micro),
        ("\u00b5", sc.micro), ("\u03bc", sc.micro), ("m", sc.milli), ("k", sc.kilo),
        ("K", sc.kilo), ("M", sc.mega), ("G", sc.giga),
    ],
)
def test_si_prefixes(prefix: str, factor: float) -> None:
    assert parse_value(f"3.3{prefix}", "plain") == pytest.approx(3.3 * factor, rel=1e-12)
    assert parse_value(f"3.3 {prefix}", "volts") == pytest.approx(3.3 * factor, rel=1e-12)


def test_case_matters_between_mega_and_milli() -> None:
    # contract section 1: 1M is 1e6, 1m is 1e-3
    assert parse_value("1M", "ohms") == sc.mega
    assert parse_value("1m", "ohms") == sc.milli
    assert parse_value("5f", "amps") == pytest.approx(5 * sc.femto)
    assert parse_value("5F", "farads") == 5.0


@pytest.mark.parametrize(
    ("text", "kind", "expected"),
    [
        ("27k", "ohms", 27e3),
        ("27 k", "ohms", 27e3),
        ("27kohm", "ohms", 27e3),
        ("27 kΩ", "ohms", 27e3),
        ("27 k\u2126", "ohms", 27e3),  # OHM SIGN, a distinct code point from Greek omega
        ("100 Ohms", "ohms", 100.0),
        ("100 OHM", "ohms", 100.0),
        ("10 R", "ohms", 10.0),
        ("10uF", "farads", 1e-5),
        ("10 µF", "farads", 1e-5),
        ("5 V", "volts", 5.0),
        ("-12V", "volts", -12.0),
        ("2.5mA", "amps", 2.5e-3),
        ("0.25 W", "watts", 0.25),
        ("10 kHz", "hertz", 1e4),
        ("5 ms", "seconds", 5e-3),
        ("2.5", "plain", 2.5),
        ("1e-15", "amps", 1e-15),
        ("1.5E3", "plain", 1500.0),
        (".5", "plain", 0.5),
        ("+3", "plain", 3.0),
        ("  7k  ", "ohms", 7e3),
        (4700, "ohms", 4700.0),
        (0.25, "watts", 0.25),
    ],
)
def test_values_with_units(text: str | float, kind: str, expected: float) -> None:
    assert parse_value(text, kind) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("text", ["inf", "INF", "Inf", "infinity", "Infinity", "+inf"])
def test_infinity(text: str) -> None:
    assert parse_value(text, "volts") == math.inf
    assert parse_value("-" + text.lstrip("+"), "volts") == -math.inf


def test_float_noise_is_rounded_away() -> None:
    # 10 * 1e-6 is 9.999999999999999e-06 in binary floating point
    assert 10 * 1e-6 != 1e-5
    assert parse_value("10u", "farads") == 1e-5
    assert parse_value("0.1u", "farads") == 1e-7
    assert parse_value("4k7", "ohms") == 4700.0
    assert repr(parse_value("2.2n", "farads")) == "2.2e-09"


@pytest.mark.parametrize(
    ("text", "kind", "fragments"),
    [
        ("10 V", "ohms", ["'10 V'", "voltage", "ohm"]),
        ("5 A", "volts", ["current", "takes V"]),
        ("10R", "farads", ["R code", "resistance only"]),
        ("470R", "volts", ["resistance only"]),
        ("10 R", "volts", ["resistance only"]),
        ("10uf", "farads", ["unknown unit 'f'", "case-sensitive", "'F'"]),
        ("", "ohms", ["empty"]),
        ("   ", "volts", ["empty"]),
        ("abc", "ohms", ["cannot read 'abc'"]),
        ("1.5k7", "ohms", ["unknown unit"]),
        ("12 V", "plain", ["no unit"]),
        ("25 C", "ohms", ["temperature"]),
        ("5%", "volts", ["tolerance"]),
        ("nan", "plain", ["cannot read"]),
        (float("nan"), "plain", ["nan"]),
        (True, "plain", ["true/false"]),
        ("4,7k", "ohms", ["cannot read"]),
    ],
)
def test_bad_values_raise_input_error(text: str, kind: str, fragments: list[str]) -> None:
    with pytest.raises(InputError) as caught:
        parse_value(text, kind)
    err = caught.value
    assert err.path is None and err.line is None  # the caller adds the location
    for fragment in fragments:
        assert fragment in str(err)


def test_error_location_is_added_by_caller() -> None:
    with pytest.raises(InputError) as caught:
        parse_value("10 V", "ohms")
    located = caught.value.located(path="board.toml", key="resistors.R1.ohms", line=12)
    assert str(located).startswith("board.toml:12: [resistors.R1.ohms] '10 V'")


def test_unknown_kind_is_a_programming_error() -> None:
    with pytest.raises(ValueError, match="unknown value kind"):
        parse_value("1", "furlongs")


# Temperatures: Celsius offset from scipy.constants.zero_Celsius.
@pytest.mark.parametrize(
    ("text", "kelvin"),
    [
        ("25 C", 25 + sc.zero_Celsius),
        ("25C", 25 + sc.zero_Celsius),
        ("25 °C", 25 + sc.zero_Celsius),
        ("25\u2103", 25 + sc.zero_Celsius),
        ("25 degC", 25 + sc.zero_Celsius),
        ("-40 C", -40 + sc.zero_Celsius),
        ("298.15 K", 298.15),
        ("77K", 77.0),
    ],
)
def test_temperature(text: str, kelvin: float) -> None:
    assert ZERO_CELSIUS_K == sc.zero_Celsius
    assert parse_value(text, "temperature") == pytest.approx(kelvin, abs=1e-9)
    assert parse_temperature(text) == pytest.approx(kelvin, abs=1e-9)


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("25", "no unit"),
        (25, "needs a unit"),
        (25.0, "needs a unit"),
        ("-300 C", "absolute zero"),
        ("0 K", "absolute zero"),
        ("25 mK", "not C, °C or K"),
        ("25 V", "not C, °C or K"),
        ("warm", "cannot read"),
    ],
)
def test_bad_temperature(text: str | float, fragment: str) -> None:
    with pytest.raises(InputError, match=fragment):
        parse_value(text, "temperature")


def test_k_is_kelvin_only_in_temperatures() -> None:
    # contract: K means kilo (4K7) except in temperature fields
    assert parse_value("300K", "temperature") == 300.0
    assert parse_value("300K", "ohms") == 300e3


@pytest.mark.parametrize(
    ("text", "fraction"),
    [("5%", 0.05), ("0.1%", 0.001), ("5 %", 0.05), ("±1%", 0.01), ("50 ppm", 50e-6),
     ("0.05", 0.05), (0.05, 0.05), (0, 0.0), ("20%", 0.2)],
)
def test_tolerance(text: str | float, fraction: float) -> None:
    assert parse_value(text, "tolerance") == pytest.approx(fraction, rel=1e-12)
    assert parse_tolerance(text) == pytest.approx(fraction, rel=1e-12)


@pytest.mark.parametrize("text", ["5 V", "five", "", "5k"])
def test_bad_tolerance(text: str) -> None:
    with pytest.raises(InputError):
        parse_value(text, "tolerance")


@pytest.mark.parametrize(
    ("value", "unit", "expected"),
    [
        (4700, "Ω", "4.7 kΩ"),
        (4700, "ohms", "4.7 kΩ"),
        (1e-5, "F", "10 µF"),
        (0.000333, "A", "333 µA"),
        (10 * 1e-6, "F", "10 µF"),
        (2.2e6, "Ω", "2.2 MΩ"),
        (-5.0, "V", "-5 V"),
        (0.0, "V", "0 V"),
        (12, "", "12"),
        (1500, "", "1.5 k"),
        (math.inf, "Ω", "inf Ω"),
        (999999.9999, "Ω", "1 MΩ"),
        (5e-15, "A", "5 fA"),
    ],
)
def test_format_si(value: float, unit: str, expected: str) -> None:
    assert format_si(value, unit) == expected


_magnitudes = st.floats(min_value=1e-15, max_value=1e12, allow_nan=False, allow_infinity=False)


@given(_magnitudes, st.sampled_from([1.0, -1.0]), st.sampled_from(
    [("Ω", "ohms"), ("F", "farads"), ("V", "volts"), ("A", "amps"), ("Hz", "hertz"),
     ("", "plain")]))
def test_format_then_parse_round_trips(
    magnitude: float, sign: float, unit: tuple[str, str]
) -> None:
    symbol, kind = unit
    value = sign * magnitude
    # with 12 digits the round trip is exact up to the parser's 12-digit rounding
    assert parse_value(format_si(value, symbol, digits=12), kind) == pytest.approx(
        _round12(value), rel=1e-15
    )
    # the display default keeps 6 significant digits
    assert parse_value(format_si(value, symbol), kind) == pytest.approx(value, rel=5e-6)


@given(st.integers(min_value=1, max_value=999), st.integers(min_value=0, max_value=99),
       st.sampled_from(["R", "k", "M"]))
def test_rkm_agrees_with_decimal_form(before: int, after: int, letter: str) -> None:
    # IEC 60062: "4k7" means the same as "4.7k"
    decimal = f"{before}.{after}{'' if letter == 'R' else letter}"
    assert parse_value(f"{before}{letter}{after}", "ohms") == parse_value(decimal, "ohms")


def test_parsing_is_fast() -> None:
    # a budget, not a benchmark: the contract wants microseconds per value
    texts = ["27 kΩ", "4k7", "10uF", "2.5mA", "1e-15", "inf"] * 2000
    kinds = ["ohms", "ohms", "farads", "amps", "amps", "ohms"] * 2000
    start = time.perf_counter()
    for text, kind in zip(texts, kinds, strict=True):
        parse_value(text, kind)
    per_value_s = (time.perf_counter() - start) / len(texts)
    assert per_value_s < 50e-6


@pytest.mark.parametrize("text", ["1meg", "2.2MEG", "4.7 Meg", "1megohm"])
def test_meg_is_refused_with_the_hint_to_write_m(text: str) -> None:
    # contract version 2, section 6.1: 'meg' is removed; write M
    with pytest.raises(InputError, match="write M"):
        parse_value(text, "ohms")


# IEC 60062:2016, the letter code for resistance and capacitance tolerances (symmetric
# codes, from memory of the standard's table): F ±1 %, G ±2 %, J ±5 %, K ±10 %, M ±20 %.
@pytest.mark.parametrize(
    ("letter", "fraction"),
    [("B", 0.001), ("C", 0.0025), ("D", 0.005), ("F", 0.01), ("G", 0.02), ("J", 0.05),
     ("K", 0.10), ("M", 0.20)],
)
def test_iec_60062_tolerance_letters(letter: str, fraction: float) -> None:
    assert parse_value(letter, "tolerance") == pytest.approx(fraction, rel=1e-12)
    assert parse_value(f"±{letter}", "tolerance") == pytest.approx(fraction, rel=1e-12)


def test_lowercase_tolerance_letter_is_refused_with_the_capital() -> None:
    with pytest.raises(InputError, match="'J'"):
        parse_value("j", "tolerance")
