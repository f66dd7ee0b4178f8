"""The command line: one JSON object on stdout, one-line errors with exit code 2."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_data"


def run(*args: str, cwd: Path = ROOT) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "reconcile", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        timeout=120,
    )


@pytest.mark.parametrize("board", ["line_receiver_cb", "preamp_ce", "two_stage_npn_pnp"])
def test_solve_json_is_one_object(board):
    out = run("solve", str(SAMPLES / f"{board}.toml"), "--json")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert set(data) >= {"nodes", "transistors", "supplies", "small_signal"}
    assert out.stdout.count("\n") == 1
    for q in data["transistors"].values():
        assert q["region"] == "forward-active"


def test_solve_human_output_has_tables():
    out = run("solve", str(SAMPLES / "line_receiver_cb.toml"))
    assert out.returncode == 0, out.stderr
    assert "Node voltages" in out.stdout and "Small signal" in out.stdout


def test_fit_json_contract_keys():
    out = run(
        "fit",
        str(SAMPLES / "line_receiver_cb.toml"),
        str(SAMPLES / "line_receiver_built.csv"),
        "--json",
    )
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert {"parameters", "readings", "chi_square", "dof", "predicted"} <= set(data)
    assert {"value", "stderr", "nominal", "unit", "informed_by"} <= set(data["parameters"]["R1"])
    assert "Q1.IS" in data["parameters"] and "Q1.beta" in data["parameters"]
    assert data["readings"][0].keys() >= {
        "quantity",
        "at",
        "measured",
        "predicted",
        "uncertainty",
        "normalized_residual",
    }
    # "error budget" is the trade's name; the version-1 key stays readable for one version
    assert data["error_budget"] and data["miss_budget"] == data["error_budget"]
    assert {"target", "fitted", "total", "design", "parts"} <= set(data["error_budget"]["gain"])


def test_bad_board_is_one_line_exit_2(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(
        '[supplies.VCC]\nnode = "vcc"\nvolts = "5"\n'
        '[resistors.R1]\nnodes = ["vcc", "b"]\nohms = "10 V"\n'
    )
    out = run("solve", str(bad))
    assert out.returncode == 2
    assert "Traceback" not in out.stderr
    assert len(out.stderr.strip().splitlines()) == 1
    assert "bad.toml" in out.stderr and "R1" in out.stderr


def test_missing_file_is_exit_2():
    out = run("solve", "no-such-board.toml")
    assert out.returncode == 2
    assert "no-such-board.toml" in out.stderr and "Traceback" not in out.stderr


def test_bad_readings_row_names_line(tmp_path):
    bad = tmp_path / "r.csv"
    bad.write_text("quantity,at,value,unit\nvoltage,b,1.2,V\nvoltage,b,abc,V\n")
    out = run("fit", str(SAMPLES / "line_receiver_cb.toml"), str(bad))
    assert out.returncode == 2
    assert "r.csv:3" in out.stderr and "Traceback" not in out.stderr


def test_lot_jig_json_contract(tmp_path):
    out = run(
        "lot",
        str(SAMPLES / "lot_jig.toml"),
        str(SAMPLES / "lot_jig_readings.csv"),
        "--json",
        "--plot",
        str(tmp_path / "lot.png"),
    )
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert {"devices", "summary", "outliers"} <= set(data)
    assert {"mean", "sd", "p05", "p50", "p95"} <= set(data["summary"]["beta"])
    assert {"geo_mean", "log10_sd"} <= set(data["summary"]["IS"])
    assert (tmp_path / "lot.png").stat().st_size > 10_000


def test_lot_bad_option_is_exit_2():
    out = run("lot", str(SAMPLES / "lot_sweep.csv"), "--current", "1 V")
    assert out.returncode == 2 and "--current" in out.stderr


@pytest.mark.slow
def test_trim_json_contract_and_design_mode():
    out = run(
        "trim", str(SAMPLES / "line_receiver_cb.toml"), str(SAMPLES / "line_receiver_built.csv"),
        "--json", "--samples", "2000",
    )
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert {"baseline", "options"} <= set(data)
    best = data["options"][0]
    assert {"changes", "predicted", "meets_spec", "yield"} <= set(best)
    assert best["changes"][0]["action"] in ("replace", "parallel")
    design = run("trim", str(SAMPLES / "preamp_ce.toml"), "--json", "--samples", "500")
    assert design.returncode == 0, design.stderr
    assert json.loads(design.stdout)["mode"] == "design"


def test_diagnose_json_contract():
    out = run(
        "diagnose",
        str(SAMPLES / "line_receiver_cb.toml"),
        str(SAMPLES / "line_receiver_built.csv"),
        "--json",
    )
    assert out.returncode == 0, out.stderr
    hyps = json.loads(out.stdout)["hypotheses"]
    assert {"ref", "fault", "value", "chi_square", "probability"} <= set(hyps[0])
    assert abs(sum(h["probability"] for h in hyps) - 1.0) < 1e-6
    kinds = {h["fault"] for h in hyps}
    assert {"none", "open", "short", "wrong-value", "missing", "reversed"} <= kinds
    probs = [h["probability"] for h in hyps]
    assert probs == sorted(probs, reverse=True)


def test_derive_gain_matches_first_order_gum():
    # G = 0.120/0.010 = 12; relative u = sqrt(1%² + 1%²) (JCGM 100:2008 eq. 10, ratio).
    out = run("derive", "gain", "--vin", "10m", "--vout", "120m", "--u-vin", "1%",
              "--u-vout", "1%", "--json")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert data["value"] == pytest.approx(12.0)
    assert data["uncertainty"] == pytest.approx(12.0 * (2 * 0.01**2) ** 0.5, rel=1e-9)


def test_derive_gain_defaults_add_the_ac_noise_floor():
    # Each voltage at 1 % + 10 µV (the documented AC default): u(v_in) = 110 µV,
    # u(v_out) = 1.21 mV; JCGM 100:2008 eq. 10 for the ratio:
    # u(G) = sqrt((12·110e-6/0.01)² + (1.21e-3/0.01)²) = sqrt(0.132² + 0.121²).
    out = run("derive", "gain", "--vin", "10m", "--vout", "120m", "--json")
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["uncertainty"] == pytest.approx(
        (0.132**2 + 0.121**2) ** 0.5, rel=1e-9)


def test_derive_row_reads_back_as_a_reading(tmp_path):
    out = run("derive", "input-resistance", "--v1", "20m", "--v2", "10m", "--series-resistor", "100R")
    assert out.returncode == 0, out.stderr
    from reconcile.data.readings import readings_from_text

    (reading,) = readings_from_text(out.stdout)
    assert reading.quantity == "input_resistance" and reading.value == pytest.approx(100.0)


def test_derive_swapped_leads_is_exit_2():
    out = run("derive", "input-resistance", "--v1", "10m", "--v2", "20m", "--series-resistor", "100R")
    assert out.returncode == 2 and "swapped" in out.stderr
