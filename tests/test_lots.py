"""Lot characterisation: jig fits, sweep extraction, lot statistics, device table.

References named beside each check:

- synthetic lots with known truth from a seeded generator; coverage of a ±2 standard
  error interval is about 95 % for a normal estimate (JCGM 100:2008, GUM 6.2–6.3; we
  require 90 %);
- sampling error of a mean, σ/√N, and the chi-square interval of a normal sample's
  variance, (N−1)s²/σ² ~ χ²(N−1) (any statistics textbook, from memory; quantiles from
  scipy.stats); mean of a log-normal exp(μ + s²/2) and its sd mean·√(exp(s²) − 1) (same);
- the batched jig fit against reconcile.inference.fitting.fit_board (lmfit / scipy
  least_squares), one device at a time: a self-consistency check (two optimisers of
  ours), named so;
- ln IC linear in VBE with slope 1/(n·VT): the contract's device model (formats.md,
  section 2), evaluated with mpmath at 40 digits; VBE at a current by mpmath.findroot;
- modified z-score 0.6745·(x − median)/MAD > 3.5 (Iglewicz and Hoaglin, 1993; from memory);
- Cp, Cpk (common practice in statistical process control, from memory).
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import mpmath
import numpy as np
import pytest
from scipy import constants, stats

from reconcile.model.board import DeviceParam
from reconcile.model.board_loader import board_from_text, load_board
from reconcile.errors import InputError
from reconcile.jsonout import dumps
from reconcile.lot.stats import capability, robust_z, vbe_at_current
from reconcile.lot.characterise import LotOptions, characterise_jig, characterise_sweeps, parse_bins, run_lot
from reconcile.data.readings import Reading, readings_from_text
from reconcile.inference.simulate import simulate_readings
from reconcile.data.sweep_file import sweeps_from_text, sweeps_to_csv
from reconcile.lot.extraction import extract
from reconcile.lot.sweep_simulator import simulate_sweeps

ROOT = Path(__file__).resolve().parents[1]
JIG = ROOT / "sample_data" / "lot_jig.toml"
JIG_READINGS = ROOT / "sample_data" / "lot_jig_readings.csv"
SWEEPS = ROOT / "sample_data" / "lot_sweep.csv"
PLAN = [("voltage", "b"), ("voltage", "c"), ("current", "VCC")]
IC_POINTS = np.logspace(-6, -2, 10)


def _jig_lot(board, beta, is_a, rng, *, ambient_c: float | None = None) -> list[Reading]:
    """Readings of each invented device in the jig, device column filled."""
    out: list[Reading] = []
    true_jig = board
    if ambient_c is not None:
        out.append(Reading("temperature", "", ambient_c + constants.zero_Celsius, "C", None))
        true_jig = dataclasses.replace(board, temperature=ambient_c + constants.zero_Celsius)
    name = next(iter(board.devices))
    for i, (b, s) in enumerate(zip(beta, is_a, strict=True)):
        dev = dataclasses.replace(
            board.devices[name], IS=DeviceParam(float(s)), beta=DeviceParam(float(b))
        )
        tb = dataclasses.replace(true_jig, devices={name: dev})
        out += [
            dataclasses.replace(r, device=f"T{i:03d}") for r in simulate_readings(tb, PLAN, rng=rng)
        ]
    return out


@pytest.fixture(scope="module")
def jig():
    return load_board(JIG)


@pytest.fixture(scope="module")
def jig_lot(jig):
    rng = np.random.default_rng(8101)
    n = 150
    mu_b, s_b = math.log(170.0), 0.15
    mu_i, s_i = math.log10(7e-15), 0.1
    beta = np.exp(rng.normal(mu_b, s_b, n))
    is_a = 10 ** rng.normal(mu_i, s_i, n)
    readings = _jig_lot(jig, beta, is_a, rng, ambient_c=23.0)
    result = characterise_jig(jig, readings)
    return {"beta": beta, "is": is_a, "result": result, "mu_b": mu_b, "s_b": s_b,
            "mu_i": mu_i, "s_i": s_i, "readings": readings}


# --------------------------------------------------------------------------- jig
def test_jig_beta_and_is_within_two_stderr_in_90_percent(jig_lot):
    # ±2 standard errors cover ~95 % of normal estimates (JCGM 100:2008, 6.2-6.3).
    res = jig_lot["result"]
    devs = list(res.devices.values())
    beta = np.array([d.beta for d in devs])
    beta_se = np.array([d.beta_stderr for d in devs])
    is_a = np.array([d.is_25c for d in devs])
    is_se = np.array([d.is_stderr for d in devs])
    assert np.mean(np.abs(beta - jig_lot["beta"]) <= 2 * beta_se) >= 0.90
    assert np.mean(np.abs(is_a - jig_lot["is"]) <= 2 * is_se) >= 0.90
    assert all("not-converged" not in d.flags for d in devs)


def test_jig_lot_mean_and_spread_within_sampling_error(jig_lot):
    # Log-normal population: mean exp(mu + s²/2), sd mean·sqrt(exp(s²) − 1); the lot mean
    # lies within 3σ/√N; (N−1)s²/σ² ~ χ²(N−1) for the normal ln beta and log10 IS
    # (textbook, from memory; quantiles from scipy.stats), two-sided 99.9 %.
    s = jig_lot["result"].summary
    n = s.used
    pop_mean = math.exp(jig_lot["mu_b"] + jig_lot["s_b"] ** 2 / 2)
    pop_sd = pop_mean * math.sqrt(math.expm1(jig_lot["s_b"] ** 2))
    assert abs(s.beta_mean - pop_mean) <= 3 * pop_sd / math.sqrt(n)
    lo, hi = stats.chi2.ppf([0.0005, 0.9995], n - 1)
    for sample_sd, sigma in ((s.ln_beta_sd, jig_lot["s_b"]), (s.log10_is_sd, jig_lot["s_i"])):
        assert lo <= (n - 1) * sample_sd**2 / sigma**2 <= hi
    assert abs(s.log10_is_mean - jig_lot["mu_i"]) <= 3 * jig_lot["s_i"] / math.sqrt(n)


def test_jig_batched_fit_agrees_with_fit_board_loop_self_consistency(jig, jig_lot):
    # Self-consistency check: the same MAP objective solved one device at a time by
    # reconcile.inference.fitting (lmfit), another optimiser of ours.
    from reconcile.inference.fitting import fit_board
    from reconcile.inference.optimiser import DECREMENT_TOL
    from reconcile.lot.jig_fit import fit_jig

    some = ("T000", "T001", "T002")
    readings = [r for r in jig_lot["readings"] if r.device in some or not r.device]
    batched = fit_jig(jig, readings)
    fixed = ("VCC", "RB", "RC", "temperature")
    for i, name in enumerate(batched.devices):
        one = fit_board(batched.board, [r for r in readings if r.device == name], fixed=fixed)
        for key in ("Q1.IS", "Q1.beta"):
            j = batched.keys.index(key)
            est = one.parameters[key]
            x = batched.x[i, j]
            value = 10**x if key.endswith("IS") else math.exp(x)
            slope = math.log(10) * value if key.endswith("IS") else value
            stderr = slope * math.sqrt(batched.covariance[i, j, j])
            # Both stop within the core's convergence test of the one minimum: at most
            # DECREMENT_TOL of χ², so a gap of at most sqrt(DECREMENT_TOL) standard errors.
            assert abs(value - est.value) <= math.sqrt(DECREMENT_TOL) * stderr
            assert stderr == pytest.approx(est.stderr, rel=1e-2)
        assert batched.objective[i] == pytest.approx(one.objective, abs=DECREMENT_TOL)
        # the verdict's statistics follow the board fit's convention (readings' χ² alone,
        # on the readings less the parameters they inform)
        assert batched.chi_square[i] == pytest.approx(one.chi_square, abs=2 * DECREMENT_TOL)
        assert batched.dof[i] == pytest.approx(one.dof, rel=1e-2)


def test_jig_sample_files_find_the_odd_device():
    res = run_lot(JIG, JIG_READINGS, bins="100,150,175,200,250", spec_low=120)
    assert res.mode == "jig"
    assert res.outliers == ("D009",)
    assert "low-beta" in res.devices["D009"].flags
    assert res.summary.used == 11 and res.summary.excluded == ("D009",)
    d = res.to_dict()
    # The contract's keys (formats.md, section 4, lot).
    assert set(d["devices"]["D001"]["IS"]) >= {"value", "stderr"}
    assert set(d["devices"]["D001"]["beta"]) >= {"value", "stderr"}
    assert d["devices"]["D001"]["flags"] == []
    assert set(d["summary"]["beta"]) >= {"mean", "sd", "p05", "p50", "p95"}
    assert set(d["summary"]["IS"]) >= {"geo_mean", "log10_sd"}
    assert d["outliers"] == ["D009"]
    assert sum(b["count"] for b in d["bins"]) == 12
    dumps(d)  # strictly valid JSON


def test_jig_with_ranged_n_fits_three_parameters(jig):
    ranged_n = 'VA = "90"\nn = { value = 1.0, low = 0.96, high = 1.04 }'
    text = JIG.read_text().replace('VA = "90"', ranged_n)
    board = board_from_text(text)
    rng = np.random.default_rng(5)
    readings = _jig_lot(board, [150.0, 200.0, 250.0], [5e-15, 7e-15, 9e-15], rng)
    res = characterise_jig(board, readings)
    assert res.fit_info["parameters"] == ["Q1.IS", "Q1.beta", "Q1.n"]
    d = res.devices["T000"]
    # One VBE reading cannot separate n from IS: n keeps most of its prior sd (0.02,
    # the range read as ±2σ by reconcile.priors), only the IS prior narrows it a little.
    assert 0.5 * 0.02 < d.n_stderr <= 0.02
    assert res.summary.n_fitted


def test_jig_reading_without_device_is_an_input_error(jig):
    text = (
        "quantity,at,value,unit,uncertainty,instrument,note,device\n"
        "voltage,b,0.67,V,,,,D1\nvoltage,c,8.3,V,,,,\n"
    )
    with pytest.raises(InputError, match="has no device") as err:
        characterise_jig(jig, readings_from_text(text, board=jig))
    assert err.value.line == 3
    text = "quantity,at,value,unit\nvoltage,b,0.67,V\n"
    with pytest.raises(InputError, match="names no device"):
        characterise_jig(jig, readings_from_text(text, board=jig))


def test_jig_shared_resistance_reading_sets_the_jig_part(jig):
    rng = np.random.default_rng(9)
    readings = _jig_lot(jig.with_resistor_ohms("RB", 1.03e6), [180.0], [6e-15], rng)
    shared = Reading("resistance", "RB", 1.03e6, "ohm", None)
    res = characterise_jig(jig, [shared, *readings])
    assert res.devices["T000"].beta == pytest.approx(180.0, abs=3 * res.devices["T000"].beta_stderr)
    wrong = characterise_jig(jig, readings)  # RB taken as drawn: beta off by about 3 %
    assert abs(wrong.devices["T000"].beta / 180.0 - 1.0) > 0.02


# ------------------------------------------------------------------------ sweeps
def test_sweep_extraction_matches_closed_form_mpmath():
    # IC = IS·exp(VBE/(n·VT)) exactly (40 digits), IB = IC/beta: ln IC is linear in
    # VBE with slope 1/(n·VT) (formats.md, section 2, forward-active, VBC ≪ 0, VA = inf).
    t = 300.15
    vt = mpmath.mpf(constants.k) * t / mpmath.mpf(constants.e)
    mpf = mpmath.mpf
    cases = [(mpf("4.2e-15"), mpf("1.013"), 187.5), (mpf("2.5e-14"), mpf("1.0"), 95.0)]
    rows = ["device,vbe,ic,ib,u_vbe,u_ic,u_ib,temperature"]
    with mpmath.workdps(40):
        for d, (is_t, n, beta) in enumerate(cases):
            for vbe in np.linspace(0.50, 0.72, 9):
                ic = is_t * mpmath.exp(mpmath.mpf(float(vbe)) / (n * vt))
                ic_text, ib_text = mpmath.nstr(ic, 20), mpmath.nstr(ic / beta, 20)
                rows.append(f"X{d},{float(vbe)!r},{ic_text},{ib_text},1e-9,1e-10,1e-10,{t} K")
    sw = sweeps_from_text("\n".join(rows))
    ex = extract(sw)
    for d, (is_t, n, beta) in enumerate(cases):
        assert ex.slope[d] == pytest.approx(float(1 / (n * vt)), rel=1e-9)
        assert ex.n[d] == pytest.approx(float(n), rel=1e-9)
        # IS at the sweep temperature, before referring to 25 C.
        assert math.exp(ex.intercept[d]) == pytest.approx(float(is_t), rel=1e-7)
        assert math.exp(ex.ln_beta[d]) == pytest.approx(beta, rel=1e-12)
        assert ex.flags[d] == ()


def test_sweep_early_factor_divided_out():
    # Points made with reconcile.devices.junction_currents at VCE = 3 V, VA = 40 V.
    sw = simulate_sweeps(["A", "B"], [6e-15, 1.1e-14], [150.0, 320.0], [1.0, 1.02], IC_POINTS,
                         vce_v=3.0, va_v=40.0)
    with_va = extract(sw, va_v=40.0)
    assert np.exp(with_va.ln_is) == pytest.approx([6e-15, 1.1e-14], rel=1e-6)
    assert np.exp(with_va.ln_beta) == pytest.approx([150.0, 320.0], rel=1e-6)
    assert with_va.n == pytest.approx([1.0, 1.02], rel=1e-7)
    without = extract(sw)  # beta then carries (1 + (VCE − VBE)/VA), about 6 %
    assert np.exp(without.ln_beta[0]) / 150.0 == pytest.approx(1 + (3.0 - 0.65) / 40.0, rel=0.01)


def test_series_resistance_bend_is_flagged_not_averaged():
    rng = np.random.default_rng(77)
    d = 60
    names = [f"S{i:02d}" for i in range(d)]
    n_true = rng.normal(1.0, 0.01, d)
    beta = np.exp(rng.normal(np.log(200), 0.1, d))
    r_e = np.zeros(d)
    r_e[17] = 2.0
    sw = simulate_sweeps(names, 10 ** rng.normal(-14.2, 0.1, d), beta, n_true, IC_POINTS,
                         r_emitter_ohm=r_e, rng=rng)
    ex = extract(sw)
    flagged = [names[i] for i in range(d) if "series-resistance" in ex.flags[i]]
    assert flagged == ["S17"]
    # R seen at VBE is RE·IE/IC = RE·(1 + 1/beta); n from the corrected fit is unbiased.
    r_expect = 2.0 * (1 + 1 / beta[17])
    assert abs(ex.r_series_ohm[17] - r_expect) <= 3 * ex.r_series_se[17]
    assert abs(ex.n[17] - n_true[17]) <= 3 * math.sqrt(ex.cov[17, 1, 1])
    # A straight line through the bent points would be far off (what is not done).
    m = sw.mask[17]
    slope = np.polyfit(sw.vbe[17, m], np.log(sw.ic[17, m]), 1)[0]
    n_naive = 1.0 / (slope * constants.k * sw.temperature_k[17] / constants.e)
    assert abs(n_naive - n_true[17]) > 10 * math.sqrt(ex.cov[17, 1, 1])


def test_sweep_lot_coverage_and_outlier():
    # ±2 standard errors (JCGM 100:2008, 6.2-6.3); one device with a third of the gain.
    rng = np.random.default_rng(2024)
    d = 400
    names = [f"D{i:03d}" for i in range(d)]
    beta = np.exp(rng.normal(np.log(180), 0.12, d))
    beta[123] *= 0.35
    is_a = 10 ** rng.normal(-14.1, 0.08, d)
    n = rng.normal(1.004, 0.004, d)
    sw = simulate_sweeps(names, is_a, beta, n, IC_POINTS, rng=rng, u_ib_rel=3e-3)
    res = characterise_sweeps(sw)
    est = res.devices
    b = np.array([est[k].beta for k in names])
    bse = np.array([est[k].beta_stderr for k in names])
    i_ = np.array([est[k].is_25c for k in names])
    ise = np.array([est[k].is_stderr for k in names])
    nn = np.array([est[k].n for k in names])
    nse = np.array([est[k].n_stderr for k in names])
    for value, se, truth in ((b, bse, beta), (i_, ise, is_a), (nn, nse, n)):
        assert np.mean(np.abs(value - truth) <= 2 * se) >= 0.90
    assert "D123" in res.outliers
    assert len(res.outliers) <= 3  # 3.5 on a normal sample: a false alarm is rare


def test_sweep_file_format_value_strings_pnp_and_round_trip():
    text = (
        "# a comment\n"
        "Device,VBE,IC,IB,u_vbe,u_ic,u_ib,vce,temperature,note\n"
        "P1,-0.60,-100u,-0.5u,0.1m,0.1%,,-5,25 C,first\n"
        "P1,-650m,-700u,-3.5u,0.1m,0.1%,,-5,25 C,\n"
        "P1,-0.70,-4.9m,-24.5u,0.1m,0.1%,,-5,25 C,\n"
        "N1,0.60,100u,0.5u,,,,,,\n"
        "N1,0.65,700u,3.5u,,,,,,\n"
    )
    sw = sweeps_from_text(text)
    assert sw.devices == ("P1", "N1")
    assert list(sw.polarity) == [-1.0, 1.0]
    assert sw.vbe[0, 1] == pytest.approx(0.65) and sw.ic[0, 0] == pytest.approx(100e-6)
    assert sw.u_ic[0, 0] == pytest.approx(1e-7)
    assert not sw.mask[1, 2] and sw.points.tolist() == [3, 2]
    # Blank u: the bench DMM default of reconcile.readings (0.2 % + 2 counts)/√3.
    assert sw.u_ic[1, 0] == pytest.approx((0.002 * 100e-6 + 2 * 200e-6 / 20000) / math.sqrt(3))
    again = sweeps_from_text(sweeps_to_csv(sw))
    assert again.devices == sw.devices
    np.testing.assert_allclose(again.vbe[sw.mask], sw.vbe[sw.mask], rtol=1e-6)
    np.testing.assert_allclose(again.polarity, sw.polarity)


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("device,vbe,ic\nA,0.6,1m\n", "missing required column 'ib'"),
        ("device,vbe,ic,ib,volts\nA,0.6,1m,5u,1\n", "unknown column 'volts'"),
        ("device,vbe,ic,ib\nA,0.6,1m,5u\nA,-0.65,1m,5u\n", "all be positive"),
        ("device,vbe,ic,ib\nA,0.6,1m,5u\n", "at least two"),
        ("device,vbe,ic,ib\nA,0.6,1 V,5u\nA,0.65,2m,9u\n", "ic:"),
        ("device,vbe,ic,ib\nA,0.6,1m,5u\nA,0.6,2m,9u\n", "same vbe"),
    ],
)
def test_sweep_file_errors(text, message):
    with pytest.raises(InputError, match=message):
        sweeps_from_text(text, path="lot.csv")


def test_sweep_errors_name_file_and_line():
    text = "device,vbe,ic,ib\nA,0.6,1m,5u\nA,0.7,x,5u\nB,,1m,2u\n"
    with pytest.raises(InputError) as err:
        sweeps_from_text(text, path="lot.csv")
    lines = [e.line for e in err.value.errors]
    assert lines == [3, 4] and all(e.path == "lot.csv" for e in err.value.errors)


def test_sweep_sample_file():
    res = run_lot(JIG, SWEEPS)  # the jig lends VA = 90 V for the Early factor
    assert res.mode == "sweep"
    flagged = [k for k, d in res.devices.items() if "series-resistance" in d.flags]
    assert flagged == ["S06"]
    assert res.fit_info["early_va"] == 90.0
    bare = run_lot(None, SWEEPS, early_voltage=90.0)
    assert bare.devices["S01"].beta == pytest.approx(res.devices["S01"].beta, rel=1e-12)


# ------------------------------------------------------------------ lot statistics
def test_modified_z_score_by_hand():
    # median 10.1, |x − median| = .1 .4 .3 .1 0 .2 3.9 -> MAD = 0.2;
    # z(14) = 0.6745·3.9/0.2 = 13.15 (Iglewicz and Hoaglin, from memory).
    x = np.array([10.0, 10.5, 9.8, 10.2, 10.1, 9.9, 14.0])
    z = robust_z(x)
    assert z[-1] == pytest.approx(0.6745 * 3.9 / 0.2)
    assert z[0] == pytest.approx(-0.6745 * 0.1 / 0.2)
    assert np.all(robust_z(np.ones(5)) == 0.0)  # no spread: nothing is an outlier


def test_vbe_at_current_against_mpmath_root():
    # Solve IS(T)·(exp(V/(n·VT)) − 1) = I for V with mpmath.findroot (device model).
    from reconcile.engine import devices

    is_25, n, t, i = 7e-15, 1.01, 310.0, 1e-3
    is_t = float(devices.saturation_current(is_25, t))
    with mpmath.workdps(30):
        nvt = mpmath.mpf(n) * mpmath.mpf(constants.k) * t / mpmath.mpf(constants.e)
        root = mpmath.findroot(lambda v: is_t * (mpmath.exp(v / nvt) - 1) - i, 0.6)
    cov = np.array([[[0.01**2, 0.0], [0.0, 0.0]]])
    v, se = vbe_at_current(np.array([math.log(is_25)]), np.array([n]), cov, i, t)
    assert v[0] == pytest.approx(float(root), abs=1e-12)
    # 1 % in IS moves VBE by n·VT·0.01 (the derivative of the closed form).
    assert se[0] == pytest.approx(float(nvt) * 0.01, rel=1e-6)


def test_matching_pairs_by_vbe_and_beta_ratio():
    # A, B: IS 2 % apart (ΔVBE = VT·ln 1.02 ≈ 0.51 mV), betas 2 % apart: a pair.
    # C, D: same VBE, betas 30 % apart: no pair. E: VBE 10 mV away from all.
    names = ["A", "B", "C", "D", "E"]
    is_a = [6e-15, 6.12e-15, 8e-15, 8e-15, 6e-15 * math.exp(-0.010 / 0.025693)]
    beta = [200.0, 204.0, 150.0, 195.0, 400.0]
    sw = simulate_sweeps(names, is_a, beta, 1.0, IC_POINTS)
    no_outliers = 1e9  # five devices: keep the outlier rule out of this check
    res = characterise_sweeps(
        sw, options=LotOptions(vbe_limit_v=2e-3, beta_ratio=1.1, outlier_z=no_outliers)
    )
    assert [p.devices for p in res.pairs] == [("B", "A")]
    vt = constants.k * 298.15 / constants.e
    assert res.pairs[0].delta_vbe_v == pytest.approx(vt * math.log(1.02), rel=1e-4)
    assert res.pairs[0].beta_ratio == pytest.approx(1.02, rel=1e-6)
    looser = characterise_sweeps(sw, options=LotOptions(beta_ratio=1.5, outlier_z=no_outliers))
    assert {p.devices for p in looser.pairs} == {("B", "A"), ("C", "D")}
    triples = characterise_sweeps(
        sw, options=LotOptions(vbe_limit_v=8e-3, beta_ratio=1.5, set_size=3, outlier_z=no_outliers)
    )
    assert [len(p.devices) for p in triples.pairs] == [3]


def test_cpk_by_hand():
    # beta 100..140: mean 120, s = √250 = 15.811; LSL 80, USL 170:
    # Cpl = 40/47.434 = 0.8433, Cpu = 50/47.434 = 1.0541, Cp = 90/94.868 = 0.9487
    # (common practice in statistical process control).
    c = capability(np.array([100.0, 110.0, 120.0, 130.0, 140.0]), 80.0, 170.0)
    assert c.cpl == pytest.approx(40 / (3 * math.sqrt(250)))
    assert c.cpu == pytest.approx(50 / (3 * math.sqrt(250)))
    assert c.cpk == pytest.approx(c.cpl)
    assert c.cp == pytest.approx(90 / (6 * math.sqrt(250)))
    one_sided = capability(np.array([100.0, 110.0, 120.0, 130.0, 140.0]), None, 170.0)
    assert one_sided.cp is None and one_sided.cpk == pytest.approx(c.cpu)
    assert capability(np.array([1.0, 2.0]), None, None) is None


def test_bins_with_user_edges():
    sw = simulate_sweeps(list("ABCDE"), 6e-15, [90.0, 120.0, 150.0, 199.0, 260.0], 1.0, IC_POINTS)
    res = characterise_sweeps(sw, options=LotOptions(bins=(100.0, 150.0, 200.0)))
    assert [(b.label, b.devices) for b in res.bins] == [
        ("<100", ("A",)), ("100-150", ("B",)), ("150-200", ("C", "D")), (">200", ("E",)),
    ]
    assert res.devices["C"].bin == "150-200"


@pytest.mark.parametrize("text", ["100", "200,100", "100,x", "0,100"])
def test_bad_bins_are_input_errors(text):
    with pytest.raises(InputError) as err:
        parse_bins(text)
    assert err.value.key == "--bins"


def test_device_table_loads_and_sets_tomorrows_priors(jig_lot):
    # The table reads back through the board loader, and priors.py turns its ±2σ range
    # into a prior whose sd is the lot's own spread (reconcile.priors docstring).
    from reconcile.engine import compile_board
    from reconcile.inference.priors import build_space

    res = jig_lot["result"]
    text = JIG.read_text().replace('device = "small-npn"', 'device = "lot"')
    board = board_from_text(text + "\n" + res.device_table)
    dev = board.devices["lot"]
    s = res.summary
    assert dev.beta.value == pytest.approx(math.exp(s.ln_beta_mean), rel=1e-5)
    assert dev.IS.value == pytest.approx(s.is_geo_mean, rel=1e-5)
    assert dev.VA.value == 90.0
    space = build_space(compile_board(board))
    sd = dict(zip(space.keys, space.prior_sd, strict=True))
    assert sd["Q1.beta"] == pytest.approx(s.ln_beta_sd, rel=1e-4)
    assert sd["Q1.IS"] == pytest.approx(s.log10_is_sd, rel=1e-4)


# ---------------------------------------------------------------- run, show, plot
def test_run_lot_needs_a_jig_for_jig_readings():
    with pytest.raises(InputError, match="needs the jig board"):
        run_lot(None, JIG_READINGS)


def test_print_and_plot(tmp_path):
    from rich.console import Console

    from reconcile.present.plots_lot import plot_lot
    from reconcile.present.render_lot import print_lot

    res = run_lot(JIG, JIG_READINGS, bins=[100, 150, 200], spec_low=120)
    console = Console(record=True, width=140)
    print_lot(res, console)
    text = console.export_text()
    assert "D009" in text and "outliers" in text and "[devices.lot]" in text and "Cpk" in text
    for r in (res, run_lot(JIG, SWEEPS)):
        out = plot_lot(r, tmp_path / f"{r.mode}.png")
        assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
