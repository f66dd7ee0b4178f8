"""``fit --profile`` and ``fit --sample``: profile-likelihood intervals and posterior
draws, on an invented one-divider board small enough to sample in a few seconds.

References: for a Gaussian likelihood the profile interval where the objective has
risen by Δχ² = 1 (4) is exactly ±1σ (±2σ) of the linearised covariance (Press et al.,
*Numerical Recipes*, 3rd ed., §15.6, from memory), so on a nearly linear board the two
agree; the 15.87/84.13 % and 2.275/97.725 % quantiles of a normal distribution sit at
±1σ and ±2σ (``scipy.stats.norm``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from boards import resistor, supply, title
from cli_support import run_cli
from fit_support import SAMPLE_DATA
from scipy import stats

from reconcile.data.readings import readings_to_csv
from reconcile.errors import InputError
from reconcile.inference.fitting import fit_board
from reconcile.inference.profile import profile_intervals
from reconcile.inference.sampling import SAMPLE_LIMIT, check_sampling, sample_posterior
from reconcile.inference.simulate import full_plan, simulate_readings
from reconcile.model.board_loader import board_from_text

BOARD = str(SAMPLE_DATA / "line_receiver_cb.toml")
READINGS = str(SAMPLE_DATA / "line_receiver_built.csv")


DIVIDER = (title("invented divider for interval tests")
           + supply("VCC", "vcc", 10, tolerance="1%")
           + resistor("R1", "vcc", "m", "10k", tolerance="5%")
           + resistor("R2", "m", "gnd", "4k7", tolerance="5%"))


def _divider_readings():
    board = board_from_text(DIVIDER)
    return board, simulate_readings(board, full_plan(board), rng=np.random.default_rng(1))


@pytest.fixture(scope="module")
def divider_fit():
    return fit_board(*_divider_readings())


def test_profile_interval_matches_the_gaussian_one_on_a_linear_board(divider_fit):
    fit = divider_fit
    out = profile_intervals(fit, ["R1", "VCC"])
    for key, p in out.items():
        e = fit.parameters[key]
        assert p.unit == e.unit and p.value == pytest.approx(e.value)
        for k, (low, high) in ((1, p.sigma1), (2, p.sigma2)):
            assert low == pytest.approx(e.value - k * e.stderr, abs=0.05 * k * e.stderr)
            assert high == pytest.approx(e.value + k * e.stderr, abs=0.05 * k * e.stderr)
        json.dumps(p.to_dict())


@pytest.mark.slow
def test_sampled_quantiles_match_the_gaussian_posterior(divider_fit):
    """200 steps of 8 walkers (1 600 model evaluations, about 3 s)."""
    fit = divider_fit
    draws = sample_posterior(fit, 200, seed=3)
    z1, z2 = stats.norm.ppf(0.84), stats.norm.ppf(0.975)
    for key, e in fit.parameters.items():
        q = draws.quantiles[key]
        assert abs(q["median"] - e.value) < 0.5 * e.stderr, key
        assert (q["p84"] - q["p16"]) / (2 * z1) == pytest.approx(e.stderr, rel=0.3), key
        assert (q["p97_5"] - q["p2_5"]) / (2 * z2) == pytest.approx(e.stderr, rel=0.3), key
    assert 0.0 < draws.acceptance_fraction < 1.0
    assert draws.autocorrelation_steps is not None and draws.burn == 50
    assert draws.walkers == 2 * fit.space.size + 2
    assert set(json.loads(json.dumps(draws.to_dict()))) >= {
        "parameters", "acceptance_fraction", "autocorrelation_steps", "warnings"}


def test_sampling_refuses_beyond_its_limit_and_without_emcee(monkeypatch):
    with pytest.raises(InputError, match=f"at most {SAMPLE_LIMIT}"):
        check_sampling(SAMPLE_LIMIT + 1)
    import importlib.util

    real = importlib.util.find_spec
    monkeypatch.setattr(importlib.util, "find_spec",
                        lambda name, *a: None if name == "emcee" else real(name, *a))
    with pytest.raises(InputError, match=r"needs emcee.*reconcile\[sample\]"):
        check_sampling(10)


def test_cli_profile_json(tmp_path):
    _, readings = _divider_readings()
    (tmp_path / "divider.toml").write_text(DIVIDER, encoding="utf-8")
    (tmp_path / "readings.csv").write_text(readings_to_csv(readings), encoding="utf-8")
    out = run_cli("fit", str(tmp_path / "divider.toml"), str(tmp_path / "readings.csv"),
                  "--profile", "R1", "--json")
    assert out.exit_code == 0, out.stderr
    r1 = json.loads(out.stdout)["profile"]["R1"]
    assert r1["unit"] == "ohm" and r1["sigma1"][0] < r1["value"] < r1["sigma1"][1]
    assert r1["sigma2"][0] < r1["sigma1"][0] and r1["sigma1"][1] < r1["sigma2"][1]


def test_cli_refuses_an_unknown_profile_parameter_and_too_many_steps():
    bad = run_cli("fit", BOARD, READINGS, "--profile", "Q1.Is")
    assert bad.exit_code == 2 and bad.crash is None
    line = bad.stderr.strip()
    assert "\n" not in line and "Q1.Is" in line and "Q1.IS" in line
    over = run_cli("fit", BOARD, READINGS, "--sample", str(SAMPLE_LIMIT + 1))
    assert over.exit_code == 2 and str(SAMPLE_LIMIT) in over.stderr
