"""Accuracy specifications -> standard uncertainties, JCGM 100:2008 (GUM) 4.3.7.

GUM 4.3.7: when only limits ±a are known for a quantity, take it as uniformly
(rectangularly) distributed within them, so u = a/√3.
"""

from __future__ import annotations

import math

import mpmath
import pytest

from reconcile.data.accuracy import (
    DEFAULT_OVER_RANGE,
    AccuracySpec,
    RangeTable,
    standard_uncertainty,
)
from reconcile.errors import InputError

DMM_DC = RangeTable(
    (
        (10.0, AccuracySpec(0.008, 0.001)),
        (0.1, AccuracySpec(0.010, 0.004)),
        (1000.0, AccuracySpec(0.012, 0.002)),
        (1.0, AccuracySpec(0.008, 0.001)),
        (100.0, AccuracySpec(0.010, 0.002)),
    ),
    unit="V",
)


def test_rectangular_limit_by_hand_jcgm100_4_3_7():
    # ±(0.008 % of reading + 0.001 % of range), 1.62 V on the 10 V range:
    # a = 1.62 × 8e-5 + 10 × 1e-5 = 1.296e-4 + 1.0e-4 = 2.296e-4 V
    # u = a / √3 = 2.296e-4 / 1.7320508 = 1.325596e-4 V   (JCGM 100:2008 4.3.7)
    spec = AccuracySpec(percent_of_reading=0.008, percent_of_range=0.001)
    assert spec.limit(1.62, 10.0) == pytest.approx(2.296e-4, rel=1e-12)
    assert standard_uncertainty(spec, 1.62, 10.0) == pytest.approx(1.325596e-4, rel=1e-6)
    # the sign of the reading does not matter
    assert standard_uncertainty(spec, -1.62, 10.0) == standard_uncertainty(spec, 1.62, 10.0)


def test_floor_in_the_unit_by_hand_jcgm100_4_3_7():
    # supply read-back ±(0.05 % of reading + 10 mV), 5 V:
    # a = 5 × 5e-4 + 0.010 = 0.0125 V; u = 0.0125/√3 = 7.216878e-3 V
    spec = AccuracySpec(0.05, 0.0, floor=0.010)
    assert standard_uncertainty(spec, 5.0, 30.0) == pytest.approx(7.216878e-3, rel=1e-6)


def test_rectangular_variance_is_a_squared_over_three_by_integration():
    # JCGM 100:2008 4.3.7 eq. (7): u² = a²/3 for a rectangular distribution of half-width a;
    # checked by integrating x²/(2a) over [-a, a] with mpmath (reference library).
    a = 2.296e-4
    variance = mpmath.quad(lambda x: x**2 / (2 * a), [-a, a])
    spec = AccuracySpec(0.0, 0.0, floor=a)
    assert standard_uncertainty(spec, 1.0, 1.0) == pytest.approx(math.sqrt(float(variance)),
                                                                 rel=1e-12)


@pytest.mark.parametrize(
    ("reading", "full_scale"),
    [
        (0.0, 0.1),
        (0.05, 0.1),
        (0.12, 0.1),  # exactly 1.2 × full scale still fits
        (0.1201, 1.0),
        (1.1, 1.0),
        (1.62, 10.0),
        (-1.62, 10.0),
        (12.0, 10.0),
        (1200.0, 1000.0),
    ],
)
def test_smallest_range_that_holds_the_reading(reading, full_scale):
    # common practice: bench DMMs read to 120 % of full scale before ranging up
    assert DEFAULT_OVER_RANGE == 1.2
    assert DMM_DC.select_range(reading) == full_scale


def test_automatic_range_used_for_uncertainty_by_hand():
    # 0.12 V sits on the 0.1 V range: a = 0.12 × 1e-4 + 0.1 × 4e-5 = 1.6e-5 V,
    # u = 1.6e-5/√3 = 9.237604e-6 V (JCGM 100:2008 4.3.7)
    assert DMM_DC.standard_uncertainty(0.12) == pytest.approx(9.237604e-6, rel=1e-6)
    # the same reading held on the 10 V range is worse: a = 0.12×8e-5 + 10×1e-5 = 1.096e-4 V
    assert DMM_DC.standard_uncertainty(0.12, 10.0) == pytest.approx(1.096e-4 / math.sqrt(3),
                                                                    rel=1e-12)


def test_over_range_factor_is_per_table():
    strict = RangeTable(DMM_DC.ranges, over_range=1.0, unit="V")
    assert strict.select_range(1.1) == 10.0
    assert strict.select_range(1.0) == 1.0


def test_table_is_sorted_and_reports_full_scales():
    assert DMM_DC.full_scales == (0.1, 1.0, 10.0, 100.0, 1000.0)
    assert DMM_DC.to_dict()["ranges"][0] == {
        "range": 0.1, "percent_of_reading": 0.01, "percent_of_range": 0.004, "floor": 0.0}


@pytest.mark.parametrize(
    ("call", "key", "words"),
    [
        (lambda: DMM_DC.select_range(1201.0), "reading", "beyond the largest range"),
        (lambda: DMM_DC.standard_uncertainty(1.62, 5.0), "range", "ranges are 0.1, 1, 10"),
        (lambda: DMM_DC.standard_uncertainty(1.3, 1.0), "reading", "beyond range 1 V"),
        (lambda: AccuracySpec(-0.1, 0.0), "percent_of_reading", ">= 0"),
        (lambda: AccuracySpec(0.1, float("nan")), "percent_of_range", ">= 0"),
        (lambda: AccuracySpec(0.1, 0.0, floor="1 mV"), "floor", "expected a number"),
        (lambda: RangeTable(()), "ranges", "at least one range"),
        (lambda: RangeTable(((0.0, AccuracySpec(1, 0)),)), "range", "> 0"),
        (lambda: RangeTable(((1.0, AccuracySpec(1, 0)), (1.0, AccuracySpec(2, 0)))), "range",
         "given twice"),
        (lambda: RangeTable(((1.0, AccuracySpec(1, 0)),), over_range=0.5), "over_range", ">= 1"),
        (lambda: RangeTable(((1.0, 0.1),)), "range", "AccuracySpec"),
    ],
)
def test_bad_specs_and_readings(call, key, words):
    with pytest.raises(InputError) as info:
        call()
    assert info.value.key == key
    assert words in info.value.message
