"""Frequency response and corners against outside references.

Outside references, each named again beside its check:

- the first-order RC network, |H| = 1/sqrt(1 + (f_c/f)^2) (high-pass) or
  1/sqrt(1 + (f/f_c)^2) (low-pass) with f_c = 1/(2*pi*R*C): textbook circuit theory
  (Horowitz & Hill, "The Art of Electronics", chapter 1, from memory); exact;
- :mod:`mpmath` at 30 significant digits: an independently written nodal solve of a
  common-emitter stage (its bias from the contract's device equations, its linear
  model from their derivatives, the hybrid-pi capacitances of docs/formats.md §6.3),
  the mid-band peak and both corners found with mpmath's own root-finder;
- the Miller approximation of a common-emitter stage's upper corner (Sedra & Smith,
  "Microelectronic Circuits", the Miller-effect chapter, from memory):
  f_H ≈ 1 / (2π · R_sig' · (Cπ + Cμ·(1 + gm·R_L'))), whose known error is the
  neglected output-side time constant R_L'·Cμ and the second pole.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from boards import capacitor, divider_stage, resistor, table

from reconcile.engine import compile_board, nominal_parameters, solve_batch
from reconcile.engine.sweep import SweepRange, find_corners, sweep
from reconcile.errors import InputError
from reconcile.model.board_loader import board_from_text

SUPPLY = """
[supplies.VCC]
node = "vcc"
volts = 5
[resistors.RBIAS]
nodes = ["vcc", "gnd"]
ohms = "10k"
"""


def _linear(text: str):
    board = board_from_text(text)
    circuit = compile_board(board)
    return solve_batch(circuit, nominal_parameters(circuit)).linear


def _rc_board(kind: str, r: str, c: str, load: str = "inf") -> str:
    if kind == "high-pass":
        parts = f"""
[capacitors.C1]
nodes = ["in", "out"]
farads = "{c}"
[resistors.R1]
nodes = ["out", "gnd"]
ohms = "{r}"
"""
    else:
        parts = f"""
[resistors.R1]
nodes = ["in", "out"]
ohms = "{r}"
[capacitors.C1]
nodes = ["out", "gnd"]
farads = "{c}"
[resistors.RIN]
nodes = ["in", "gnd"]
ohms = "1M"
"""
    return SUPPLY + parts + f"""
[signal]
input = "in"
output = "out"
source_ohms = 50
load_ohms = "{load}"
"""


@pytest.mark.parametrize(("r", "c"), [("10k", "100n"), ("1k", "4u7"), ("47k", "33p"),
                                      ("100", "1000u")])
def test_rc_high_pass_low_corner_is_one_over_two_pi_rc(r: str, c: str) -> None:
    # Reference: first-order high-pass, f_c = 1/(2*pi*R*C) exactly (Horowitz & Hill,
    # from memory); v_out/v_in does not depend on the generator's resistance.
    from reconcile.model.values import parse_value

    rr, cc = parse_value(r, "ohms"), parse_value(c, "farads")
    corners = find_corners(_linear(_rc_board("high-pass", r, c)))
    exact = 1.0 / (2.0 * math.pi * rr * cc)
    assert corners.low_corner[0] == pytest.approx(exact, rel=1e-9)
    assert corners.midband_gain[0] == pytest.approx(1.0, rel=1e-9)
    assert np.isnan(corners.high_corner[0])


def test_rc_high_pass_with_load_uses_the_parallel_resistance() -> None:
    # Reference: the load sits across R, f_c = 1/(2*pi*(R || R_L)*C) (textbook, from memory).
    corners = find_corners(_linear(_rc_board("high-pass", "10k", "1u", load="10k")))
    assert corners.low_corner[0] == pytest.approx(1.0 / (2 * math.pi * 5e3 * 1e-6), rel=1e-9)


@pytest.mark.parametrize(("r", "c"), [("10k", "1n"), ("330", "10u")])
def test_rc_low_pass_high_corner_is_one_over_two_pi_rc(r: str, c: str) -> None:
    # Reference: first-order low-pass, f_c = 1/(2*pi*R*C) exactly (Horowitz & Hill,
    # from memory).
    from reconcile.model.values import parse_value

    rr, cc = parse_value(r, "ohms"), parse_value(c, "farads")
    corners = find_corners(_linear(_rc_board("low-pass", r, c)))
    assert corners.high_corner[0] == pytest.approx(1.0 / (2 * math.pi * rr * cc), rel=1e-9)
    assert np.isnan(corners.low_corner[0])


def test_rc_sweep_points_follow_the_first_order_magnitude_and_phase() -> None:
    # Reference: |H| = 1/sqrt(1 + (f_c/f)^2), arg H = atan(f_c/f) for the high-pass
    # (textbook, from memory); the share of its only capacitor is 1, and the
    # short-circuit time-constant estimate of a one-capacitor network is exact.
    fc = 1.0 / (2 * math.pi * 1e4 * 1e-7)
    result = sweep(_linear(_rc_board("high-pass", "10k", "100n")),
                   SweepRange(1, 1e5, 41).frequencies())
    f = result.frequency
    np.testing.assert_allclose(result.gain, 1 / np.sqrt(1 + (fc / f) ** 2), rtol=1e-10)
    np.testing.assert_allclose(result.gain_phase_deg, np.degrees(np.arctan(fc / f)),
                               rtol=1e-9, atol=1e-9)
    (share,) = result.shares
    assert share.share == pytest.approx(1.0, abs=1e-6)
    assert share.estimate_hz == pytest.approx(fc, rel=1e-7)
    assert result.low_corner_estimate == pytest.approx(result.low_corner, rel=1e-7)


@pytest.mark.parametrize("text", ["10", "10:", "a:1k", "1k:10", "10:1M:1", "10:1M:x",
                                  "0:1k", "10:1M:2:3"])
def test_sweep_range_refuses_bad_text_in_one_line(text: str) -> None:
    with pytest.raises(InputError) as err:
        SweepRange.from_text(text)
    assert "\n" not in str(err.value) and "--sweep" in str(err.value)


def test_sweep_range_reads_value_strings() -> None:
    r = SweepRange.from_text("10:1M:101")
    assert (r.start_hz, r.stop_hz, r.points) == (10.0, 1e6, 101)
    f = r.frequencies()
    assert f[0] == pytest.approx(10.0) and f[-1] == pytest.approx(1e6) and len(f) == 101
    assert f[50] == pytest.approx(10**3.5, rel=1e-12)  # log-spaced: the middle is the geometric mean


# ------------------------------------------------- CE stage against mpmath
CE = dict(vcc=12.0, r1=68e3, r2=15e3, rc=6.8e3, re1=330.0, re2=1.5e3, c_in=4.7e-6,
          c_e=100e-6, c_out=2.2e-6, rs=600.0, rl=47e3, IS=8e-15, beta=180.0, VA=80.0,
          ft=250e6, c_mu=3e-12)


def _ce_text(p: dict) -> str:
    return (
        divider_stage(
            vcc=p["vcc"], r1=p["r1"], r2=p["r2"], rc=p["rc"], re=(p["re1"], p["re2"]),
            device_name="d",
            device_params={k: p[k] for k in ("IS", "beta", "VA", "ft", "c_mu")},
        )
        + capacitor("C_IN", "in", "b", p["c_in"]) + capacitor("CE", "e2", "gnd", p["c_e"])
        + capacitor("C_OUT", "c", "out", p["c_out"])
        + table("signal", input="in", output="out", source_ohms=p["rs"], load_ohms=p["rl"])
    )


def _mp_ce_corners(p: dict) -> tuple[float, float, float]:
    """Peak gain and corners of the CE stage, written out independently in mpmath."""
    mp = mpmath.mp
    with mpmath.workdps(30):
        f = {k: mpmath.mpf(v) for k, v in p.items()}
        vt = mpmath.mpf("1.380649e-23") * mpmath.mpf("298.15") / mpmath.mpf("1.602176634e-19")

        def currents(vbe, vbc):  # contract device model, npn, n = 1, beta_r = 1
            i_f = f["IS"] * (mpmath.exp(vbe / vt) - 1)
            i_r = f["IS"] * (mpmath.exp(vbc / vt) - 1)
            ic = (i_f - i_r) * (1 - vbc / f["VA"]) - i_r
            ib = i_f / f["beta"] + i_r
            return ic, ib

        def kcl(vb, vc, ve, ve2):
            ic, ib = currents(vb - ve, vb - vc)
            return [
                (f["vcc"] - vb) / f["r1"] - vb / f["r2"] - ib,
                (f["vcc"] - vc) / f["rc"] - ic,
                ic + ib - (ve - ve2) / f["re1"],
                (ve - ve2) / f["re1"] - ve2 / f["re2"],
            ]

        vb0 = f["vcc"] * f["r2"] / (f["r1"] + f["r2"])
        ie0 = (vb0 - mpmath.mpf("0.65")) / (f["re1"] + f["re2"])
        vb, vc, ve, ve2 = mpmath.findroot(
            kcl, (vb0, f["vcc"] - ie0 * f["rc"], vb0 - mpmath.mpf("0.65"), ie0 * f["re2"]))
        vbe, vbc = vb - ve, vb - vc
        d_be = mpmath.diff(lambda u: currents(u, vbc)[0], vbe)
        d_bc = mpmath.diff(lambda w: currents(vbe, w)[0], vbc)
        b_be = mpmath.diff(lambda u: currents(u, vbc)[1], vbe)
        b_bc = mpmath.diff(lambda w: currents(vbe, w)[1], vbc)
        gm = d_be + d_bc  # dIC/dVBE at fixed VCE, as the contract defines gm
        c_pi = gm / (2 * mpmath.pi * f["ft"]) - f["c_mu"]
        # free nodes: in, b, c, e, e2, out
        names = ["in", "b", "c", "e", "e2", "out"]
        ix = {n: i for i, n in enumerate(names)}

        def gain(freq):
            s = 2j * mpmath.pi * freq
            y = mpmath.matrix(6, 6)

            def two(a, b, adm):
                for n1, n2, sign in ((a, a, 1), (b, b, 1), (a, b, -1), (b, a, -1)):
                    if n1 in ix and n2 in ix:
                        y[ix[n1], ix[n2]] += sign * adm

            two("b", "gnd", 1 / f["r1"] + 1 / f["r2"])
            two("c", "gnd", 1 / f["rc"])
            two("e", "e2", 1 / f["re1"])
            two("e2", "gnd", 1 / f["re2"] + s * f["c_e"])
            two("in", "b", s * f["c_in"])
            two("c", "out", s * f["c_out"])
            two("out", "gnd", 1 / f["rl"])
            two("b", "c", s * f["c_mu"])
            two("b", "e", s * c_pi)
            # linearised device: ic = d_be*vbe + d_bc*vbc into c, ib likewise into b,
            # -(ic + ib) into e; vbe = vb - ve, vbc = vb - vc
            for node, (g_be, g_bc) in (("c", (d_be, d_bc)), ("b", (b_be, b_bc)),
                                       ("e", (-(d_be + b_be), -(d_bc + b_bc)))):
                r = ix[node]
                y[r, ix["b"]] += g_be + g_bc
                y[r, ix["e"]] -= g_be
                y[r, ix["c"]] -= g_bc
            rhs = mpmath.matrix(6, 1)
            rhs[ix["in"]] = 1
            v = mpmath.lu_solve(y, rhs)
            return abs(v[ix["out"]] / v[ix["in"]])

        # the peak: golden-section search in log10 f over a bracket from a coarse scan
        xs = [mpmath.mpf(k) / 4 for k in range(-4, 40)]
        gs = [gain(mpmath.mpf(10) ** x) for x in xs]
        k = max(range(len(gs)), key=lambda i: gs[i])
        a, b = xs[k - 1], xs[k + 1]
        r = (mpmath.sqrt(5) - 1) / 2
        for _ in range(90):
            c1, d1 = b - r * (b - a), a + r * (b - a)
            if gain(mpmath.mpf(10) ** c1) >= gain(mpmath.mpf(10) ** d1):
                b = d1
            else:
                a = c1
        peak = gain(mpmath.mpf(10) ** ((a + b) / 2))
        target = peak / mpmath.sqrt(2)

        def h(x):
            return gain(mpmath.mpf(10) ** x) - target

        lo_i = max(i for i in range(k) if gs[i] < target)
        hi_i = min(i for i in range(k, len(gs)) if gs[i] < target)
        low = mpmath.findroot(h, (xs[lo_i], xs[lo_i + 1]), solver="anderson")
        high = mpmath.findroot(h, (xs[hi_i - 1], xs[hi_i]), solver="anderson")
        return float(peak), float(mpmath.mpf(10) ** low), float(mpmath.mpf(10) ** high)
    del mp


@pytest.mark.parametrize("variant", [{}, {"rs": 10e3, "c_mu": 8e-12, "ft": 80e6},
                                     {"c_e": 22e-6, "c_in": 1e-6, "rl": 4.7e3}])
def test_ce_stage_corners_match_an_independent_mpmath_solve(variant: dict) -> None:
    # Reference: mpmath at 30 digits, the stage written out independently (see
    # _mp_ce_corners); mid-band gain and both corners to 1e-6 relative.
    p = dict(CE, **variant)
    peak, low, high = _mp_ce_corners(p)
    corners = find_corners(_linear(_ce_text(p)))
    assert corners.midband_gain[0] == pytest.approx(peak, rel=1e-6)
    assert corners.low_corner[0] == pytest.approx(low, rel=1e-6)
    assert corners.high_corner[0] == pytest.approx(high, rel=1e-6)


# ------------------------------------------------- Miller approximation
def test_ce_upper_corner_against_the_miller_approximation() -> None:
    # Reference: Miller approximation (Sedra & Smith, from memory),
    # f_H ≈ 1/(2π·R_sig'·(Cπ + Cμ(1 + gm·R_L'))), R_sig' = R_S || R_B || rπ,
    # R_L' = RC || R_L || ro. Its known error: it drops the output-side time constant
    # R_L'·Cμ (the open-circuit time-constant sum keeps it) and the second pole, so it
    # overestimates f_H by about that term's share of the total; we allow that share
    # plus 3 %.
    text = (
        resistor("RS", "in", "b", "4k7")
        + divider_stage(vcc=12, r1="68k", r2="15k", rc="3k3", re="1k5", device_name="d",
                        device_params={"IS": "8f", "beta": 180, "VA": 80, "ft": "300M",
                                       "c_mu": "4p"})
        + capacitor("CE", "e", "gnd", "1")
        + table("signal", input="in", output="c", load_ohms="10k")
    )
    board = board_from_text(text)
    circuit = compile_board(board)
    sol = solve_batch(circuit, nominal_parameters(circuit))
    gm, rpi, ro = sol.gm[0, 0], sol.rpi[0, 0], sol.ro[0, 0]
    c_mu = 4e-12
    c_pi = gm / (2 * math.pi * 300e6) - c_mu
    par = lambda *rs: 1.0 / sum(1.0 / r for r in rs)  # noqa: E731
    r_sig = par(4.7e3, 68e3, 15e3, rpi)
    r_load = par(3.3e3, 10e3, ro)
    miller_tau = r_sig * (c_pi + c_mu * (1 + gm * r_load))
    f_miller = 1.0 / (2 * math.pi * miller_tau)
    neglected = r_load * c_mu / (miller_tau + r_load * c_mu)
    high = find_corners(sol.linear).high_corner[0]
    print(f"engine {high:.6g} Hz, Miller {f_miller:.6g} Hz, neglected share {neglected:.3f}")
    assert high <= f_miller * 1.03
    assert abs(high / f_miller - 1.0) <= neglected + 0.01
