"""Tests for reconcile.eseries against IEC 60063.

Outside references: the ``eseries`` package (its own IEC 60063 tables and look-ups,
used here only as a test-time cross-check) and IEC 60063 from memory.
"""

from __future__ import annotations

import math

import eseries as ref
import numpy as np
import pytest

from reconcile.errors import InputError
from reconcile.model.eseries import (
    SERIES,
    TOLERANCE_SERIES,
    decade_slips,
    is_standard,
    nearest,
    neighbours,
    series_for_tolerance,
    series_names,
    smallest_series_containing,
    values_in_range,
)

NAMES = ("E3", "E6", "E12", "E24", "E48", "E96", "E192")
REF_KEY = {name: ref.ESeries[name] for name in NAMES}


def _log_uniform(seed: int, n: int, low_exp: float = -12.0, high_exp: float = 12.0) -> np.ndarray:
    return 10.0 ** np.random.default_rng(seed).uniform(low_exp, high_exp, n)


# --- tables ------------------------------------------------------------------------------


def test_series_names_ordered_coarsest_first() -> None:
    # IEC 60063 (from memory): E3, E6, E12, E24, E48, E96, E192.
    assert series_names() == NAMES
    assert tuple(SERIES) == NAMES


@pytest.mark.parametrize("name", NAMES)
def test_table_equals_eseries_table(name: str) -> None:
    # IEC 60063 via the eseries package: same values, same order.
    expected = ref.series(REF_KEY[name])  # integers, 10..91 or 100..988
    scale = expected[0]
    assert tuple(round(m * scale) for m in SERIES[name]) == expected


@pytest.mark.parametrize("name", NAMES)
def test_table_shape(name: str) -> None:
    # IEC 60063 (from memory): N values per decade, ascending, mantissas in [1, 10),
    # two significant digits up to E24, three from E48.
    table = SERIES[name]
    assert len(table) == int(name[1:])
    assert all(1.0 <= m < 10.0 for m in table)
    assert all(a < b for a, b in zip(table, table[1:], strict=False))
    digits = 1 if int(name[1:]) <= 24 else 2
    assert all(m == round(m, digits) for m in table)
    if digits == 2:
        assert any(m != round(m, 1) for m in table)


@pytest.mark.parametrize(
    ("coarse", "fine"),
    [("E3", "E6"), ("E6", "E12"), ("E12", "E24"), ("E48", "E96"), ("E96", "E192")],
)
def test_each_series_is_every_other_value_of_the_next(coarse: str, fine: str) -> None:
    # IEC 60063 (from memory): a series takes every second value of the next finer one.
    assert SERIES[coarse] == SERIES[fine][::2]


def test_e24_deviates_from_the_rounded_formula_in_eight_places() -> None:
    # IEC 60063 (from memory): 2.7 3.0 3.3 3.6 3.9 4.3 4.7 8.2 are not round(10**(i/24), 1).
    formula = [round(10 ** (i / 24), 1) for i in range(24)]
    different = [m for m, f in zip(SERIES["E24"], formula, strict=True) if m != f]
    assert different == [2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2]
    for value in (2.7e3, 3.0e3, 3.3e3, 3.6e3, 3.9e3, 4.3e3, 4.7e3, 8.2e3):
        assert is_standard(value, "E24")
    for value in (2.6e3, 2.9e3, 3.2e3, 3.5e3, 3.8e3, 4.2e3, 4.6e3, 8.3e3):
        assert not is_standard(value, "E24")


def test_e192_deviates_from_the_rounded_formula_once() -> None:
    # IEC 60063 (from memory): E192 has 9.20 where round(10**(185/192), 2) gives 9.19.
    formula = [round(10 ** (i / 192), 2) for i in range(192)]
    different = [(m, f) for m, f in zip(SERIES["E192"], formula, strict=True) if m != f]
    assert different == [(9.20, 9.19)]
    assert is_standard(9.20e3, "E192")
    assert not is_standard(9.19e3, "E192")


@pytest.mark.parametrize("name", ["E48", "E96"])
def test_e48_and_e96_follow_the_rounded_formula(name: str) -> None:
    # IEC 60063 (from memory): no exceptions in E48 and E96.
    n = int(name[1:])
    assert SERIES[name] == tuple(round(10 ** (i / n), 2) for i in range(n))


# --- look-ups against eseries on random values ------------------------------------------


@pytest.mark.parametrize("name", NAMES)
def test_neighbours_agree_with_eseries(name: str) -> None:
    # IEC 60063 via the eseries package: find_less_than_or_equal / find_greater_than_or_equal.
    key = REF_KEY[name]
    for value in _log_uniform(seed=int(name[1:]), n=3000):
        v = float(value)
        expected = (ref.find_less_than_or_equal(key, v), ref.find_greater_than_or_equal(key, v))
        assert neighbours(v, name) == expected, v


@pytest.mark.parametrize("name", NAMES)
def test_nearest_agrees_with_eseries(name: str) -> None:
    # IEC 60063 via the eseries package: find_nearest. eseries measures distance linearly,
    # ours logarithmically; the two may differ only between the geometric and the
    # arithmetic mean of the neighbours, where ours takes the upper and eseries the lower.
    key = REF_KEY[name]
    in_band = 0
    for value in _log_uniform(seed=1000 + int(name[1:]), n=3000):
        v = float(value)
        lower = ref.find_less_than_or_equal(key, v)
        upper = ref.find_greater_than_or_equal(key, v)
        theirs = ref.find_nearest(key, v)
        ours = nearest(v, name)
        if math.sqrt(lower * upper) < v < (lower + upper) / 2:
            in_band += 1
            assert (ours, theirs) == (upper, lower), v
        else:
            assert ours == theirs, v
    assert in_band > 0  # the band was exercised


@pytest.mark.parametrize("name", NAMES)
def test_standard_values_map_to_themselves(name: str) -> None:
    # IEC 60063 via the eseries package: erange lists the standard values.
    key = REF_KEY[name]
    for value in ref.erange(key, 1e-12, 1e-10):
        assert neighbours(value, name) == (value, value)
        assert nearest(value, name) == value
        assert ref.find_nearest(key, value) == value


def test_nearest_rounds_at_the_geometric_mean() -> None:
    # IEC 60063 (from memory): 1k0 and 1k1 neighbour in E24; log-nearest splits at sqrt(1.1) k.
    mean = math.sqrt(1000.0 * 1100.0)
    assert nearest(mean * (1 - 1e-12), "E24") == 1000.0
    assert nearest(mean * (1 + 1e-12), "E24") == 1100.0
    # A linear split would put 1049 (above the geometric mean 1048.8) with 1k0.
    assert nearest(1049.0, "E24") == 1100.0


def test_nearest_across_a_decade() -> None:
    # IEC 60063 (from memory): E96 ends a decade at 9.76, the next starts at 1.00.
    assert neighbours(9.9e3, "E96") == (9760.0, 10000.0)
    assert nearest(9.9e3, "E96") == 10000.0
    assert nearest(9.8e3, "E96") == 9760.0
    assert neighbours(0.99, "E3") == (0.47, 1.0)


def test_float_noise_counts_as_the_standard_value() -> None:
    # IEC 60063 (from memory): 4.7 is in E24; 0.1 * 3 style noise must not move it.
    assert neighbours(4699.999999999999, "E24") == (4700.0, 4700.0)
    assert neighbours(4700.000000000001, "E24") == (4700.0, 4700.0)
    assert nearest(4.7e-9 * (1 + 1e-15), "E24") == 4.7e-9
    # Relative 1e-6 is far from standard and stays a bracket.
    assert neighbours(4700.0 * (1 + 1e-6), "E24") == (4700.0, 5100.0)


def test_series_name_is_case_insensitive() -> None:
    assert nearest(4600.0, "e96") == nearest(4600.0, "E96") == 4640.0  # eseries docs example


# --- values_in_range ---------------------------------------------------------------------


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.parametrize(
    ("low", "high"),
    [(1.0, 10.0), (1e-12, 1e-9), (4.7e3, 4.7e5), (3.1e-7, 2.9e-6), (0.05, 0.05), (9.9e4, 1.02e5)],
)
def test_values_in_range_agree_with_eseries(name: str, low: float, high: float) -> None:
    # IEC 60063 via the eseries package: erange(key, start, stop), inclusive.
    got = values_in_range(name, low, high)
    assert got.dtype == np.float64
    assert got.tolist() == list(ref.erange(REF_KEY[name], low, high))


@pytest.mark.parametrize("name", NAMES)
def test_values_in_range_covers_decades(name: str) -> None:
    # IEC 60063 (from memory): N values in each decade, the same mantissas each time.
    n = int(name[1:])
    got = values_in_range(name, 1e-3, 1e3)
    assert len(got) == 6 * n + 1
    assert got[0] == 1e-3 and got[-1] == 1e3
    assert np.all(np.diff(got) > 0)
    per_decade = got[:-1].reshape(6, n) / (10.0 ** np.arange(-3, 3))[:, None]
    np.testing.assert_allclose(per_decade, np.tile(SERIES[name], (6, 1)), rtol=1e-15)


def test_values_in_range_are_clean_decimals() -> None:
    # IEC 60063 (from memory): values are the decimal mantissa times a power of ten, so each
    # float must be the one nearest to its decimal text.
    got = values_in_range("E192", 1e-15, 1e12)
    digits = [f"{v:.2e}" for v in got]
    assert all(float(text) == v for text, v in zip(digits, got, strict=True))
    assert 4700.0 in values_in_range("E24", 1e3, 1e4).tolist()
    assert values_in_range("E24", 4.7e-9, 4.7e-9).tolist() == [float("4.7e-9")]


def test_values_in_range_bounds() -> None:
    # IEC 60063 (from memory): E3 has 4.7 and then 10 in each decade.
    assert values_in_range("E3", 5e3, 9e3).size == 0
    assert values_in_range("E3", 4.7e3, 1e4).tolist() == [4700.0, 10000.0]
    assert values_in_range("E3", 4700.000000001, 9999.999999999).tolist() == [4700.0, 10000.0]


# --- is_standard, series membership, decade slips -------------------------------------------


def test_is_standard_tolerance() -> None:
    # IEC 60063 (from memory): 4.75 is E96 only, 4.7 is E3.
    assert is_standard(4750.0, "E96") and not is_standard(4750.0, "E24")
    assert is_standard(4700.0 * (1 + 5e-7), "E3")
    assert not is_standard(4700.0 * (1 + 5e-6), "E3")
    assert is_standard(4700.0 * (1 + 5e-6), "E3", rel_tol=1e-5)


def test_smallest_series_containing_agrees_with_eseries() -> None:
    # IEC 60063 via the eseries package: the first series whose find_nearest returns the value.
    in_decade = set(values_in_range("E192", 1e3, 1e4)) | set(values_in_range("E24", 1e3, 1e4))
    candidates = sorted(in_decade)
    candidates += [1.03e3, 1.25e3, 7.0e3]  # in no series
    for value in candidates:
        expected = next((n for n in NAMES if ref.find_nearest(REF_KEY[n], value) == value), None)
        assert smallest_series_containing(value) == expected, value
    assert smallest_series_containing(1.2e3) == "E12"  # E24 values are not all in E48
    assert smallest_series_containing(1.21e3) == "E48"
    assert smallest_series_containing(1.03e3) is None


def test_decade_slips() -> None:
    # IEC 60063 (from memory): every series repeats per decade, so 22k has 220k and 2k2.
    assert decade_slips(22e3, "E24") == [220e3, 2.2e3]
    assert decade_slips(4.7e-9, "E3") == [4.7e-8, 4.7e-10]
    assert decade_slips(4.64e3, "E96") == [46.4e3, 464.0]
    assert decade_slips(4.64e3, "E24") == []


# --- tolerance to series --------------------------------------------------------------------


@pytest.mark.parametrize(
    ("tolerance", "expected"),
    [
        (0.2, "E6"), (0.1, "E12"), (0.05, "E24"), (0.02, "E48"), (0.01, "E96"),
        (0.005, "E192"), (0.001, "E192"), (0.0, "E192"), (0.4, "E3"), (0.5, "E3"),
        (0.03, "E48"), (0.15, "E12"), (0.05 * (1 - 1e-12), "E24"),
    ],
)
def test_series_for_tolerance_common_practice(tolerance: float, expected: str) -> None:
    # Common practice: 20 % E6, 10 % E12, 5 % E24, 2 % E48, 1 % E96, 0.5 % and tighter E192.
    assert series_for_tolerance(tolerance) == expected


@pytest.mark.parametrize("name", NAMES)
def test_series_for_tolerance_matches_eseries_tolerances(name: str) -> None:
    # IEC 60063 via the eseries package: its nominal tolerance of each series.
    assert series_for_tolerance(ref.tolerance(REF_KEY[name])) == name
    assert TOLERANCE_SERIES[ref.tolerance(REF_KEY[name])] == name


def test_series_for_tolerance_custom_mapping() -> None:
    mapping = {0.05: "e24", 0.01: "E96"}
    assert series_for_tolerance(0.1, mapping) == "E24"
    assert series_for_tolerance(0.02, mapping) == "E96"
    assert series_for_tolerance(0.001, mapping) == "E96"


# --- errors ----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "call",
    [
        lambda: nearest(100.0, "E25"),
        lambda: neighbours(100.0, "R24"),
        lambda: values_in_range("E7", 1.0, 10.0),
        lambda: is_standard(100.0, ""),
        lambda: decade_slips(100.0, "E 24"),
        lambda: series_for_tolerance(0.05, {0.05: "E20"}),
    ],
)
def test_unknown_series_lists_valid_names(call) -> None:
    with pytest.raises(InputError, match="E3, E6, E12, E24, E48, E96, E192"):
        call()


@pytest.mark.parametrize("bad", [0.0, -4.7e3, math.nan, math.inf, -math.inf, "4k7", None, 1e-320])
@pytest.mark.parametrize(
    "call",
    [
        lambda v: nearest(v, "E24"),
        lambda v: neighbours(v, "E24"),
        lambda v: is_standard(v, "E24"),
        lambda v: decade_slips(v, "E24"),
        lambda v: smallest_series_containing(v),
        lambda v: values_in_range("E24", v, 1e3),
        lambda v: values_in_range("E24", 1e-3, v),
    ],
)
def test_non_positive_or_bad_values_raise(call, bad) -> None:
    with pytest.raises(InputError):
        call(bad)


def test_other_bad_arguments_raise() -> None:
    with pytest.raises(InputError, match="above"):
        values_in_range("E24", 1e4, 1e3)
    with pytest.raises(InputError, match="rel_tol"):
        is_standard(100.0, "E24", rel_tol=-1e-6)
    for bad in (-0.01, math.nan, math.inf, "5%"):
        with pytest.raises(InputError, match="tolerance"):
            series_for_tolerance(bad)
    with pytest.raises(InputError, match="empty"):
        series_for_tolerance(0.05, {})
    with pytest.raises(InputError, match="class"):
        series_for_tolerance(0.05, {-0.05: "E24"})
