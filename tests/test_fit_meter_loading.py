"""Meter loading: a voltmeter on a high-impedance base node pulls it down, and a fit that
ignores the meter is biased.

Two invented boards with a high-impedance bias divider: 1 MΩ/470 kΩ read with a 1 MΩ
meter, and 4.7 MΩ/2.2 MΩ read with a 10 MΩ meter (``[bench] voltmeter_ohms``). The true
board is drawn inside its tolerances and read with the meter attached (the measurement
model of :mod:`reconcile.measure`, plus seeded noise). Then:

* with the meter modelled (``model_meter=True``) the fit is chi-square consistent, the
  quantities the loading acts on (beta, and the divider ratio R2/(R1+R2)) lie within
  2 standard errors of the truth, and every parameter within 3 (recover and assert
  within k standard errors: common practice, as in lmfit's own tests);
* without it (``model_meter=False``) the chi-square test rejects the fit (p < 0.001,
  scipy.stats.chi2) and beta is off by more than 5 standard errors.
"""

from __future__ import annotations

import numpy as np
import pytest
from boards import divider_stage, table, title
from fit_support import draw_truth

from reconcile.model.board_loader import board_from_text
from reconcile.inference.fitting import FitResult, fit_board
from reconcile.inference.simulate import full_plan

def _board_toml(r1: str, r2: str, rc: str, re: str, meter: str) -> str:
    """The high-impedance divider stage, 1 % parts, read with a meter of ``meter``."""
    return title("High-impedance bias divider (invented)") + divider_stage(
        vcc="12", r1=r1, r2=r2, rc=rc, re=re, tolerance="1%", supply_tolerance="1%",
        device_name="lab-npn",
        device_params={"IS": {"value": "8f", "low": "2f", "high": "40f"},
                       "beta": {"value": 180, "low": 90, "high": 330}, "VA": "80"},
    ) + table("bench", voltmeter_ohms=meter)


CASES = {
    "1M-meter": {"r1": "1M", "r2": "470k", "rc": "22k", "re": "22k", "meter": "1M"},
    "10M-meter": {"r1": "4M7", "r2": "2M2", "rc": "100k", "re": "100k", "meter": "10M"},
}


def _z(fit: FitResult, x_true: np.ndarray) -> dict[str, float]:
    sd = np.sqrt(np.diag(fit.covariance))
    z = {k: float((fit.x[j] - x_true[j]) / sd[j]) for j, k in enumerate(fit.space.keys)}
    i1, i2 = fit.space.index("R1"), fit.space.index("R2")
    c = fit.covariance
    ratio_sd = np.sqrt(c[i1, i1] + c[i2, i2] - 2.0 * c[i1, i2])
    log_ratio_error = (fit.x[i1] - fit.x[i2]) - (x_true[i1] - x_true[i2])
    z["divider"] = float(log_ratio_error / ratio_sd)  # ln(R1/R2) fixes R2/(R1+R2)
    return z


@pytest.fixture(scope="module", params=list(CASES))
def loaded(request):
    board = board_from_text(_board_toml(**CASES[request.param]), f"{request.param}.toml")
    rng = np.random.default_rng(0)
    truth = draw_truth(board, rng)
    readings = truth.read(full_plan(board), rng)
    return board, truth, readings


def test_meter_loading_is_many_reading_uncertainties(loaded) -> None:
    """The set-up is one where loading matters: the base reading (meter attached) is
    more than 10 reading uncertainties below the unloaded true base voltage."""
    _board, truth, readings = loaded
    base = next(r for r in readings if r.quantity == "voltage" and r.at == "b")
    unloaded = float(truth.solution().voltage("b")[0])
    assert (unloaded - base.value) / base.uncertainty > 10.0


def test_fit_with_meter_modelled_recovers_truth_within_sigma(loaded) -> None:
    board, truth, readings = loaded
    fit = fit_board(board, readings, model_meter=True)
    z = _z(fit, truth.internal(fit.space))
    assert fit.verdict == "consistent", f"p = {fit.p_value:.3g}"
    assert abs(z["Q1.beta"]) <= 2.0 and abs(z["divider"]) <= 2.0, z
    assert max(abs(v) for v in z.values()) <= 3.0, z


def test_fit_ignoring_meter_is_biased_and_chi_square_rejects_it(loaded) -> None:
    board, truth, readings = loaded
    fit = fit_board(board, readings, model_meter=False)
    z = _z(fit, truth.internal(fit.space))
    assert fit.p_value < 1e-3 and fit.verdict == "inconsistent", f"p = {fit.p_value:.3g}"
    assert abs(z["Q1.beta"]) > 5.0, z


# ------------------------------------------------------------------ ammeter burden
def _series_pair(bench: str = "") -> str:
    from boards import resistor, supply

    return (supply("VCC", "vcc", 10) + resistor("R1", "vcc", "a", "1k")
            + resistor("R2", "a", "gnd", "9k") + bench)


def _predicted(board_text: str, readings) -> np.ndarray:
    from reconcile.inference.measure import MeasurementModel, observations_from

    board = board_from_text(board_text, path="pair.toml")
    model = MeasurementModel(board, observations_from(readings, board))
    return model.predict(model.space.prior_mean[None])[0]


def test_a_current_through_a_resistor_carries_the_ammeters_burden():
    # Ohm's law for resistors in series (any circuit text): the ammeter's burden r in
    # series with R2 gives I = V/(R1 + R2 + r); the supply's read-back of the same board
    # has no ammeter in it, and neither does a voltage read elsewhere.
    from reconcile.data.readings import Reading

    readings = [Reading.from_si("current", "R2", 1e-3), Reading.from_si("current", "VCC", 1e-3)]
    i_r2, i_supply = _predicted(_series_pair(table("bench", ammeter_ohms="50")), readings)
    assert i_r2 == pytest.approx(10.0 / (1e3 + 9e3 + 50.0), rel=1e-12)
    assert i_supply == pytest.approx(10.0 / 10e3, rel=1e-12)
    ideal, _ = _predicted(_series_pair(table("bench", ammeter_ohms="0")), readings)
    assert ideal == pytest.approx(1e-3, rel=1e-12)


def test_a_held_short_keeps_the_ammeter_in_series():
    # Ohm's law for resistors in series: with R2 shorted (held at SHORT_OHMS by the
    # hypothesis) the current read through it is V/(R1 + SHORT_OHMS + r), the ammeter's
    # burden r still in the loop; a hypothesis that holds R2 must not drop the meter.
    from reconcile.data.readings import Reading
    from reconcile.diagnosis.fault_fit import fit_faults
    from reconcile.diagnosis.faults import SHORT_OHMS, single_faults
    from reconcile.inference.measure import MeasurementModel, observations_from

    board = board_from_text(_series_pair(table("bench", ammeter_ohms="50")), path="pair.toml")
    obs = observations_from([Reading.from_si("current", "R2", 9.5e-3)], board)
    short = [f for f in single_faults(board) if f.ref == "R2" and f.kind == "short"]
    (fit,) = fit_faults(short, obs, MeasurementModel(board, obs).space)
    expected = fit.value("VCC") / (fit.value("R1") + SHORT_OHMS + 50.0)
    assert fit.predicted[0] == pytest.approx(expected, rel=1e-9)


def test_the_documented_default_burden_applies_when_the_file_is_silent():
    from reconcile.data.readings import Reading
    from reconcile.model.board import DEFAULT_AMMETER_OHMS

    (i_r2,) = _predicted(_series_pair(), [Reading.from_si("current", "R2", 1e-3)])
    assert i_r2 == pytest.approx(10.0 / (10e3 + DEFAULT_AMMETER_OHMS), rel=1e-12)


@pytest.mark.parametrize("value", ["-1", "inf", "ten"])
def test_a_bad_burden_is_one_error_naming_the_key(value):
    from reconcile.errors import InputErrors

    with pytest.raises(InputErrors) as err:
        board_from_text(_series_pair(table("bench", ammeter_ohms=value)), path="pair.toml")
    assert "ammeter_ohms" in str(err.value) and "pair.toml" in str(err.value)
