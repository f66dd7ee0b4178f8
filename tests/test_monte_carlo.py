"""Design-level Monte Carlo (``solve --samples``).

Outside references, each named again beside its check:

- scipy: the exact binomial interval (``scipy.stats.binomtest(...).proportion_ci``,
  method "exact"), Spearman's rank correlation (``scipy.stats.spearmanr``), and
  ``scipy.stats.norm`` for independently written draws;
- JCGM 100:2008 4.3.7: a tolerance with no distribution stated read as a rectangular
  limit, standard deviation tolerance/√3 (what the priors use);
- mpmath at 40 digits: an independent bias solution (the Thevenin form of
  tests/test_engine_reference.py) and an independent small-signal nodal solve written
  here from the board's netlist with the hybrid-pi partials taken by mpmath.diff.

Tests that compare our code with our own code are named self-consistency checks.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import mpmath
import numpy as np
import pytest
from scipy import constants, stats

from reconcile.analysis.monte_carlo import (
    MAX_SAMPLES,
    binomial_interval,
    design_samples,
    max_samples,
)
from reconcile.engine import compile_board, solve_batch
from reconcile.analysis import monte_carlo
from reconcile.engine.budget import MIB, THROUGHPUT_ROWS, budget
from reconcile.errors import InputError
from reconcile.inference.priors import build_space, prior_draws
from reconcile.model.board_loader import load_board

ROOT = Path(__file__).resolve().parent.parent
PREAMP = ROOT / "sample_data" / "preamp_ce.toml"
sys.path.insert(0, str(ROOT / "tests"))
from test_engine_reference import _mp_bias  # noqa: E402  (the 40-digit bias reference)


@pytest.mark.parametrize(("k", "n"), [(0, 50), (3, 50), (949, 1000), (1000, 1000), (17, 23)])
def test_yield_interval_is_the_exact_binomial_interval(k: int, n: int) -> None:
    # Reference: scipy.stats.binomtest(k, n).proportion_ci(0.95, method="exact")
    # (Clopper–Pearson).
    want = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    low, high = binomial_interval(k, n)
    assert low == pytest.approx(want.low, abs=1e-12)
    assert high == pytest.approx(want.high, abs=1e-12)


def test_resistor_draws_have_the_tolerance_spread() -> None:
    # Reference: JCGM 100:2008 4.3.7 — a ±tolerance limit read as rectangular has
    # standard deviation tolerance/√3; the priors carry it as ln(1 + tol/√3) in ln R.
    board = load_board(PREAMP)
    circuit = compile_board(board)
    space = build_space(circuit)
    x = prior_draws(space, 200_000, np.random.default_rng(7))
    for key in ("RC", "RE1", "R1"):
        j = space.index(key)
        tol = board.resistors[key].tolerance
        assert np.std(x[:, j]) == pytest.approx(math.log1p(tol / math.sqrt(3.0)), rel=0.01)
        assert np.mean(x[:, j]) == pytest.approx(math.log(board.resistors[key].ohms), abs=1e-3)


def test_drivers_are_spearman_rank_correlations() -> None:
    # Reference: scipy.stats.spearmanr on the same draws (redrawn from the same seed).
    board = load_board(PREAMP)
    result = design_samples(board, 3000, seed=11)
    circuit = compile_board(board)
    space = build_space(circuit)
    x = prior_draws(space, 3000, np.random.default_rng(11))
    from reconcile.engine import solve_batch

    sol = solve_batch(circuit, space.to_parameters(x))
    for name in board.spec.targets:
        y = sol.quantity(name)
        for ref, rho in result.drivers[name]:
            want = stats.spearmanr(x[:, space.index(ref)], y).statistic
            assert rho == pytest.approx(want, abs=1e-9)
    # common practice: the collector and emitter resistors set a degenerated stage's gain
    top = {ref for ref, _ in result.drivers["gain"][:2]}
    assert top == {"RC", "RE1"}


def test_chunked_run_equals_one_chunk_self_consistency(monkeypatch) -> None:
    # Self-consistency check: a tiny memory budget (many chunks) gives the same result
    # as the default budget with the throughput cap lifted (one chunk) for the same seed.
    board = load_board(PREAMP)
    default = design_samples(board, 20_000, seed=5)
    assert default.chunk_rows == THROUGHPUT_ROWS
    monkeypatch.setattr(monte_carlo, "THROUGHPUT_ROWS", 10**9)
    whole = design_samples(board, 20_000, seed=5)
    with budget(16 * MIB):
        parts = design_samples(board, 20_000, seed=5)
    assert parts.chunk_rows < 20_000 < whole.chunk_rows
    assert parts.passed == whole.passed
    for name, s in whole.quantities.items():
        for key, value in s.items():
            assert parts.quantities[name][key] == pytest.approx(value, rel=1e-12, abs=1e-15)
            assert default.quantities[name][key] == pytest.approx(value, rel=1e-12, abs=1e-15)


def test_absurd_sample_counts_are_refused() -> None:
    board = load_board(PREAMP)
    with pytest.raises(InputError, match="limit"):
        design_samples(board, MAX_SAMPLES + 1)
    with pytest.raises(InputError, match="at least 1"):
        design_samples(board, 0)
    with budget(16 * MIB):
        limit = max_samples(board)
        assert limit < MAX_SAMPLES
        with pytest.raises(InputError, match="memory budget"):
            design_samples(board, limit + 1)


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "reconcile", *args],
        capture_output=True, text=True, cwd=ROOT, timeout=120,
    )


def test_cli_samples_json_follows_the_contract() -> None:
    out = _run("solve", str(PREAMP), "--samples", "2000", "--seed", "3", "--json")
    assert out.returncode == 0, out.stderr
    assert out.stdout.count("\n") == 1
    data = json.loads(out.stdout)
    s = data["samples"]
    assert {"n", "seed", "yield", "yield_interval", "quantities", "drivers"} <= set(s)
    assert s["n"] == 2000 and s["seed"] == 3
    assert s["yield_interval"][0] <= s["yield"] <= s["yield_interval"][1]
    assert set(s["quantities"]["gain"]) == {"mean", "sd", "p05", "p50", "p95"}
    assert "nodes.b" in s["quantities"] and "nodes.c" in s["quantities"]
    assert {"ref", "rank_correlation"} == set(s["drivers"]["gain"][0])
    assert "nodes" in data and "small_signal" in data  # the plain solve is still there


def test_cli_samples_without_spec_has_null_yield(tmp_path: Path) -> None:
    text = PREAMP.read_text().split("[spec]")[0]
    board = tmp_path / "nospec.toml"
    board.write_text(text)
    out = _run("solve", str(board), "--samples", "500", "--json")
    assert out.returncode == 0, out.stderr
    s = json.loads(out.stdout)["samples"]
    assert s["yield"] is None and s["yield_interval"] is None and s["drivers"] == {}


@pytest.mark.parametrize("n", ["-5", "99999999999"])
def test_cli_bad_sample_count_is_one_line_exit_2(n: str) -> None:
    out = _run("solve", str(PREAMP), "--samples", n, "--json")
    assert out.returncode == 2
    assert out.stdout == ""
    assert out.stderr.count("\n") == 1 and "--samples" in out.stderr
    assert "Traceback" not in out.stderr


# ----------------------------------------------- the high-precision reference loop
def _mp_preamp(board, params, i: int) -> dict[str, float]:
    """Node voltages, gain and input resistance of draw ``i`` of the preamp, from
    mpmath alone: the bias from the Thevenin reference (RE = RE1 + RE2; the input and
    output nodes sit at 0 V through their bleed resistors), then the small-signal nodal
    admittance matrix written here from the netlist, with the transistor's four partial
    derivatives taken by mpmath.diff of the contract's device equations, solved by
    mpmath.lu_solve."""
    refs = list(board.resistors)
    r = {ref: float(params.resistor_ohms[i, k]) for k, ref in enumerate(refs)}
    c = {ref: float(params.capacitor_farads[i, k]) for k, ref in enumerate(board.capacitors)}
    p = {
        "polarity": "npn", "VCC": float(params.supply_volts[i, 0]), "R1": r["R1"],
        "R2": r["R2"], "RC": r["RC"], "RE": r["RE1"] + r["RE2"],
        "IS": float(params.IS[i, 0]), "beta": float(params.beta[i, 0]),
        "beta_r": float(params.beta_r[i, 0]), "VA": float(params.VA[i, 0]),
        "n": float(params.n[i, 0]), "xti": float(params.xti[i, 0]),
        "Eg": float(params.bandgap[i, 0]), "T": float(params.temperature[i]),
    }
    bias = _mp_bias(p)
    with mpmath.workdps(40):
        mpf = mpmath.mpf
        n_vt = mpf(p["n"]) * mpf(constants.k) * mpf(p["T"]) / mpf(constants.e)
        t, t0 = mpf(p["T"]), mpf("298.15")
        is_t = mpf(p["IS"]) * (t / t0) ** mpf(p["xti"]) * mpmath.exp(
            mpf(constants.e) * mpf(p["Eg"]) / mpf(constants.k) * (1 / t0 - 1 / t))
        beta, beta_r, va = mpf(p["beta"]), mpf(p["beta_r"]), mpf(p["VA"])

        def ic(u, w):
            i_f, i_r = is_t * (mpmath.exp(u / n_vt) - 1), is_t * (mpmath.exp(w / n_vt) - 1)
            return (i_f - i_r) * (1 - w / va) - i_r / beta_r

        def ib(u, w):
            i_f, i_r = is_t * (mpmath.exp(u / n_vt) - 1), is_t * (mpmath.exp(w / n_vt) - 1)
            return i_f / beta + i_r / beta_r

        u, w = mpf(bias["u"]), mpf(bias["w"])
        c_u, c_w = mpmath.diff(lambda x: ic(x, w), u), mpmath.diff(lambda x: ic(u, x), w)
        b_u, b_w = mpmath.diff(lambda x: ib(x, w), u), mpmath.diff(lambda x: ib(u, x), w)
        omega = 2 * mpmath.pi * mpf(board.signal.frequency)
        nodes = ["in", "b", "c", "e", "e2", "out"]  # vcc and gnd are AC ground
        k = {name: j for j, name in enumerate(nodes)}
        y = mpmath.matrix(6, 6)

        def admit(a, b, g):
            for x_, s in ((a, 1), (b, -1)):
                if x_ not in k:
                    continue
                for z_, s2 in ((a, 1), (b, -1)):
                    if z_ in k:
                        y[k[x_], k[z_]] += s * s2 * g

        for ref, res in board.resistors.items():
            admit(*res.nodes, 1 / mpf(r[ref]))
        for ref, cap in board.capacitors.items():
            admit(*cap.nodes, 1j * omega * mpf(c[ref]))
        # transistor: ic = c_u*vbe + c_w*vbc, ib = b_u*vbe + b_w*vbc into c and b
        for term, (du, dw) in (("c", (c_u, c_w)), ("b", (b_u, b_w))):
            for node, coeff in (("b", du + dw), ("e", -du), ("c", -dw)):
                y[k[term], k[node]] += coeff
                y[k["e"], k[node]] -= coeff
        y[k["out"], k["out"]] += 1 / mpf(board.signal.load_ohms)
        rhs = mpmath.matrix(6, 1)
        rhs[k["in"]] = 1
        v = mpmath.lu_solve(y, rhs)
        gain = abs(v[k["out"]] / v[k["in"]])
        r_in = abs(v[k["in"]])
    return {
        "gain": float(gain), "input_resistance": float(r_in),
        "nodes.b": bias["b"], "nodes.c": bias["c"], "nodes.e": bias["e"],
    }


@pytest.mark.slow
def test_samples_agree_with_a_high_precision_loop() -> None:
    # Reference: mpmath at 40 digits, one board at a time (see _mp_preamp).
    # (a) The same 300 draws: every percentile agrees to 1e-9 and the yield is the same
    # count. (b) 2 000 independent draws written with scipy.stats.norm from the priors'
    # documented widths (JCGM 100 4.3.7 for the parts, the device ranges as ±2σ) against
    # 2 000 draws of --samples: the yield and the medians agree within sampling error
    # (4 standard errors). (b) checks the draws, not the solver: its independent draws
    # are solved by the engine, which (a) has just matched to the mpmath loop board by
    # board (2 000 more boards through mpmath cost about 13 s and test nothing new).
    board = load_board(PREAMP)
    n, n_same = 2000, 300
    result = design_samples(board, n, seed=21)
    small = design_samples(board, n_same, seed=21)
    circuit = compile_board(board)
    space = build_space(circuit)
    same = space.to_parameters(prior_draws(space, n_same, np.random.default_rng(21)))
    names = ["gain", "input_resistance", "nodes.b", "nodes.c", "nodes.e"]

    def loop(params):
        rows = [_mp_preamp(board, params, i) for i in range(params.n_samples)]
        return {q: np.array([row[q] for row in rows]) for q in names}

    def meets(vals, params):
        ok = np.ones(params.n_samples, dtype=bool)
        for q, target in board.spec.targets.items():
            ok &= (vals[q] >= target.low) & (vals[q] <= target.high)
        vce = vals["nodes.c"] - vals["nodes.e"]
        return ok & (vce >= board.spec.min_vce)

    ref = loop(same)
    for q in names:
        want = np.percentile(ref[q], (5, 50, 95))
        got = [small.quantities[q][k] for k in ("p05", "p50", "p95")]
        np.testing.assert_allclose(got, want, rtol=1e-9)
        assert small.quantities[q]["mean"] == pytest.approx(np.mean(ref[q]), rel=1e-9)
    assert small.passed == int(np.count_nonzero(meets(ref, same)))

    rng = np.random.default_rng(2026)
    base = space.to_parameters(np.repeat(space.prior_mean[None, :], n, axis=0))
    ohms = np.stack([
        board.resistors[r].ohms * np.exp(stats.norm.rvs(
            scale=math.log1p(board.resistors[r].tolerance / math.sqrt(3)), size=n,
            random_state=rng))
        for r in circuit.resistor_refs], axis=1)
    dev = board.device_of("Q1")
    vcc = board.supplies["VCC"]
    farads = np.stack([
        board.capacitors[r].farads * np.exp(stats.norm.rvs(
            scale=math.log1p(board.capacitors[r].tolerance / math.sqrt(3)), size=n,
            random_state=rng))
        for r in circuit.capacitor_refs], axis=1)
    indep = base.with_values(
        resistor_ohms=ohms,
        capacitor_farads=farads,
        supply_volts=(vcc.volts + stats.norm.rvs(
            scale=max(vcc.tolerance / math.sqrt(3), 0.001) * vcc.volts, size=n,
            random_state=rng))[:, None],
        IS=10 ** stats.norm.rvs(
            loc=math.log10(dev.IS.value),
            scale=max(math.log10(dev.IS.high / dev.IS.value),
                      math.log10(dev.IS.value / dev.IS.low)) / 2,
            size=n, random_state=rng)[:, None],
        beta=np.exp(stats.norm.rvs(
            loc=math.log(dev.beta.value),
            scale=max(math.log(dev.beta.high / dev.beta.value),
                      math.log(dev.beta.value / dev.beta.low)) / 2,
            size=n, random_state=rng))[:, None],
        temperature=board.temperature + stats.norm.rvs(scale=3.0, size=n, random_state=rng),
    )
    solved = solve_batch(circuit, indep)
    assert bool(np.all(solved.converged))
    other = {"gain": solved.quantity("gain"),
             "input_resistance": solved.quantity("input_resistance")}
    for node in ("b", "c", "e"):
        other[f"nodes.{node}"] = solved.node_v[:, circuit.node_index(node)]
    p_ref = np.mean(meets(other, indep))
    p = result.yield_fraction
    se = math.sqrt(p * (1 - p) / n + p_ref * (1 - p_ref) / n)
    assert abs(p - p_ref) < 4 * se + 1e-12
    for q in names:
        # standard error of a median: 1.2533·σ/√n for a near-normal spread
        se_med = 1.2533 * math.sqrt(2.0 / n) * np.std(other[q])
        assert abs(result.quantities[q]["p50"] - np.median(other[q])) < 4 * se_med


def test_prior_sampler_self_consistency_with_prior_draws_and_to_parameters() -> None:
    # Self-consistency: the chunked sampler solve --samples draws with gives, value for
    # value, the boards of one prior_draws call turned into parameters by to_parameters
    # (the same generator, chunk after chunk, its buffers reused; a short last chunk).
    from dataclasses import fields

    from reconcile.inference.prior_sampler import PriorSampler

    circuit = compile_board(load_board(ROOT / "sample_data" / "two_stage_npn_pnp.toml"))
    space = build_space(circuit)
    want_x = prior_draws(space, 700, np.random.default_rng(5))
    want = space.to_parameters(want_x)
    sampler, rng = PriorSampler(space, 300), np.random.default_rng(5)
    for start in (0, 300, 600):
        m = min(300, 700 - start)
        x, got = sampler.draw(rng, m)
        assert np.array_equal(x, want_x[start : start + m])
        for f in fields(got):
            if f.name != "extra":
                part = getattr(want, f.name)[start : start + m]
                assert np.array_equal(getattr(got, f.name), part), f.name
