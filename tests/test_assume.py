"""Analysing a board under an assumed hypothesis (``--assume``), and the repair that
follows a decisive diagnosis.

Outside references, each named beside its check:

- the demo's hidden board (``sample_data/sensor_preamp_sp7_0113_truth.toml``, invented):
  RE1 is 270.8 Ω where 220 Ω ± 1 % is drawn, a truth far outside the fit's prior; the
  fit under the assumed fault must find it, and the repaired board's predicted gain must
  match the hidden board with RE1 replaced by a drawn 220 Ω part, solved directly;
- the store keeps every row through a schema upgrade (nothing stored is lost).
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest
import sqlalchemy as sa
from cli_support import run_cli
from store_support import BOARD_TOML, pg_database

from reconcile.cli.demo import sample_data_dir
from reconcile.data.readings import readings_to_csv
from reconcile.diagnosis.assumed import KNOWN_TOLERANCE, parse_assumptions
from reconcile.diagnosis.faults import as_built, single_faults
from reconcile.engine import compile_board, solve_batch
from reconcile.engine.circuit import nominal_parameters
from reconcile.engine.solution import solve
from reconcile.inference.simulate import full_plan, simulate_readings
from reconcile.model.board_loader import board_from_text, load_board
from reconcile.pipeline.analyses import analyse, diagnose_step, fit_step
from reconcile.pipeline.inputs import AnalysisInputs, AnalysisOptions
from reconcile.pipeline.repair import repair_of
from reconcile.pipeline.report import collect_report
from reconcile.store import connection as store_connection
from reconcile.store.repository import open_store
from reconcile.store.schema import SCHEMA_VERSION

DESIGN = sample_data_dir() / "sensor_preamp.toml"
TRUTH = sample_data_dir() / "sensor_preamp_sp7_0113_truth.toml"


@pytest.fixture(scope="module")
def bench():
    """The design, its hidden board, readings of the hidden board, and their diagnosis."""
    design, truth = load_board(DESIGN), load_board(TRUTH)
    readings = simulate_readings(truth, full_plan(design), rng=np.random.default_rng(7))
    inputs = AnalysisInputs.from_objects(design, readings)
    return design, truth, readings, diagnose_step(inputs)


@pytest.mark.parametrize(("text", "says"), [
    ("RE1", "expected REF:FAULT"),
    ("XX:open", "the board has no part 'XX'"),
    ("RE1:missing", "RE1 can be open, short, wrong-value, not 'missing'"),
    ("Q1=5", "only a resistor's or a capacitor's value can be given"),
    ("C_E1=47", "far outside what a discrete board uses"),
    ("RE1=0.001", "far outside what a discrete board uses"),
    ("RE1=abc", "cannot read 'abc'"),
    ("RE1=-3", "above zero"),
])
def test_bad_assume_text_is_one_line_naming_the_option(tmp_path, text, says):
    readings = tmp_path / "r.csv"
    readings.write_text("quantity,at,value,unit\nvoltage,e1,0.84,V\n", encoding="utf-8")
    for command in ("fit", "trim", "report"):
        out = run_cli(command, str(DESIGN), str(readings), "--assume", text,
                      "--out", str(tmp_path / "r.html")) if command == "report" else run_cli(
                      command, str(DESIGN), str(readings), "--assume", text)
        assert out.exit_code == 2 and out.crash is None, out.stderr
        [line] = out.message_lines
        assert "--assume" in line and says in line


def test_a_capacitor_read_out_of_circuit_is_assumed_at_its_value_and_repaired():
    # C_E1 drawn 220 µF, read out of circuit at 4.7 µF (a wrong reel): the board as built
    # carries 4.7 µF at the reading's ±1 %, and the repair replaces it with the drawn part
    design = load_board(DESIGN)
    assumed = parse_assumptions(design, ["C_E1=4.7u"])
    assert assumed.board.capacitors["C_E1"].farads == pytest.approx(4.7e-6)
    assert assumed.board.capacitors["C_E1"].tolerance == KNOWN_TOLERANCE
    assert assumed.to_list() == [{"ref": "C_E1", "fault": "wrong-value", "value": 4.7e-6}]
    assert assumed.label == "C_E1=4.7µF"
    (step,) = repair_of(assumed, "assumed").steps
    assert (step["ref"], step["action"], step["value"]) == ("C_E1", "replace", 220e-6)
    assert repair_of(parse_assumptions(design, ["C_E1=222u"]), "assumed").steps == ()


def test_a_part_named_twice_is_refused():
    with pytest.raises(ValueError, match="names RE1 twice"):
        parse_assumptions(load_board(DESIGN), ["RE1=270", "RE1:open"])


def test_the_board_as_built_is_the_fault_diagnosis_fits_self_consistency():
    # as_built writes each fault's engine overrides into the parts: solving that board
    # must give what the engine gives for the drawn board with the overrides applied
    design = load_board(DESIGN)
    faults = [f for f in single_faults(design) if f.kind in ("open", "short", "missing")]
    assert {f.kind for f in faults} == {"open", "short", "missing"}
    for f in faults:
        circuit = compile_board(f.board)
        params = nominal_parameters(circuit, 1)
        changed = {}
        for name, col, value in f.overrides:
            arr = changed.setdefault(name, getattr(params, name).copy())
            arr[:, col] = value
        direct = solve_batch(circuit, dataclasses.replace(params, **changed), small_signal=False)
        built = compile_board(as_built(f))
        mine = solve_batch(built, nominal_parameters(built, 1), small_signal=False)
        assert np.allclose(mine.node_v, direct.node_v, rtol=1e-9, atol=1e-9), f.label


@pytest.mark.slow  # the module's diagnosis of the hidden board
def test_self_consistency_the_fit_under_an_assumed_wrong_value_finds_the_hidden_part(bench):
    design, truth, readings, _ = bench
    drawn = fit_step(AnalysisInputs.from_objects(design, readings))
    assert drawn.fit.verdict == "inconsistent" and drawn.assumed is None
    under = fit_step(AnalysisInputs.from_objects(
        design, readings, AnalysisOptions(assume=("RE1:wrong-value",))))
    est = under.fit.parameters["RE1"]
    true_re1 = truth.resistors["RE1"].ohms  # 270.8 Ω, the hidden truth
    assert under.fit.verdict == "consistent"
    assert abs(est.value - true_re1) < 3 * est.stderr + 1e-3 * true_re1
    assert under.to_dict()["assumed"] == [{"ref": "RE1", "fault": "wrong-value", "value": None}]
    assert drawn.to_dict()["assumed"] == [] and drawn.to_dict()["hypothesis"] is None


@pytest.mark.slow  # the module's diagnosis of the hidden board
def test_a_decisive_diagnosis_repairs_the_drawn_design_first(bench):
    design, truth, readings, diag = bench
    assert diag.decisive and diag.top.label == "RE1 wrong-value"
    inputs = AnalysisInputs.from_objects(design, readings, AnalysisOptions(trim_samples=400))
    analysis = analyse(inputs, diagnosis=diag)
    trim = analysis.trim.to_dict()
    assert trim["repair"]["source"] == "diagnosis"
    assert [(s["ref"], s["action"], s["value"]) for s in trim["repair"]["steps"]] == [
        ("RE1", "replace", 220.0)]
    assert analysis.working_fit.to_dict()["hypothesis"]["label"] == "RE1 wrong-value"
    assert analysis.results()["fit"]["assumed"] == []  # the fit as asked: as drawn
    # the hidden board with RE1 replaced by a drawn part, solved directly
    repaired = solve(truth.with_resistor_ohms("RE1", 220.0)).small_signal
    baseline = analysis.trim.result.baseline
    for q in ("gain", "input_resistance"):
        spread = baseline.spread[q]
        assert abs(repaired[q] - spread["mean"]) < 3 * spread["sd"], q


@pytest.mark.slow  # the module's diagnosis of the hidden board
def test_the_report_and_the_miss_budget_follow_assume(bench):
    design, _, readings, diag = bench
    inputs = AnalysisInputs.from_objects(
        design, readings, AnalysisOptions(assume=("RE1=270",), trim_samples=200))
    data = collect_report(inputs, analysis=analyse(inputs, diagnosis=diag))
    under = fit_step(inputs)
    drawn = fit_step(AnalysisInputs.from_objects(design, readings))
    assert data.assumed["hypothesis"] == "RE1=270" and data.assumed["source"] == "assumed"
    assert data.fit["parameters"]["RE1"]["nominal"] == 270.0
    for q, entry in data.budget.items():
        assert entry["fitted"] == pytest.approx(under.budget.to_dict()[q]["fitted"], rel=1e-9)
        assert entry["design"] == pytest.approx(under.budget.to_dict()[q]["design"], rel=1e-9)
    assert data.budget["gain"]["design"] != pytest.approx(
        drawn.budget.to_dict()["gain"]["design"], rel=1e-3)
    assert data.trim["hypothesis"] == {"label": "RE1=270", "source": "assumed",
                                       "probability": None}
    assert data.trim["assumed"] == [{"ref": "RE1", "fault": "wrong-value", "value": 270.0}]
    assert data.trim["repair"]["steps"][0]["text"] == "replace RE1 with the drawn 220 Ω"
    from reconcile.present.report import render_html

    page = render_html(data)
    assert page.count("Under the hypothesis <b>RE1=270</b>") >= 3  # fit, budget, trim


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def location(request, tmp_path):
    if request.param == "sqlite":
        yield str(tmp_path / "sessions.sqlite")
        return
    with pg_database() as url:
        yield url


def test_version_3_store_gains_the_assumed_column_and_loses_nothing(location, monkeypatch):
    board = board_from_text(BOARD_TOML, "board.toml")
    monkeypatch.setattr(store_connection, "SCHEMA_VERSION", 3)
    with open_store(location) as store:  # a store as version 3 wrote it
        sid = store.create_session(board)
    engine = sa.create_engine(sa.make_url(location) if "://" in location
                              else f"sqlite:///{location}")
    try:
        with engine.begin() as conn:
            conn.exec_driver_sql(
                "INSERT INTO analyses (session_id, kind, result, tool_version, inputs_sha256, "
                f"created) VALUES ('{sid}', 'fit', '{{\"old\": 1}}', '0.9', '{'a' * 64}', "
                "'2026-01-01T00:00:00.000Z')")
    finally:
        engine.dispose()
    with open_store(location, read_only=True) as store:  # a reader of version 3
        [old] = store.show_session(sid).analyses
        assert store.schema_version() == 3 and old.assumed is None
    monkeypatch.setattr(store_connection, "SCHEMA_VERSION", SCHEMA_VERSION)
    hypothesis = {"hypothesis": "RE open", "faults": [{"ref": "RE", "fault": "open",
                                                       "value": None}],
                  "source": "assumed", "probability": None}
    with open_store(location) as store:
        assert store.schema_version() == SCHEMA_VERSION == 4
        new = store.record_analysis(sid, "fit", {"new": 2}, inputs_sha256="b" * 64,
                                    assumed=hypothesis)
        first, second = store.show_session(sid).analyses
        assert store.analysis(first.id).result == {"old": 1} and first.assumed is None
        assert second.id == new and store.analysis(new).assumed == hypothesis


def test_fit_assume_on_a_session_records_the_hypothesis(tmp_path):
    design, truth = load_board(DESIGN), load_board(TRUTH)
    readings = simulate_readings(truth, full_plan(design), rng=np.random.default_rng(3))
    path = tmp_path / "bench.csv"
    path.write_text(readings_to_csv(readings), encoding="utf-8")
    store = str(tmp_path / "s.sqlite")
    with open_store(store) as db:
        sid = db.create_session(design)
        db.add_readings(sid, readings, source="bench.csv")
    out = run_cli("fit", "--session", sid, "--store", store, "--assume", "RE1=270", "--json")
    assert out.exit_code == 0, out.stderr
    result = json.loads(out.stdout)
    shown = run_cli("session", "show", sid, "--store", store, "--json")
    [listed] = json.loads(shown.stdout)["analyses"]
    assert listed["id"] == result["recorded"]["analysis"]
    assert listed["assumed"] == {"hypothesis": "RE1=270", "faults": result["assumed"],
                                 "source": "assumed", "probability": None}
    assert result["assumed"] == [{"ref": "RE1", "fault": "wrong-value", "value": 270.0}]
