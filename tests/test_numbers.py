"""The one number formatter (reconcile/present/numbers.py).

Outside references, named at each check:
- JCGM 100:2008 (GUM) 7.2.2 and 7.2.6: the uncertainty to at most two significant
  digits, the value rounded to match; the worked example of 7.2.2 (a mass of
  100.021 47 g with a standard uncertainty of 0.35 mg).
- SI Brochure (9th edition, 2019) 5.2 and 5.4.3: prefixes by powers of 1000, a space
  between number and unit, the prefix joined to the unit symbol, the same unit for a
  value and its uncertainty.
"""

from __future__ import annotations

import math

import pytest

from reconcile.model.values import parse_value
from reconcile.present import numbers as n


def test_gum_7_2_2_worked_example():
    # GUM 7.2.2 form 2: "m_S = (100.021 47 ± 0.000 35) g"
    assert n.with_u(100.02147, 0.00035, "g") == "100.02147 ± 0.00035 g"
    # GUM 7.2.2 form 2, the uncertainty in units of the last digits: "100.021 47(35) g"
    assert n.with_u(100.02147, 0.00035, "g", compact=True) == "100.02147(35) g"
    assert n.with_u(2179.3, 3.6, "ohm", compact=True) == "2.1793(36) kΩ"


@pytest.mark.parametrize(
    ("value", "u", "unit", "expected"),
    [
        # GUM 7.2.6: u to two significant digits, the value to the same decimal place
        (4702.3, 12.34, "ohm", "4.702 ± 0.012 kΩ"),
        (27150.0, 210.0, "ohm", "27.15 ± 0.21 kΩ"),
        (1.99523e-3, 1.23e-5, "V", "1.995 ± 0.012 mV"),
        (5.2e-15, 3e-16, "A", "5.20 ± 0.30 fA"),
        (131.2, 12.0, "", "131 ± 12"),
        # u that rounds up to the next decade keeps two digits at the coarser place
        (12.3456, 0.0996, "", "12.35 ± 0.10"),
        # a value smaller than its uncertainty: the prefix follows the larger one
        (0.004, 0.23, "V", "0 ± 230 mV"),
    ],
)
def test_value_with_uncertainty_gum_7_2_6(value, u, unit, expected):
    assert n.with_u(value, u, unit) == expected


def test_uncertainty_has_at_most_two_significant_digits_gum_7_2_6():
    # GUM 7.2.6 on random values: the printed u, read back, has <= 2 significant
    # digits and is within half a unit of its second digit of the true u
    rng = __import__("random").Random(7)
    for _ in range(500):
        u = 10 ** rng.uniform(-14, 6)
        value = rng.uniform(-1e3, 1e3) * u
        text = n.with_u(value, u, "V")
        v_text, u_text = text.split(" ± ")
        u_shown = parse_value(u_text, "volts")
        u_number = u_text.split(" ")[0]
        digits = u_number.replace(".", "").lstrip("0")
        if "." not in u_number:  # trailing zeros of a whole number only hold places
            digits = digits.rstrip("0")
        assert 1 <= len(digits) <= 2, text
        step = 10 ** (math.floor(math.log10(u)) - 1)
        assert abs(u_shown - u) <= 0.5 * step * 10 + 1e-30, text
        # the value is given to the same decimal place as u
        decimals = len(u_number.split(".")[1]) if "." in u_number else 0
        v_number = v_text.lstrip("+-")
        assert v_number == "0" or (len(v_number.split(".")[1]) if "." in v_number else 0) == decimals, text

@pytest.mark.parametrize(
    ("value", "unit", "digits", "expected"),
    [
        # SI Brochure 5.2/5.4.3: prefixes by 1000s, a space before the unit
        (3900.0, "ohm", 2, "3.9 kΩ"),
        (0.000333, "A", 4, "333 µA"),
        (12.345, "", 4, "12.35"),
        (1e4, "Hz", 4, "10 kHz"),
        (2.2e6, "Ω", 3, "2.2 MΩ"),
        (0.58, "Ω", 2, "580 mΩ"),
        (1500.0, "", 4, "1500"),
    ],
)
def test_si_prefix_and_unit(value, unit, digits, expected):
    assert n.si(value, unit, digits) == expected


def test_numerically_zero_prints_as_zero():
    # float noise of a difference of two equal solutions is not a value
    assert n.si(-3.1e-17, "") == "0"
    assert n.signed(2.2e-17, "", scale=12.0) == "0"
    assert n.signed(1e-14, "ohm", scale=75.0) == "0 Ω"
    assert n.si(0.0, "V") == "0 V"
    # but a tiny real value is not zero: a saturation current of 5 fA
    assert n.si(5e-15, "A") == "5 fA"
    assert n.with_u(1e-19, 0.23, "V") == "0 ± 230 mV"


def test_signed_differences_and_percent():
    assert n.signed(0.0012, "V") == "+1.2 mV"
    assert n.signed(-0.0012, "V") == "-1.2 mV"
    assert n.percent(0.038) == "+3.8 %"
    assert n.percent(-1e-6) == "0 %"


def test_temperature_as_typed():
    assert n.temperature(300.15) == "27.0 °C"
    assert n.temperature(300.15, 0.42) == "27.00 ± 0.42 °C"
    assert n.temperature(300.0, typed="K") == "300.0 K"


def test_missing_and_infinite():
    assert n.si(None, "V") == "-"
    assert n.si(math.inf, "ohm") == "∞ Ω"
    assert n.with_u(None, 1.0, "V") == "-"
    assert n.with_u(4.7e3, None, "ohm") == "4.7 kΩ"


def test_what_is_shown_reads_back():
    # the prefix rule is the value-string writer's: the shown value parses back
    for value in (4.7e3, 1.5e-6, 0.000333, 2.2e6, 12.0):
        assert parse_value(n.si(value, "ohm", 6), "ohms") == pytest.approx(value, rel=1e-6)
