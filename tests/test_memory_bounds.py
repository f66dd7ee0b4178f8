"""Bounded memory and work: every batched step works in chunks within the budget
(engine/budget.py), a diagnosis too large to finish is refused up front, and running out
of memory anyway is one line, not a traceback.

The chunked-against-unchunked comparisons are self-consistency checks (the same
computation of ours, in one call and in chunks), and say so in their names."""

from __future__ import annotations

import resource
import subprocess
from pathlib import Path

import numpy as np
import pytest
from benchmarks.bench_engine import stages_board_toml
from cli_support import run_process

from reconcile.data.readings import load_readings, readings_to_csv
from reconcile.diagnosis.diagnose import WORK_LIMIT, diagnose
from reconcile.engine.budget import budget, parse_budget
from reconcile.errors import InputError
from reconcile.inference.measure import MeasurementModel, observations_from
from reconcile.inference.simulate import simulate_readings
from reconcile.model.board_loader import board_from_text, load_board

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_data"
GIB = 1024**3


def _line_receiver():
    board = load_board(SAMPLES / "line_receiver_cb.toml")
    return board, load_readings(SAMPLES / "line_receiver_built.csv", board)


def test_measurement_model_in_chunks_equals_one_call_self_consistency() -> None:
    board, readings = _line_receiver()
    model = MeasurementModel(board, observations_from(readings))
    rng = np.random.default_rng(3)
    x = model.space.prior_mean + 0.3 * model.space.prior_sd * rng.standard_normal(
        (1500, model.space.size))
    whole = model.predict(x)
    with budget(16 * 1024 * 1024):
        assert model.rows_per_call() < len(x)  # the small budget does split the work
        chunked = model.predict(x)
    np.testing.assert_allclose(chunked, whole, rtol=1e-9, atol=1e-15)


def test_diagnosis_under_the_smallest_budget_equals_the_default_self_consistency() -> None:
    board, readings = _line_receiver()
    default = diagnose(board, readings, max_faults=1)
    with budget(16 * 1024 * 1024):
        small = diagnose(board, readings, max_faults=1)
    assert [h.label for h in small.hypotheses] == [h.label for h in default.hypotheses]
    np.testing.assert_allclose([h.chi_square for h in small.hypotheses],
                               [h.chi_square for h in default.hypotheses], rtol=1e-6, atol=1e-9)


@pytest.fixture(scope="module")
def big_board(tmp_path_factory) -> tuple[Path, Path]:
    """An invented 30-transistor cascade with a gain spec and 30 simulated readings."""
    folder = tmp_path_factory.mktemp("big")
    text = stages_board_toml(30) + '[spec]\ngain = { value = "4e31", tolerance = "20%" }\n'
    board_path = folder / "cascade30.toml"
    board_path.write_text(text, encoding="utf-8")
    board = board_from_text(text)
    plan = [("voltage", f"c{k}") for k in range(1, 31)]
    readings = simulate_readings(board, plan, rng=np.random.default_rng(1))
    readings_path = folder / "cascade30.csv"
    readings_path.write_text(readings_to_csv(readings), encoding="utf-8")
    return board_path, readings_path


def _limited(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    """The command as a user runs it, under a 1 GiB address-space limit (ulimit -v)."""
    def limit() -> None:
        resource.setrlimit(resource.RLIMIT_AS, (GIB, GIB))

    return run_process(*args, cwd=cwd, preexec_fn=limit)


def test_a_30_transistor_diagnosis_is_refused_up_front_under_1_gib(big_board, tmp_path):
    board, readings = big_board
    run = _limited("diagnose", str(board), str(readings), cwd=tmp_path)
    assert run.returncode == 2, run.stderr
    (line,) = run.stderr.strip().splitlines()
    assert "cascade30.toml" in line and "too large to diagnose" in line
    assert run.stdout == ""


@pytest.mark.slow
def test_a_30_transistor_trim_finishes_or_refuses_cleanly_under_1_gib(big_board, tmp_path):
    board, readings = big_board
    run = _limited("trim", str(board), str(readings), "--json", "--samples", "200",
                   "--max-changes", "1", "--top", "3",
                   cwd=tmp_path)
    assert run.returncode in (0, 1, 2), run.stderr
    assert "Traceback" not in run.stderr
    if run.returncode:
        assert len(run.stderr.strip().splitlines()) == 1
    else:
        assert run.stdout.count("\n") == 1 and run.stdout.startswith("{")


def test_the_work_limit_is_documented_and_optional() -> None:
    board, readings = _line_receiver()
    with pytest.raises(InputError, match="too large to diagnose"):
        diagnose(board, readings, max_faults=1, work_limit=10.0)
    assert WORK_LIMIT >= 1.5e10  # a 16-stage cascade (1.5e10, 79 s, 527 MiB here) is allowed


@pytest.mark.parametrize(("text", "nbytes"), [
    ("256M", 256 * 1024**2), ("1G", 1024**3), ("300MiB", 300 * 1024**2),
    ("2 GB", 2 * 1024**3), ("33554432", 32 * 1024**2),
])
def test_memory_sizes_read_in_binary_units(text: str, nbytes: int) -> None:
    assert parse_budget(text) == nbytes


@pytest.mark.parametrize("text", ["abc", "-5M", "1T", "8M"])
def test_bad_memory_sizes_are_refused(text: str) -> None:
    with pytest.raises(InputError, match="RECONCILE_MEMORY"):
        parse_budget(text)


def test_a_bad_memory_environment_is_one_line_exit_2(tmp_path) -> None:
    run = run_process("fit", str(SAMPLES / "line_receiver_cb.toml"),
                      str(SAMPLES / "line_receiver_built.csv"), "--json", cwd=tmp_path,
                      env={"RECONCILE_MEMORY": "lots"}, timeout=120)
    assert run.returncode == 2
    assert run.stderr.strip().splitlines() == [
        "reconcile: [RECONCILE_MEMORY] 'lots' is not a memory size: write e.g. 256M or 1G"]


def test_human_diagnose_output_runs(tmp_path) -> None:
    # regression: the pair-search progress bar once raised NameError on every human run
    run = run_process("diagnose", str(SAMPLES / "line_receiver_cb.toml"),
                      str(SAMPLES / "line_receiver_built.csv"), cwd=tmp_path, timeout=300)
    assert run.returncode == 0, run.stderr
    assert "most likely" in run.stdout


@pytest.mark.slow
def test_hypotheses_are_fitted_in_batches_that_fit_the_budget_self_consistency() -> None:
    # A topology's hypotheses are fitted in batches whose rows' held state fits a
    # quarter of the budget; under the smallest budget a 4-stage cascade's diagnosis
    # runs in several batches and ranks its hypotheses as one batch does
    # (self-consistency: the fits are row by row; only a bounded fit's χ², an upper
    # bound, may differ).
    from reconcile.diagnosis import fault_fit
    from reconcile.inference.simulate import full_plan

    board = board_from_text(stages_board_toml(4))
    truth = board.with_resistor_ohms("RE2_1", 10 * board.resistors["RE2_1"].ohms)
    plan = [key for key in full_plan(board) if key[0] != "gain"]
    readings = simulate_readings(truth, plan, rng=np.random.default_rng(4))
    whole = diagnose(board, readings)
    faults = [h.fit.fault for h in whole.hypotheses if "+" not in h.label]
    space = whole.hypotheses[0].fit.space
    observations = observations_from(readings, board)
    drawn = [i for i, f in enumerate(faults) if f.board is faults[0].board]
    model = MeasurementModel(faults[0].board, observations, space)
    assert len(fault_fit._batches(drawn, faults, model)) == 1
    with budget(parse_budget("16M")):
        batches = fault_fit._batches(drawn, faults, model)
        small = diagnose(board, readings)
    assert len(batches) > 1 and sorted(sum(batches, [])) == drawn
    assert small.top.label == whole.top.label == "RE2_1 wrong-value"
    ours = {h.label: h.fit for h in small.hypotheses}
    for h in whole.hypotheses:
        if h.fit.status != "bounded" and ours[h.label].status != "bounded":
            assert ours[h.label].chi_square == pytest.approx(h.fit.chi_square, rel=1e-9)
