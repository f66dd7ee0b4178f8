"""Readings from one instrument share its calibration error (JCGM 100:2008, GUM 5.2).

The fit carries one calibration factor per (instrument, quantity, range) as a nuisance
parameter (reconcile/inference/calibration.py). The checks below repeat one reading N
times and compare the fitted standard error with the GUM's hand formula for a shared
systematic component: the mean of N readings whose errors are u_sys (common to all,
correlation 1) plus u_rand (independent) has

    u(mean) = sqrt(u_sys² + u_rand²/N)          (JCGM 100:2008, 5.2.2 with r = 1)

and that reading estimate is then combined with the part's own prior (Gaussian in
ln R, σ = ln(1 + tolerance/√3), inverse-variance weighting). Readings with no instrument
named stay independent: u(mean) = u/√N.
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import pytest

from reconcile.data.readings import Reading
from reconcile.inference.calibration import calibration_parameters
from reconcile.inference.fitting import fit_board
from reconcile.model.board_loader import load_board

ROOT = Path(__file__).resolve().parents[1]
N = 9
REF = "RC"


@pytest.fixture(scope="module")
def board():
    return load_board(ROOT / "sample_data" / "preamp_ce.toml")


def _repeats(board, instrument: str, n: int = N) -> list[Reading]:
    ohms = board.resistors[REF].ohms * 1.004  # a part 0.4 % high, inside its tolerance
    one = Reading.from_si("resistance", REF, ohms, instrument=instrument)
    return [replace(one, line=k + 1) for k in range(n)]


def _hand_parts(value: float) -> tuple[float, float, float]:
    """The registry's default for resistance, split by hand: ±(0.1 % of reading +
    2 counts of the 20 000-count range + 0.1 ohm), rectangular (GUM 4.3.7, /√3); the
    0.1 % of reading is the calibration (systematic) part."""
    full_scale = next(r for r in (200.0, 2e3, 20e3, 200e3, 2e6, 20e6) if value < r)
    u_total = (0.001 * value + 2 * full_scale / 20000 + 0.1) / math.sqrt(3)
    u_sys = 0.001 * value / math.sqrt(3)
    u_rand = math.sqrt(u_total**2 - u_sys**2)
    return u_total, u_sys, u_rand


def _with_prior(board, value: float, u_readings: float) -> float:
    """Inverse-variance combination of the readings' estimate with the part's prior, in
    relative (ln R) terms, back to ohms."""
    prior = math.log1p(board.resistors[REF].tolerance / math.sqrt(3))
    rel = u_readings / value
    return value / math.sqrt(1 / rel**2 + 1 / prior**2)


def test_repeats_shrink_only_the_random_part(board):
    readings = _repeats(board, "DMM-A")
    value = readings[0].value
    _, u_sys, u_rand = _hand_parts(value)
    gum = math.sqrt(u_sys**2 + u_rand**2 / N)  # JCGM 100:2008 5.2.2, r = 1
    fit = fit_board(board, readings)
    assert fit.parameters[REF].stderr == pytest.approx(_with_prior(board, value, gum), rel=2e-3)
    one = fit_board(board, readings[:1]).parameters[REF].stderr
    # nine repeats cut far less than √9 = 3 (u_sys dominates u_rand here)
    assert one / fit.parameters[REF].stderr < 1.5


def test_one_reading_weighs_as_before(board):
    readings = _repeats(board, "DMM-A", 1)
    value = readings[0].value
    u_total, _, _ = _hand_parts(value)
    fit = fit_board(board, readings)
    expected = _with_prior(board, value, u_total)
    assert fit.parameters[REF].stderr == pytest.approx(expected, rel=2e-3)


def test_readings_with_no_instrument_stay_independent(board):
    readings = _repeats(board, "")
    value = readings[0].value
    u_total, _, _ = _hand_parts(value)
    fit = fit_board(board, readings)
    expected = _with_prior(board, value, u_total / math.sqrt(N))
    assert fit.parameters[REF].stderr == pytest.approx(expected, rel=2e-3)
    assert fit.calibration == {}
    assert calibration_parameters(readings) == ()


def test_factor_is_reported_apart_from_the_board(board):
    readings = _repeats(board, "DMM-A")
    fit = fit_board(board, readings)
    out = fit.to_dict()
    key = "DMM-A:resistance:20000ohm"
    assert set(out["calibration"]) == {key}
    assert key not in out["parameters"]
    u_sys_rel = 0.001 / math.sqrt(3)  # 0.1 % of reading, rectangular
    assert out["calibration"][key]["prior_sd"] == pytest.approx(math.log1p(u_sys_rel), rel=1e-3)
    # the readings cannot tell the factor from the part: it stays at its prior
    assert out["calibration"][key]["informed_by"] == "prior"


def test_ranges_and_instruments_are_separate_groups(board):
    a = Reading.from_si("resistance", "RC", 6.8e3, instrument="DMM-A")
    b = Reading.from_si("resistance", "R1", 68e3, instrument="DMM-A")  # 200k range
    c = Reading.from_si("resistance", "R2", 15e3, instrument="DMM-B")
    keys = [p.key for p in calibration_parameters([a, b, c])]
    assert keys == ["DMM-A:resistance:20000ohm", "DMM-A:resistance:200000ohm",
                    "DMM-B:resistance:20000ohm"]
