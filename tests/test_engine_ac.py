"""The AC model: device capacitances, probe loading, batching over frequencies.

Outside references: first-order network algebra (Horowitz & Hill, "The Art of
Electronics", chapter 1, from memory) for the probe-loaded RC network; the hybrid-pi
relation 2π·ft = gm/(Cπ + Cμ) (Sedra & Smith, "Microelectronic Circuits", from memory),
with gm from an mpmath solve and mpmath.diff, never from the engine.
The other checks compare the engine with itself and are named self-consistency checks.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from scipy import constants

from reconcile.engine import compile_board, nominal_parameters, solve_batch
from reconcile.errors import InputErrors
from reconcile.model.board_loader import board_from_text, load_board

from tests.test_engine_reference import MP_DIGITS, _mp_bias, _mp_is_t
from tests.test_sweep_reference import CE, _ce_text

SAMPLES = ("preamp_ce", "line_receiver_cb", "two_stage_npn_pnp", "sensor_preamp")


def _solved(text: str, n: int = 1):
    board = board_from_text(text)
    circuit = compile_board(board)
    return solve_batch(circuit, nominal_parameters(circuit, n))


def test_probe_loads_the_signal_nodes_as_a_parallel_rc() -> None:
    # Reference: high-pass C1 into R1 || Rp || Cp at the output, H = sRC/(1 + sR(C + Cp)),
    # R = R1 || Rp (first-order network algebra, from memory); the probe on the
    # input node is driven by v_in and does not change v_out/v_in.
    text = """
[supplies.VCC]
node = "vcc"
volts = 5
[resistors.RB]
nodes = ["vcc", "gnd"]
ohms = "10k"
[capacitors.C1]
nodes = ["in", "out"]
farads = "100n"
[resistors.R1]
nodes = ["out", "gnd"]
ohms = "10k"
[signal]
input = "in"
output = "out"
[bench]
probe = { ohms = "1M", farads = "100p" }
"""
    lin = _solved(text).linear
    f = np.array([10.0, 159.0, 1e3, 1e5, 1e7])
    s = 2j * np.pi * f
    r = 1.0 / (1 / 10e3 + 1 / 1e6)
    expected = np.abs(s * r * 100e-9 / (1 + s * r * (100e-9 + 100e-12)))
    np.testing.assert_allclose(lin.response(f).gain[0], expected, rtol=1e-10)


def test_probe_keys_are_checked() -> None:
    base = '[supplies.V]\nnode = "v"\nvolts = 1\n[resistors.R]\nnodes = ["v", "gnd"]\nohms = 1\n'
    for bad in ('probe = { ohms = "10 V" }', 'probe = { volts = 1 }', 'probe = 3',
                'probe = { farads = "-1p" }'):
        with pytest.raises(InputErrors) as err:
            board_from_text(base + "[bench]\n" + bad + "\n")
        assert "bench.probe" in str(err.value)


def test_pi_capacitance_follows_the_transition_frequency() -> None:
    # Reference: 2π·ft = gm/(Cπ + Cμ) of the hybrid-pi model (Sedra & Smith, from memory),
    # with gm found without the engine: the bias point of the mpmath Thevenin solve at
    # 40 digits (tests/test_engine_reference._mp_bias) and gm = dIC/dVBE at fixed VCE by
    # mpmath.diff of the contract's device equations there.
    sol = _solved(_ce_text(CE))
    dev = sol.linear.params
    p = {"polarity": "npn", "VCC": CE["vcc"], "R1": CE["r1"], "R2": CE["r2"], "RC": CE["rc"],
         "RE": CE["re1"] + CE["re2"], "IS": CE["IS"], "beta": CE["beta"], "VA": CE["VA"],
         "beta_r": float(dev.beta_r[0, 0]), "n": float(dev.n[0, 0]),
         "xti": float(dev.xti[0, 0]), "Eg": float(dev.bandgap[0, 0]),
         "T": float(dev.temperature[0])}
    bias = _mp_bias(p)
    with mpmath.workdps(MP_DIGITS):
        mpf = mpmath.mpf
        n_vt = mpf(p["n"]) * mpf(constants.k) * mpf(p["T"]) / mpf(constants.e)
        is_t = _mp_is_t(p["IS"], p["T"], p["xti"], p["Eg"])

        def ic(u, w):
            i_f, i_r = is_t * (mpmath.exp(u / n_vt) - 1), is_t * (mpmath.exp(w / n_vt) - 1)
            return (i_f - i_r) * (1 - w / mpf(p["VA"])) - i_r / mpf(p["beta_r"])

        u, w = mpf(bias["u"]), mpf(bias["w"])
        gm = mpmath.diff(lambda x: ic(u + x, w + x), 0)  # VBE and VBC move together
        c_pi = gm / (2 * mpmath.pi * mpf(CE["ft"])) - mpf(CE["c_mu"])
    assert float(c_pi) > 0
    assert sol.linear.c_pi()[0, 0] == pytest.approx(float(c_pi), rel=1e-9)


def test_without_ft_and_c_mu_nothing_changes_self_consistency() -> None:
    # Self-consistency check: a board without device capacitances gives the same
    # response as the signal-frequency solve of a board at that frequency.
    p = dict(CE)
    text = _ce_text(p).replace(f"ft = {p['ft']}\n", "").replace(f"c_mu = {p['c_mu']}\n", "")
    lin = _solved(text).linear
    for f in (20.0, 1e3, 1e8):
        sig = _solved(text.replace('[signal]\n', f'[signal]\nfrequency = {f}\n'))
        assert lin.response(np.array([f])).gain[0, 0] == pytest.approx(
            sig.small_signal.gain[0], rel=1e-12)


@pytest.mark.parametrize("name", SAMPLES)
def test_chunks_of_samples_and_frequencies_self_consistency(name: str, monkeypatch) -> None:
    # Self-consistency check: (samples x frequencies) in one call, cut into chunks of
    # 7 rows (as a small memory budget would), equals one frequency at a time.
    from reconcile.engine import small_signal

    assert small_signal.rows_per_chunk(small_signal.bytes_per_row(
        compile_board(load_board(f"sample_data/{name}.toml")))) > 1000  # default budget
    monkeypatch.setattr(small_signal, "rows_per_chunk", lambda *a, **k: 7)
    board = load_board(f"sample_data/{name}.toml")
    circuit = compile_board(board)
    params = nominal_parameters(circuit, 5)
    rng = np.random.default_rng(1)
    params = params.with_values(
        resistor_ohms=params.resistor_ohms * rng.uniform(0.9, 1.1, params.resistor_ohms.shape))
    lin = solve_batch(circuit, params).linear
    f = np.logspace(0, 7, 23)
    chunked = lin.response(f)
    for j in (0, 11, 22):
        one = lin.response(f[j:j + 1])
        np.testing.assert_allclose(chunked.gain[:, j], one.gain[:, 0], rtol=1e-12)
        np.testing.assert_allclose(chunked.input_resistance[:, j], one.input_resistance[:, 0],
                                   rtol=1e-12)
    per_sample = lin.response(np.tile(f[None, 3:4], (5, 1)))
    np.testing.assert_allclose(per_sample.gain[:, 0], chunked.gain[:, 3], rtol=1e-12)
