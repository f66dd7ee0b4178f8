"""The optional compiled kernel (numba, the ``[fast]`` extra).

Skipped when numba is not installed. Outside references, each named beside its check:
mpmath at 40 digits (the independent Thevenin bias solution of
tests/test_engine_reference.py) and numpy.linalg.solve (LAPACK) for the dense solver.
Comparisons of the compiled path with the numpy path are self-consistency checks.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import numpy as np
import pytest

numba = pytest.importorskip("numba")

from reconcile.engine import compile_board, kernel, nominal_parameters, solve_batch  # noqa: E402
from reconcile.inference.priors import build_space, prior_draws  # noqa: E402
from reconcile.model.board_loader import board_from_text, load_board  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests"))
from test_engine_reference import _BASE, BIAS_CASES, _mp_bias, _stage_toml  # noqa: E402

pytestmark = pytest.mark.slow  # the first run compiles the kernel (seconds)


def _rel(a: float, b: float) -> float:
    return abs(a - b) / max(abs(b), 1e-300)


@pytest.mark.parametrize("name", list(BIAS_CASES))
def test_compiled_path_matches_mpmath_bias(name: str, monkeypatch) -> None:
    # Reference: mpmath.findroot at 40 digits on the Thevenin form (_mp_bias), for a
    # batch of variants of each case solved by the compiled kernel from a warm start.
    # Agreement to 1e-9 relative, as the numpy path's own reference test.
    monkeypatch.setenv(kernel.ENV, "numba-all")
    p0 = {**_BASE, **BIAS_CASES[name]}
    circuit = compile_board(board_from_text(_stage_toml(p0)))
    seed = solve_batch(circuit, nominal_parameters(circuit, 1)).state
    factors = [(0.9, 0.5), (1.0, 1.0), (1.1, 2.0), (0.95, 4.0), (1.05, 0.25)]
    params = nominal_parameters(circuit, len(factors))
    refs = list(circuit.resistor_refs)
    ohms = params.resistor_ohms.copy()
    is_ = params.IS.copy()
    for i, (fr, fi) in enumerate(factors):
        ohms[i, refs.index("RC")] *= fr
        ohms[i, refs.index("R1")] /= fr
        is_[i, 0] *= fi
    params = params.with_values(resistor_ohms=ohms, IS=is_)
    sol = solve_batch(circuit, params, seed)
    assert bool(np.all(sol.converged))
    for i, (fr, fi) in enumerate(factors):
        p = {**p0, "RC": p0["RC"] * fr, "R1": p0["R1"] / fr, "IS": p0["IS"] * fi}
        ref = _mp_bias(p)
        for node in ("b", "c", "e"):
            assert _rel(float(sol.voltage(node)[i]), ref[node]) < 1e-9, (node, i)
        assert _rel(float(sol.ic[i, 0]), ref["ic"]) < 1e-9


@pytest.mark.parametrize("board", ["preamp_ce", "two_stage_npn_pnp", "line_receiver_cb"])
def test_compiled_and_numpy_paths_agree_self_consistency(board: str, monkeypatch) -> None:
    # Self-consistency check: the compiled kernel and the numpy path on the same 3 000
    # prior draws give the same operating points (to 1e-12 V), the same small signal (to
    # 1e-11 relative) and the same Newton iteration counts.
    circuit = compile_board(load_board(ROOT / "sample_data" / f"{board}.toml"))
    space = build_space(circuit)
    params = space.to_parameters(prior_draws(space, 3000, np.random.default_rng(4)))
    seed = solve_batch(circuit, nominal_parameters(circuit, 1)).state
    out = {}
    for mode in ("numba-all", "numpy"):
        monkeypatch.setenv(kernel.ENV, mode)
        out[mode.split("-")[0]] = solve_batch(circuit, params, seed)
    a, b = out["numba"], out["numpy"]
    assert np.array_equal(a.converged, b.converged)
    np.testing.assert_allclose(a.node_v, b.node_v, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(a.state.iterations, b.state.iterations)
    for q in ("gain", "input_resistance", "output_resistance"):
        np.testing.assert_allclose(a.quantity(q), b.quantity(q), rtol=1e-11)
    assert float(np.max(a.kcl_residual)) < 1e-12


def test_compiled_small_signal_matches_mpmath_corners(monkeypatch) -> None:
    # Reference: the common-emitter stage written out independently in mpmath at 30
    # digits (tests/test_sweep_reference.py, _mp_ce_corners): mid-band gain and both
    # -3 dB corners to 1e-6 relative, every AC solve on the compiled two-port kernel.
    from test_sweep_reference import test_ce_stage_corners_match_an_independent_mpmath_solve

    monkeypatch.setenv(kernel.ENV, "numba-all")
    calls = []
    compiled = kernel.two_port
    monkeypatch.setattr(kernel, "two_port", lambda *a: calls.append(1) or compiled(*a))
    test_ce_stage_corners_match_an_independent_mpmath_solve({"rs": 10e3, "c_mu": 8e-12,
                                                             "ft": 80e6})
    assert calls


@pytest.mark.parametrize("dtype", [float, complex])
def test_dense_solver_matches_lapack(dtype, monkeypatch) -> None:
    # Reference: numpy.linalg.solve (LAPACK gesv) on random well-conditioned systems,
    # real and complex, two right-hand sides; a singular system gives NaN.
    monkeypatch.setenv(kernel.ENV, "numba-all")
    rng = np.random.default_rng(9)
    a = rng.standard_normal((400, 7, 7)) + 7.0 * np.eye(7)
    b = rng.standard_normal((400, 7, 2))
    if dtype is complex:
        a = a + 1j * rng.standard_normal(a.shape)
        b = b + 1j * rng.standard_normal(b.shape)
    a[3] = 0.0
    got = kernel.solve_small(a, b)
    keep = np.ones(400, dtype=bool)
    keep[3] = False
    want = np.linalg.solve(a[keep], b[keep])
    np.testing.assert_allclose(got[keep], want, rtol=1e-12, atol=1e-13)
    assert np.all(np.isnan(got[3]))


def test_cache_lives_in_the_user_cache_folder() -> None:
    # common practice: compiled caches go in the platform's per-user cache folder
    from platformdirs import user_cache_dir

    assert kernel.available()
    assert kernel.cache_dir().startswith(user_cache_dir("reconcile"))
    # the folder numba uses is ours unless the user chose one with NUMBA_CACHE_DIR
    assert numba.config.CACHE_DIR == os.environ["NUMBA_CACHE_DIR"]


def test_batch_size_rule(monkeypatch) -> None:
    monkeypatch.delenv(kernel.ENV, raising=False)
    assert not kernel.use_compiled(10**7)  # the numpy path is the default
    monkeypatch.setenv(kernel.ENV, "numba")
    assert kernel.use_compiled(kernel.COMPILED_FROM_BATCH)
    assert not kernel.use_compiled(kernel.COMPILED_FROM_BATCH - 1)
    monkeypatch.setenv(kernel.ENV, "numba-all")
    assert kernel.use_compiled(1)
    monkeypatch.setenv(kernel.ENV, "fortran")
    from reconcile.errors import InputError

    with pytest.raises(InputError, match="RECONCILE_KERNEL"):
        kernel.use_compiled(1)


@pytest.mark.parametrize("load", ['load_ohms = "47k"', ""])
def test_compiled_two_port_closing_agrees_with_numpy_self_consistency(load, monkeypatch) -> None:
    # Self-consistency check: the two-port closed in the compiled kernel (gain, its
    # phase, source gain, input and output resistance) against the numpy closing, on
    # the same 2 000 prior draws of the preamp, with its load and with none (inf).
    text = (ROOT / "sample_data" / "preamp_ce.toml").read_text()
    circuit = compile_board(board_from_text(text.replace('load_ohms = "47k"', load)))
    space = build_space(circuit)
    params = space.to_parameters(prior_draws(space, 2000, np.random.default_rng(8)))
    assert np.all(np.isfinite(params.load_ohms)) == bool(load)
    out = {}
    for mode in ("numba-all", "numpy"):
        monkeypatch.setenv(kernel.ENV, mode)
        out[mode] = solve_batch(circuit, params).small_signal
    for q in ("gain", "source_gain", "input_resistance", "output_resistance"):
        np.testing.assert_allclose(getattr(out["numba-all"], q), getattr(out["numpy"], q),
                                   rtol=1e-11, err_msg=q)
    np.testing.assert_allclose(out["numba-all"].gain_phase_deg, out["numpy"].gain_phase_deg,
                               rtol=0, atol=1e-9)
