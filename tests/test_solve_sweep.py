"""``reconcile solve --sweep`` and the ``[spec]`` corner limits, through the command line.

The corner values are checked against the first-order RC formula f = 1/(2πRC)
(Horowitz & Hill, from memory); the engine's own corners are checked against an
independent mpmath solve in tests/test_sweep_reference.py. Where a test compares the
command's output with the library call it is a self-consistency check and says so."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from cli_support import run_cli
from test_sweep_reference import _rc_board
from typer.testing import CliRunner

from reconcile.cli import app
from reconcile.engine.solution import check_corners, solve
from reconcile.model.board_loader import board_from_text, load_board

RUNNER = CliRunner()


def _write(tmp_path, text: str):
    p = tmp_path / "board.toml"
    p.write_text(text, encoding="utf-8")
    return p


def _rc_with_spec(spec: str) -> str:
    # R = 10 kΩ, C = 100 nF: f = 1/(2π·1e-3 s) = 159.15 Hz
    return _rc_board("high-pass", "10k", "100n") + "\n[spec]\n" + spec


def test_sweep_json_has_the_contract_keys_and_the_rc_corner(tmp_path) -> None:
    board = _write(tmp_path, _rc_board("high-pass", "10k", "100n"))
    run = RUNNER.invoke(app, ["solve", str(board), "--sweep", "1:100k:41", "--json"])
    assert run.exit_code == 0, run.output
    sw = json.loads(run.stdout)["sweep"]
    # docs/formats.md §6.4
    assert {"points", "midband_gain", "low_corner", "high_corner"} <= set(sw)
    assert len(sw["points"]) == 41
    assert set(sw["points"][0]) >= {"frequency", "gain", "gain_phase_deg",
                                    "input_resistance", "output_resistance"}
    f = [p["frequency"] for p in sw["points"]]
    assert f[0] == pytest.approx(1.0) and f[-1] == pytest.approx(1e5)
    assert np.allclose(np.diff(np.log10(f)), 5 / 40)  # log-spaced: 5 decades, 40 steps
    # Reference: first-order high-pass corner 1/(2πRC) (Horowitz & Hill, from memory)
    assert sw["low_corner"] == pytest.approx(1.0 / (2 * math.pi * 1e4 * 1e-7), rel=1e-9)
    assert sw["high_corner"] is None  # no capacitance on the way up: no corner (null)
    # Reference: the same first-order magnitude |H| = (f/fc)/sqrt(1 + (f/fc)²)
    fc = sw["low_corner"]
    for p in sw["points"][::10]:
        x = p["frequency"] / fc
        assert p["gain"] == pytest.approx(x / math.sqrt(1 + x * x), rel=1e-9)


@pytest.mark.parametrize(("limit", "met"), [("200", True), ("150", False)])
def test_low_corner_spec_is_checked_against_the_rc_corner(tmp_path, limit, met) -> None:
    # 159.15 Hz (1/(2πRC), Horowitz & Hill, from memory) meets max = 200 Hz, misses 150 Hz.
    board = _write(tmp_path, _rc_with_spec(f'low_corner = {{ max = "{limit}" }}\n'))
    run = RUNNER.invoke(app, ["solve", str(board), "--json"])
    assert run.exit_code == 0, run.output
    out = json.loads(run.stdout)
    check = out["spec"]["low_corner"]
    assert check["value"] == pytest.approx(159.154943, rel=1e-6)
    assert check["met"] is met
    assert out["meets_spec"] is met
    lim = float(limit)
    assert check["margin"] == pytest.approx((lim - check["value"]) / lim)


def test_high_corner_spec_without_device_capacitance_warns_that_it_tells_nothing(
        tmp_path) -> None:
    board = _write(tmp_path, _rc_with_spec('high_corner = { min = "20k" }\n'))
    sol = solve(load_board(board))
    (check,) = [c for c in sol.spec_checks if c.quantity == "high_corner"]
    assert check.met and math.isinf(check.value)
    assert any(w.startswith("high_corner:") for w in sol.warnings)


def test_corner_checks_of_a_dc_coupled_board_meet_a_low_corner_limit() -> None:
    board = board_from_text(_rc_with_spec('low_corner = { max = "10" }\n'))
    (check,) = check_corners(board, math.nan, math.nan)  # no low corner: flat to DC
    assert check.met and check.value == 0.0


def test_sweep_human_output_shows_corners_shares_and_a_text_bode(tmp_path) -> None:
    board = _write(tmp_path, _rc_board("high-pass", "10k", "100n"))
    run = RUNNER.invoke(app, ["solve", str(board), "--sweep", "1:100k:200"], env={"COLUMNS": "80"})
    assert run.exit_code == 0, run.output
    assert "low −3 dB corner" in run.stdout and "159.2 Hz" in run.stdout
    assert "What sets the low corner" in run.stdout and "C1" in run.stdout
    assert "13 of 200 points" in run.stdout
    assert "against frequency" in run.stdout and "*" in run.stdout
    assert max(len(line) for line in run.stdout.splitlines()) <= 80


def test_sweep_plot_is_written(tmp_path) -> None:
    board = _write(tmp_path, _rc_board("high-pass", "10k", "100n"))
    out = tmp_path / "bode.png"
    run = RUNNER.invoke(app, ["solve", str(board), "--sweep", "1:100k", "--plot", str(out)])
    assert run.exit_code == 0, run.output
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize(("args", "needle"), [
    (["--sweep", "100:10"], "--sweep"),
    (["--sweep", "1:1k:1"], "POINTS"),
    (["--sweep", "1:1k", "--plot", "bode.gif"], "--plot"),
    (["--plot", "bode.png"], "--sweep"),
])
def test_bad_sweep_options_are_one_line_exit_2(tmp_path, args, needle) -> None:
    board = _write(tmp_path, _rc_board("high-pass", "10k", "100n"))
    run = run_cli("solve", str(board), *args)
    assert run.exit_code == 2, run.stderr
    assert run.crash is None
    lines = run.message_lines
    assert len(lines) == 1 and needle in lines[0]
    assert run.stdout == ""


def test_sweep_of_a_board_without_signal_names_the_file(tmp_path) -> None:
    board = Path(__file__).resolve().parents[1] / "sample_data" / "lot_jig.toml"  # no [signal]
    run = run_cli("solve", str(board), "--sweep", "1:1k")
    assert run.exit_code == 2 and run.crash is None
    assert "lot_jig.toml" in run.stderr and "[signal]" in run.stderr
    assert len(run.message_lines) == 1


def test_sweep_command_matches_the_library_sweep_self_consistency(tmp_path) -> None:
    board = _write(tmp_path, _rc_board("high-pass", "10k", "100n"))
    run = RUNNER.invoke(app, ["solve", str(board), "--sweep", "10:10k:7", "--json"])
    lib = solve(load_board(board)).sweep(np.logspace(1, 4, 7)).to_dict()
    for got, want in zip(json.loads(run.stdout)["sweep"]["points"], lib["points"], strict=True):
        assert got == pytest.approx(want, rel=1e-12)


def test_sweep_result_has_a_one_line_repr_and_a_report(capsys) -> None:
    board = board_from_text(_rc_board("high-pass", "10k", "100n"))
    sw = solve(board).sweep(np.logspace(0, 5, 11))
    text = repr(sw)
    # 1/(2πRC) = 159.15 Hz (Horowitz & Hill, from memory), shown to three digits
    assert "\n" not in text and "159 Hz" in text and "11 points" in text
    sw.report()
    assert "low −3 dB corner" in capsys.readouterr().out
