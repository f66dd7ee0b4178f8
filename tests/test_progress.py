"""Progress displays: on stderr, on a terminal only, never with ``--json`` (issue 16).

The displays themselves are rich's (a reference library); these checks are of our
wiring: which steps are announced, in what order, and that nothing reaches stdout or a
non-terminal stderr.
"""

from __future__ import annotations

import io
from pathlib import Path

import pytest
from cli_support import run_cli
from rich.console import Console

from reconcile.pipeline.analyses import analyse
from reconcile.pipeline.inputs import AnalysisInputs, AnalysisOptions
from reconcile.present import progress

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_data"
BOARD = SAMPLES / "line_receiver_cb.toml"
READINGS = SAMPLES / "line_receiver_built.csv"


@pytest.fixture(scope="module")
def announced():
    """One whole analysis (a small trim: single changes, a short yield) and the stages
    it announced, shared by the checks below."""
    inputs = AnalysisInputs.from_files(
        BOARD, READINGS, options=AnalysisOptions(trim_samples=200, max_changes=1, top=3))
    stages: list[str] = []
    analysis = analyse(inputs, on_stage=stages.append)
    return inputs, analysis, stages


def test_the_pipeline_announces_each_step_in_order(announced):
    _, analysis, stages = announced
    expected = ["fitting the board to its readings", "weighing the fault hypotheses"]
    if analysis.trim is not None:
        expected.append("searching reworks and their yield")
    assert stages == expected


def test_a_step_passed_in_is_not_announced(announced):
    inputs, first, _ = announced
    stages: list[str] = []
    analyse(inputs, fit=first.fit, diagnosis=first.diagnosis, trim=first.trim,
            on_stage=stages.append)
    assert stages == []


def _terminal(monkeypatch) -> io.StringIO:
    screen = io.StringIO()
    monkeypatch.setattr(progress, "make_console",
                        lambda **_kw: Console(file=screen, force_terminal=True, width=80))
    return screen


def test_stage_progress_shows_on_a_terminal_and_clears_itself(monkeypatch):
    screen = _terminal(monkeypatch)
    with progress.stage_progress() as stage:
        stage("weighing the fault hypotheses")
    shown = screen.getvalue()
    assert "weighing the fault hypotheses" in shown
    assert "0:00:0" in shown  # the elapsed time column


@pytest.mark.parametrize("enabled", [False, True])
def test_stage_progress_is_silent_off_a_terminal_or_when_disabled(monkeypatch, enabled):
    if enabled:  # not a terminal: nothing drawn
        screen = io.StringIO()
        monkeypatch.setattr(progress, "make_console",
                            lambda **_kw: Console(file=screen, force_terminal=False))
    else:
        screen = _terminal(monkeypatch)
    with progress.stage_progress(enabled=enabled) as stage:
        stage("a step nobody sees")
    assert screen.getvalue() == ""


@pytest.mark.slow  # a whole report with its figures
def test_report_with_json_prints_one_object_and_nothing_on_stderr(tmp_path):
    out = run_cli("report", str(BOARD), str(READINGS), "--out", str(tmp_path / "r.html"),
                  "--json")
    assert out.exit_code == 0, out.stderr
    assert out.stderr == ""
    assert out.stdout.count("\n") == 1 and out.stdout.startswith("{")
