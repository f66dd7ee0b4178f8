"""One analysis pipeline for every front end, and its policies.

(The demo, command line and report agreeing on one stored session is in
tests/test_demo_story.py.) The policy checks test the rule "do not trust a rework from a fit
that does not explain the readings" (common practice: a model fitted to a faulty board
is wrong in a way no tolerance covers) wherever a trim is made.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from reconcile.data.derived_readings import series_resistor_uncertainty
from reconcile.inference.simulate import simulate_readings
from reconcile.model.board_loader import load_board
from reconcile.pipeline import policies
from reconcile.pipeline.analyses import analyse, fit_step, trim_step
from reconcile.pipeline.inputs import AnalysisInputs, AnalysisOptions

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_data"
DESIGN = SAMPLES / "sensor_preamp.toml"
TRUTH = SAMPLES / "sensor_preamp_sp7_0113_truth.toml"
PLAN = [
    ("voltage", "vcc"), ("voltage", "b1"), ("voltage", "c1"), ("voltage", "e1"),
    ("voltage", "e1b"), ("voltage", "e2"), ("voltage", "out"), ("current", "VCC"),
    ("gain", ""), ("input_resistance", ""),
]


# ------------------------------------------------------------------ policies
@pytest.fixture(scope="module")
def design():
    return load_board(DESIGN)


@pytest.fixture(scope="module")
def faulty_inputs(design):
    readings = simulate_readings(load_board(TRUTH), PLAN, rng=np.random.default_rng(3))
    return AnalysisInputs.from_objects(design, readings, AnalysisOptions(trim_samples=200))


@pytest.fixture(scope="module")
def healthy_inputs(design):
    readings = simulate_readings(design, PLAN, rng=np.random.default_rng(3))
    return AnalysisInputs.from_objects(design, readings, AnalysisOptions(trim_samples=200))


@pytest.fixture(scope="module")
def misassumed_inputs(faulty_inputs):
    """The faulty board's readings analysed under a hypothesis that does not explain them
    (the hidden fault is RE1's value, not a missing C_E1)."""
    return faulty_inputs.with_options(assume=("C_E1:missing",))


def test_a_trim_from_an_inconsistent_fit_follows_the_decisive_diagnosis(faulty_inputs):
    # The drawn board's fit does not explain the readings; trim diagnoses it and works
    # under the decisive leader, whose fit does, so its rework carries no warning.
    assert fit_step(faulty_inputs).fit.verdict != "consistent"
    outcome = trim_step(faulty_inputs)
    assert outcome.repair is not None and outcome.repair.source == "diagnosis"
    assert outcome.repair.label == "RE1 wrong-value" and outcome.warning is None


def test_a_trim_from_an_inconsistent_fit_is_flagged(misassumed_inputs):
    outcome = trim_step(misassumed_inputs)
    fit = fit_step(misassumed_inputs).fit
    assert fit.verdict != "consistent" and fit_step(misassumed_inputs).assumed is not None
    assert outcome.warning is not None and fit.verdict in outcome.warning
    assert outcome.to_dict()["warning"] == outcome.warning


def test_a_trim_from_a_consistent_fit_and_design_mode_carry_no_warning(healthy_inputs, design):
    assert fit_step(healthy_inputs).fit.verdict == "consistent"
    assert trim_step(healthy_inputs).warning is None
    assert "warning" not in trim_step(healthy_inputs).to_dict()
    design_mode = AnalysisInputs.from_objects(design, None, AnalysisOptions(trim_samples=0))
    assert trim_step(design_mode).warning is None


def test_the_warning_names_the_diagnosis_leader(misassumed_inputs):
    analysis = analyse(misassumed_inputs)
    top = analysis.diagnosis.top
    assert top.label in analysis.trim.warning
    assert analysis.results()["trim"]["warning"] == analysis.trim.warning


@pytest.mark.slow  # a whole report with its plots
def test_the_report_applies_the_untrusted_fit_rule(misassumed_inputs, tmp_path):
    from reconcile.present.report import build_report, render_html

    data = build_report(misassumed_inputs, work_dir=tmp_path)
    assert data.trim["warning"] == policies.rework_warning(
        data.analysis.working_fit.fit, data.analysis.diagnosis
    )
    assert "Warning: the fit&#x27;s verdict is" in render_html(data)


def test_series_resistor_rule_is_rectangular_jcgm_100():
    # JCGM 100:2008 4.3.7: a tolerance ±a read as rectangular has u = a/√3.
    assert series_resistor_uncertainty(1000.0, 0.01) == pytest.approx(10.0 / 3**0.5)
    assert policies.series_resistor_uncertainty is series_resistor_uncertainty


def test_inputs_from_files_and_from_objects_analyse_alike_self_consistency(design):
    # Self-consistency: the same board and readings gathered two ways fit the same.
    readings = SAMPLES / "line_receiver_built.csv"
    from_files = AnalysisInputs.from_files(SAMPLES / "line_receiver_cb.toml", readings)
    from_objects = AnalysisInputs.from_objects(from_files.board, from_files.readings)
    assert from_files.origin == "files" and from_objects.origin == "objects"
    assert fit_step(from_files).to_dict() == fit_step(from_objects).to_dict()
    assert from_files.record("fit", {}) is None
