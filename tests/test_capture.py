"""The capture run: plan, settle, store at once, survive faults, resume without duplicates.

Everything runs without hardware: a simulated bench (instruments/simulated_bench.py)
answers with the engine's predictions for a hidden "true" board, through the same
drivers and SCPI text a real bench gets. Outside references, named beside each check:

- JCGM 100:2008 (GUM) 4.3.7: an accuracy limit read as rectangular, u = limit/√3;
  4.2.3: standard deviation of the mean, s/√n; eq. (10): the combined uncertainty of
  uncorrelated inputs adds in quadrature;
- IEEE 488.2 10.14 (``*IDN?`` fields) and SCPI-1999 (``SYST:ERR?`` entries
  ``<code>,"<text>"``, code 0 = empty), from memory;
- the voltage divider of the series-resistor method (any circuit-analysis textbook,
  from memory): Rin = Rs·V2/(V1 − V2) for a resistive input;
- recovery of a seeded synthetic truth within k stated standard errors (common
  practice for testing a fit), and the chi-square distribution for a fit's verdict.
"""

from __future__ import annotations

import dataclasses
import json
import math
import statistics
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import typer
from fit_support import draw_truth, sample_board
from typer.testing import CliRunner

from reconcile.capture.run import Capture, CaptureInterrupted, CaptureReport
from reconcile.instruments.dc_voltmeter import DcVoltmeter
from reconcile.instruments.fake import FakeTransport
from reconcile.capture.plan import SKIP_ANSWERS, ProbeStep, dc_nodes, plan_readings
from reconcile.instruments.profile import load_profile
from reconcile.capture.settle import SettleError, SettleRule, settle
from reconcile.capture.simulated_bench import SimulatedBench, capture_simulated_demo
from reconcile.model.board import DeviceParam
from reconcile.model.board_loader import board_from_text
from reconcile.errors import InputError
from reconcile.data.readings import Reading
from cli_support import run_cli
from reconcile.inference.fitting import fit_board
from reconcile.store.repository import open_store

HERE = Path(__file__).resolve().parent
SAMPLES = HERE.parent / "sample_data"
NO_ERROR = '+0,"No error"'  # SCPI-1999: code 0 = empty error queue
IDN = "Nullbench,TEST-DM,T0001,2.0"  # IEEE 488.2 10.14: maker, model, serial, firmware


# ----------------------------------------------------------------------------- helpers
@pytest.fixture
def store(tmp_path):
    db = open_store(tmp_path / "capture.sqlite")
    yield db
    db.close()


def _session(store, board) -> str:
    return store.create_session(board)


def _keys(store, sid) -> list[tuple[str, str]]:
    return [(s.reading.quantity, s.reading.at) for s in store.readings(sid)]


def _line_receiver():
    return sample_board("line_receiver_cb")


def _capture(board, store, sid, bench: SimulatedBench, *, scanner=True, gain=True,
             input_resistance=True, **extra) -> Capture:
    target = board.spec.targets.get("input_resistance")
    return Capture(
        board, store, sid, gain=gain, input_resistance=input_resistance,
        series_resistor_ohm=target.value if target else 1000.0,
        **{**bench.capture_kwargs(scanner=scanner, gain=gain or input_resistance), **extra},
    )


def _within_tolerance_truth(board):
    """The line receiver as it might be built: every change inside its tolerance."""
    truth = board.with_resistor_ohms("R2", 62e3 * 0.992).with_resistor_ohms("RC", 1000 * 1.008)
    truth = truth.with_resistor_ohms("RE", 2200 * 0.995)
    truth = truth.replace_part(dataclasses.replace(truth.supplies["VCC"], volts=9.0 * 1.006))
    device = truth.devices["lab-npn-a"]
    devices = {"lab-npn-a": dataclasses.replace(device, beta=DeviceParam(240.0),
                                                IS=DeviceParam(12e-15))}
    return dataclasses.replace(truth, devices=devices)


# ----------------------------------------------------------------------------- plan
def test_plan_reads_every_dc_node_then_supplies_then_small_signal():
    # Contract section 2: every node has a DC voltage except a signal node reached only
    # through capacitors; a supply's current is what it delivers into the board.
    board = _line_receiver()
    plan = plan_readings(board, gain=True, input_resistance=True)
    assert [p.place for p in plan] == [
        ("voltage", "vcc"), ("voltage", "b"), ("voltage", "c"), ("voltage", "e"),
        ("voltage", "in"), ("voltage", "out"), ("current", "VCC"),
        ("gain", ""), ("input_resistance", ""),
    ]
    assert plan[1].prompt.startswith("probe node b, black lead on gnd")


def test_plan_leaves_out_a_signal_node_with_no_dc_path():
    # Contract section 2: a [signal] node connected only through capacitors has no DC
    # voltage; reading it would be meaningless.
    text = (SAMPLES / "line_receiver_cb.toml").read_text(encoding="utf-8")
    text = text.replace('[resistors.RB_IN]               # bleeds the input coupling '
                        'capacitor to 0 V\nnodes = ["in", "gnd"]\nohms = "100k"\n', "")
    board = board_from_text(text, "no-bleed.toml")
    assert "RB_IN" not in board.resistors
    assert "in" not in dc_nodes(board)
    assert ("voltage", "in") not in [p.place for p in plan_readings(board)]


def test_plan_refuses_small_signal_without_signal_table():
    text = (SAMPLES / "line_receiver_cb.toml").read_text(encoding="utf-8")
    text = text[: text.index("[signal]")] + text[text.index("[bench]"):]
    text = text.replace('gain = { value = 10, tolerance = "5%" }\n', "").replace(
        'input_resistance = { value = "75", tolerance = "5%" }\n', "")
    board = board_from_text(text, "no-signal.toml")
    with pytest.raises(InputError, match=r"\[signal\]"):
        plan_readings(board, gain=True)


# ----------------------------------------------------------------------------- settle
def _scripted_meter(values: list[str]) -> DcVoltmeter:
    return DcVoltmeter(FakeTransport({"MEAS:VOLT:DC?": values, "*IDN?": IDN},
                                     resource="TEST::DMM"),
                       load_profile(SAMPLES / "instruments" / "bench-dmm.toml"))


def test_settle_takes_the_reading_only_after_the_drift_dies_away():
    # Common practice (data logging): N consecutive values within a band. A drifting
    # node (an RC charging after the probe goes on) must not be read while it moves.
    meter = _scripted_meter(["1.10", "1.05", "1.02", "1.01", "1.0001", "1.0003", "1.0002",
                             "0.5"])
    seen = []
    rule = SettleRule(count=3, band_abs=1e-3, band_rel=0.0, max_samples=20)
    got = settle(meter.read_dc_volts, rule, what="voltage at b", unit="V",
                 resource=meter.resource, command="MEAS:VOLT:DC?",
                 on_sample=lambda v, n, ok, spread, band: seen.append((n, ok)))
    assert got.samples == 7
    assert got.window == (1.0001, 1.0003, 1.0002)
    assert got.value == pytest.approx(1.0002, abs=1e-12)
    assert seen[-1] == (7, True) and not any(ok for _, ok in seen[:-1])
    assert meter.transport.queries.count("MEAS:VOLT:DC?") == 7
    # GUM 4.2.3: standard deviation of the mean of the window
    assert got.type_a == pytest.approx(statistics.stdev([1.0001, 1.0003, 1.0002]) / math.sqrt(3))


def test_settle_relative_band_for_large_readings():
    # band = max(absolute, relative·|v|): 100 ppm of 9 V is 0.9 mV.
    rule = SettleRule(count=3, band_abs=1e-4, band_rel=1e-4, max_samples=3)
    values = iter([9.0, 9.0008, 9.0004])
    got = settle(lambda: next(values), rule, what="v", unit="V", resource="R", command="C")
    assert got.band == pytest.approx(9.0004 * 1e-4)


def test_settle_gives_up_after_max_samples_with_a_clear_message():
    ramp = [f"{1.0 + 0.01 * k:.4f}" for k in range(30)]
    meter = _scripted_meter(ramp)
    rule = SettleRule(count=3, band_abs=1e-3, band_rel=0.0, max_samples=12)
    with pytest.raises(SettleError) as err:
        settle(meter.read_dc_volts, rule, what="voltage at c", unit="V",
               resource=meter.resource, command="MEAS:VOLT:DC?")
    text = str(err.value)
    assert "TEST::DMM" in text and "'MEAS:VOLT:DC?'" in text and "voltage at c" in text
    assert "after 12 readings" in text and "20 mV" in text  # spread of the last 3
    assert meter.transport.queries.count("MEAS:VOLT:DC?") == 12


@pytest.mark.parametrize("kwargs", [{"count": 1}, {"max_samples": 2}, {"band_abs": 0.0},
                                    {"band_rel": -1.0}])
def test_settle_rule_refuses_nonsense(kwargs):
    with pytest.raises(InputError):
        SettleRule(**{"count": 3, "band_abs": 1e-4, "band_rel": 1e-4, "max_samples": 50,
                      **kwargs})


def test_a_reading_that_never_settles_stops_the_run_and_keeps_what_was_stored(store):
    board = _line_receiver()
    sid = _session(store, board)
    bench = SimulatedBench(board, np.random.default_rng(3))
    # from its 7th DC reading on (the third node) the meter drifts 1 mV a reading
    bench.inject("dmm", "drift", after=7, command="MEAS:VOLT:DC?")
    run = _capture(board, store, sid, bench, gain=False, input_resistance=False,
                   max_samples=10)
    with pytest.raises(CaptureInterrupted) as err:
        run.run()
    text = str(err.value)
    assert "SIM::DMM: voltage at c did not settle" in text and "'MEAS:VOLT:DC?'" in text
    assert "2 readings of this run are safely stored" in text
    assert _keys(store, sid) == [("voltage", "vcc"), ("voltage", "b")]
    assert bench.transports["dmm"].queries.count("MEAS:VOLT:DC?") == 6 + 10


# ----------------------------------------------------------------------------- uncertainty
def test_stored_reading_carries_identity_and_gum_uncertainty(store):
    # u = sqrt(u_B² + u_A²): u_B = (|v|·0.008 % + 1 V·0.001 %)/√3 on the 1 V range of
    # bench-dmm.toml (GUM 4.3.7), u_A = s/√3 of the settled window (GUM 4.2.3),
    # combined in quadrature (GUM eq. (10)).
    board = _line_receiver()
    sid = _session(store, board)
    meter = _scripted_meter(["1.0001", "1.0003", "1.0002"])
    plan = [p for p in plan_readings(board) if p.place == ("voltage", "b")]
    steps: list[ProbeStep] = []
    report = Capture(board, store, sid, voltmeter=meter, plan=plan,
                     prompt=lambda s: steps.append(s) or "", settle_band_v=1e-3).run()
    assert [s.text.split(",")[0] for s in steps] == ["probe node b"]
    stored = store.readings(sid)[0].reading
    mean = 1.0002
    u_b = (mean * 0.008 / 100 + 1.0 * 0.001 / 100) / math.sqrt(3)
    u_a = statistics.stdev([1.0001, 1.0003, 1.0002]) / math.sqrt(3)
    assert stored.value == pytest.approx(mean, abs=1e-12)
    assert stored.uncertainty == pytest.approx(math.hypot(u_b, u_a), rel=1e-9)
    assert stored.instrument == "Nullbench TEST-DM (serial T0001, firmware 2.0)"
    assert stored.unit == "V" and "1 V range" in stored.note
    assert report.instruments == {"dc_voltmeter": stored.instrument}
    assert meter.transport.sent[:2] == ["*CLS", "*IDN?"]  # IEEE 488.2 common commands


def test_noiseless_bench_gain_and_input_resistance_self_consistency(store):
    # Self-consistency check: the capture's derived readings against the engine that
    # drives the simulated bench.
    # Series-resistor method (voltage divider, from memory): for a resistive input,
    # Rs·V2/(V1 − V2) = Rin exactly; gain = V_out/V_in is the engine's gain.
    board = _line_receiver()
    sid = _session(store, board)
    bench = SimulatedBench(board, noise=False)
    report = _capture(board, store, sid, bench).run()
    got = {t.reading.quantity: t.reading for t in report.taken}
    engine = bench.small_signal()
    assert got["gain"].value == pytest.approx(engine["gain"], rel=1e-9)
    assert got["input_resistance"].value == pytest.approx(engine["input_resistance"], rel=1e-9)
    assert got["gain"].uncertainty > 0 and got["input_resistance"].uncertainty > 0
    assert "10 kHz" in got["gain"].note
    gen = bench.transports["generator"].writes
    # IEEE 488.2 *CLS, then the SCPI-1999 forms: sine, frequency, amplitude in V rms,
    # offset, output on; output off at the end
    assert gen[:7] == ["*CLS", "FUNC SIN", "FREQ 10000", "VOLT:UNIT VRMS", "VOLT 0.01",
                       "VOLT:OFFS 0", "OUTP ON"]
    assert gen[-1] == "OUTP OFF"


# ----------------------------------------------------------------------------- recovery
def _fit_z(store, sid, values: dict[str, float]) -> tuple[list[float], object]:
    """The fit of the session, and (fitted − true)/stderr of every informed parameter."""
    board, readings = store.session_inputs(sid)
    fit = fit_board(board, readings)
    z = [(e.value - values[k]) / e.stderr for k, e in fit.parameters.items()
         if e.informed_by == "readings" and k in values]
    return z, fit


def test_capture_then_fit_recovers_a_hidden_line_receiver(store):
    # Common practice for a fit: a seeded synthetic truth is recovered within 3 stated
    # standard errors. The bench has calibration errors drawn inside its accuracy limits
    # (GUM 4.3.7) as well as noise, so the stated uncertainties are really tested.
    board = _line_receiver()
    truth = _within_tolerance_truth(board)
    sid = _session(store, board)
    bench = SimulatedBench(truth, np.random.default_rng(11), temperature_k=300.5,
                           calibration_error=True)
    report = _capture(board, store, sid, bench).run()
    assert report.complete and len(report.taken) == 9
    values = {"VCC": truth.supplies["VCC"].volts, "Q1.beta": 240.0, "Q1.IS": 12e-15,
              "temperature": 300.5, **{r: p.ohms for r, p in truth.resistors.items()}}
    z, fit = _fit_z(store, sid, values)
    assert fit.success and fit.verdict == "consistent"
    informed = [k for k, e in fit.parameters.items() if e.informed_by == "readings"]
    assert {"RC", "RE", "VCC", "Q1.beta"} <= set(informed)
    assert len(z) == len(informed)
    assert max(abs(v) for v in z) < 3.0, dict(zip(informed, z, strict=True))


@pytest.mark.parametrize("case", ["preamp_ce", "two_stage_npn_pnp"])
def test_capture_then_fit_recovers_drawn_truths(tmp_path, case):
    # As above, on truths drawn inside the drawing's tolerances (tests/fit_support.py);
    # pooled over two seeds per board, every informed parameter within 3 stated stderr.
    board = sample_board(case)
    zs = []
    for seed in range(2):
        rng = np.random.default_rng([2024, seed])
        truth = draw_truth(board, rng)
        with open_store(tmp_path / f"{case}-{seed}.sqlite") as db:
            sid = db.create_session(board)
            bench = SimulatedBench(truth.board, rng, temperature_k=truth.temperature_k,
                                   calibration_error=True)
            assert _capture(board, db, sid, bench).run().complete
            z, fit = _fit_z(db, sid, truth.values())
            assert fit.success
            zs += z
    assert len(zs) >= 8
    assert max(abs(v) for v in zs) < 3.0


def test_a_part_outside_tolerance_shows_in_the_fit_verdict(store):
    # RC 10 % high on a 1 % part: the captured readings must expose it. Reference: the
    # chi-square test of the fit (p < 0.001 is "inconsistent", reconcile/fitting.py).
    board = _line_receiver()
    truth = board.with_resistor_ohms("RC", 1100.0)
    sid = _session(store, board)
    _capture(board, store, sid, SimulatedBench(truth, np.random.default_rng(5))).run()
    _z, fit = _fit_z(store, sid, {})
    assert fit.verdict == "inconsistent"


def test_capture_simulated_demo_fills_the_session(store):
    board = _line_receiver()
    sid = _session(store, board)
    report = capture_simulated_demo(board, _within_tolerance_truth(board), store, sid,
                                    np.random.default_rng(1))
    assert isinstance(report, CaptureReport) and report.complete
    assert report.stored_total == 9 == len(store.readings(sid))
    kinds = [a.kind for a in store.show_session(sid).analyses]
    assert kinds == ["capture"]  # the run is recorded with the session


# ----------------------------------------------------------------------------- faults
FAULTS = [
    # (instrument, kind, after, command, text expected in the message, readings stored)
    ("dmm", "timeout", 7, "MEAS:VOLT:DC?", "SIM::DMM did not answer 'MEAS:VOLT:DC?'", 2),
    ("dmm", "garbage", 10, "MEAS:VOLT:DC?", "which is not a number", 3),
    ("supply", "timeout", 1, "MEAS:CURR?", "SIM::PSU did not answer 'MEAS:CURR?'", 6),
    ("generator", "error_queue", 1, "FUNC", "SIM::GEN reported 1 error after 'FUNC SIN'", 7),
    ("scanner", "error_queue", 3, "ROUT:CLOS", "SIM::SCAN reported 1 error after "
     "'ROUT:CLOS (@103)'", 2),
    ("dmm", "timeout", 2, "MEAS:VOLT:AC?", "SIM::DMM did not answer 'MEAS:VOLT:AC?'", 7),
]


@pytest.mark.parametrize(("instrument", "kind", "after", "command", "expected", "stored"),
                         FAULTS)
def test_fault_stops_with_a_clear_message_and_resume_does_not_duplicate(
    store, instrument, kind, after, command, expected, stored
):
    # IEEE 488.2 / SCPI-1999: an error-queue entry reads '<code>,"<text>"'; -222 is
    # "data out of range". Common practice: readings already taken survive a fault, and
    # the resumed run takes only what is missing.
    board = _line_receiver()
    sid = _session(store, board)
    bench = SimulatedBench(board, np.random.default_rng(2))
    bench.inject(instrument, kind, after=after, command=command)
    with pytest.raises(CaptureInterrupted) as err:
        _capture(board, store, sid, bench).run()
    text = str(err.value)
    assert expected in text
    assert f"{stored} reading{'s' if stored != 1 else ''} of this run" in text
    assert "run the same capture again to resume" in text
    if kind == "error_queue":
        assert '-222 "Data out of range"' in text
    first = store.readings(sid)
    assert len(first) == stored == len(err.value.report.taken)
    assert err.value.report.failed is not None and not err.value.report.complete
    assert bench.generator.read_output() is False  # never left running after a stop

    bench.fix()
    report = _capture(board, store, sid, bench).run()
    assert report.complete
    assert [p.place for p in report.skipped_existing] == [
        (s.reading.quantity, s.reading.at) for s in first]
    keys = _keys(store, sid)
    assert len(keys) == len(set(keys)) == 9
    assert [s.id for s in store.readings(sid)][:stored] == [s.id for s in first]


@pytest.mark.parametrize("typed_at", ["c", "c/gnd"])
def test_resume_skips_readings_typed_into_the_session_earlier(store, typed_at):
    # docs/formats.md §3: a voltage at "c" means V(c) − V(gnd), so "c/gnd" is the same
    # reading (the catalogue's "not yet taken" rule, reconcile/inference/catalogue.py).
    board = _line_receiver()
    sid = _session(store, board)
    from reconcile.data.readings import Reading

    store.add_reading(sid, Reading("voltage", typed_at, 8.6, "V", 0.01, note="typed"))
    bench = SimulatedBench(board, np.random.default_rng(4))
    report = _capture(board, store, sid, bench, gain=False, input_resistance=False).run()
    assert [p.place for p in report.skipped_existing] == [("voltage", "c")]
    assert ("voltage", "c") not in [(t.reading.quantity, t.reading.at) for t in report.taken]
    assert len(store.readings(sid)) == 7


# ----------------------------------------------------------------------------- prompts
def test_scanner_mode_needs_no_prompts(store):
    board = _line_receiver()
    sid = _session(store, board)
    bench = SimulatedBench(board, np.random.default_rng(6))
    kwargs = bench.capture_kwargs(scanner=True, gain=True)
    kwargs["prompt"] = None
    report = Capture(board, store, sid, gain=True, **kwargs).run()
    assert report.complete and len(report.taken) == 8
    assert bench.prompts == []
    scan = bench.transports["scanner"].writes
    # break before make (common practice for relay scanners): open the last, close next
    assert scan[:4] == ["*CLS", "ROUT:CLOS (@101)", "ROUT:OPEN (@101)", "ROUT:CLOS (@102)"]
    assert scan[-1].startswith("ROUT:OPEN")  # released at the end
    notes = [t.reading.note for t in report.taken if t.reading.quantity == "voltage"]
    assert all("via scanner channel 10" in n for n in notes)


def test_without_a_scanner_the_operator_is_prompted_per_node(store):
    board = _line_receiver()
    sid = _session(store, board)
    bench = SimulatedBench(board, np.random.default_rng(7))
    _capture(board, store, sid, bench, scanner=False).run()
    texts = [s.text for s in bench.prompts]
    assert texts[0] == ("probe node vcc, black lead on gnd, press Enter when the probe is "
                        "on (type s to skip)")
    assert [s.hi for s in bench.prompts if s.kind == "probe_dc"] == dc_nodes(board)
    assert [s.kind for s in bench.prompts[6:]] == [
        "probe_ac", "probe_ac", "setup", "probe_ac", "probe_ac", "setup"]


def test_operator_can_skip_a_node_and_a_later_run_takes_it(store):
    board = _line_receiver()
    sid = _session(store, board)
    bench = SimulatedBench(board, np.random.default_rng(8))

    def operator(step: ProbeStep) -> str:
        bench.operator(step)
        return SKIP_ANSWERS[0] if step.hi == "c" else ""

    report = _capture(board, store, sid, bench, scanner=False, gain=False,
                      input_resistance=False, prompt=operator).run()
    assert [(p.place, why) for p, why in report.skipped] == [
        (("voltage", "c"), "skipped by the operator")]
    again = _capture(board, store, sid, bench, scanner=False, gain=False,
                     input_resistance=False).run()
    assert [(t.reading.quantity, t.reading.at) for t in again.taken] == [("voltage", "c")]


def test_a_reading_with_no_instrument_is_skipped_with_the_reason(store):
    board = _line_receiver()
    sid = _session(store, board)
    bench = SimulatedBench(board, np.random.default_rng(9))
    kwargs = bench.capture_kwargs(scanner=True)
    kwargs["supply"] = None
    report = Capture(board, store, sid, **kwargs).run()
    assert [(p.place, why) for p, why in report.skipped] == [
        (("current", "VCC"), "no supply instrument for it")]


@pytest.mark.parametrize(("change", "message"), [
    ({"prompt": None, "scanner": None}, "no prompt was given"),
    ({"gain": True, "generator": None}, "needs a function generator"),
    ({"input_resistance": True}, "series resistor's value"),
    ({"settle_count": 1}, "settle count"),
])
def test_capture_refuses_an_incomplete_set_up_before_sending_anything(store, change, message):
    board = _line_receiver()
    sid = _session(store, board)
    bench = SimulatedBench(board)
    kwargs = {**bench.capture_kwargs(scanner=False, gain=True), **change}
    with pytest.raises(InputError, match=message):
        Capture(board, store, sid, **kwargs)
    assert all(t.sent == [] for t in bench.transports.values())


def test_scanner_without_a_channel_for_a_node_is_refused(store):
    board = _line_receiver()
    sid = _session(store, board)
    bench = SimulatedBench(board, scanner_profile=load_profile(
        SAMPLES / "instruments" / "bench-scanner.toml"))
    with pytest.raises(InputError, match="no scanner channel reads nodes in, out"):
        Capture(board, store, sid, **bench.capture_kwargs(scanner=True))


def test_capture_refuses_a_board_that_is_not_the_sessions(store):
    sid = _session(store, _line_receiver())
    other = sample_board("preamp_ce")
    bench = SimulatedBench(other)
    with pytest.raises(InputError, match="differs from the board snapshot"):
        Capture(other, store, sid, **bench.capture_kwargs(scanner=True)).run()


# ----------------------------------------------------------------------------- real VISA path
def _pyvisa_sim_files(tmp_path) -> tuple[Path, Path, Path]:
    """Instrument files for the pyvisa-sim bench of tests/instruments_sim_bench.yaml
    (a DMM answering 1.62 V to every reading, a supply reading 0.542 mA), and a board."""
    from store_support import BOARD_TOML

    sim = HERE / "instruments_sim_bench.yaml"
    dmm, psu, board = tmp_path / "dmm.toml", tmp_path / "psu.toml", tmp_path / "stage.toml"
    for path, role, address in ((dmm, "dc_voltmeter", "10.0.0.5"),
                                (psu, "power_supply", "10.0.0.6")):
        path.write_text(
            f'[instrument]\nrole = "{role}"\nresource = "TCPIP0::{address}::INSTR"\n'
            f'backend = "{sim.as_posix()}@sim"\ntimeout_s = 0.1\n', encoding="utf-8")
    board.write_text(BOARD_TOML, encoding="utf-8")
    return dmm, psu, board


def test_open_bench_runs_a_capture_through_pyvisa(store, tmp_path):
    # The real-instrument path: instrument files -> pyvisa (pyvisa-sim backend) ->
    # VisaTransport -> drivers -> capture.
    from reconcile.capture.bench_setup import open_bench

    dmm, psu, board_file = _pyvisa_sim_files(tmp_path)
    board = board_from_text(board_file.read_text(encoding="utf-8"), str(board_file))
    sid = store.create_session(board)
    with open_bench(dmm=dmm, supplies={"VCC": psu}) as bench:
        report = Capture(board, store, sid, voltmeter=bench.voltmeter,
                         supply=bench.supplies, prompt=lambda _s: "").run()
    values = [(t.reading.at, t.reading.value) for t in report.taken]
    assert values == [("vcc", 1.62), ("b", 1.62), ("c", 1.62), ("e", 1.62), ("VCC", 5.42e-4)]
    assert report.instruments["dc_voltmeter"].startswith("NULLBENCH DM-65 (invented)")


# ----------------------------------------------------------------------------- command line
def _app() -> typer.Typer:
    from reconcile.cli.capture import capture

    app = typer.Typer(add_completion=False, pretty_exceptions_enable=False)
    app.command()(capture)
    app.command("noop")(lambda: None)  # two commands, so "capture" is a sub-command
    return app


def test_cli_capture_simulated_json_then_resume(tmp_path):
    db_path = tmp_path / "cli.sqlite"
    board_file = SAMPLES / "line_receiver_cb.toml"
    with open_store(db_path) as db:
        sid = db.create_session(sample_board("line_receiver_cb"))
    args = ["capture", str(board_file), "--session", sid, "--store", str(db_path),
            "--simulate", str(board_file), "--gain", "--series-resistor", "75", "--json"]
    runner = CliRunner()
    first = runner.invoke(_app(), args)
    assert first.exit_code == 0, first.output
    out = json.loads(first.stdout)
    assert out["session"] == sid and out["stored_total"] == 9 and out["complete"]
    assert [t["quantity"] for t in out["taken"]].count("voltage") == 6
    again = json.loads(runner.invoke(_app(), args).stdout)
    assert again["taken"] == [] and len(again["skipped"]) == 9
    assert {s["reason"] for s in again["skipped"]} == {"already in the session"}


def test_cli_capture_human_output_without_a_terminal(tmp_path):
    db_path = tmp_path / "cli.sqlite"
    board_file = SAMPLES / "line_receiver_cb.toml"
    with open_store(db_path) as db:
        sid = db.create_session(sample_board("line_receiver_cb"))
    result = CliRunner().invoke(_app(), [
        "capture", str(board_file), "--session", sid, "--store", str(db_path),
        "--simulate", str(board_file)])
    assert result.exit_code == 0, result.output
    assert ">> probe node b, black lead on gnd" in result.output
    assert "stored voltage at b:" in result.output
    assert "7 readings stored by this run; the session now holds 7" in result.output


def test_cli_capture_prompts_the_operator_and_stops_cleanly_when_input_ends(tmp_path):
    dmm, psu, board_file = _pyvisa_sim_files(tmp_path)
    db_path = tmp_path / "cli.sqlite"
    with open_store(db_path) as db:
        sid = db.create_session(board_from_text(board_file.read_text(encoding="utf-8"),
                                                str(board_file)))
    args = ["capture", str(board_file), "--session", sid, "--store", str(db_path),
            "--dmm", str(dmm), "--supply", f"VCC={psu}", "--interval", "0"]
    # two Enters, then the input ends: two readings stored, a clear stop
    result = CliRunner().invoke(_app(), args, input="\n\n")
    assert ">> probe node vcc, black lead on gnd" in result.output
    assert isinstance(result.exception, CaptureInterrupted)
    assert "input is closed" in str(result.exception)
    assert "2 readings of this run are safely stored" in str(result.exception)
    assert result.exception.exit_code == 2  # bad input (reconcile/errors.py)
    done = CliRunner().invoke(_app(), args, input="\n\n")
    assert done.exit_code == 0, done.output
    assert "3 readings stored by this run; the session now holds 5" in done.output


def test_cli_capture_needs_an_instrument_or_simulate(tmp_path):
    with open_store(tmp_path / "s.sqlite") as db:
        sid = db.create_session(sample_board("line_receiver_cb"))
    result = CliRunner().invoke(_app(), [
        "capture", str(SAMPLES / "line_receiver_cb.toml"), "--session", sid,
        "--store", str(tmp_path / "s.sqlite")])
    assert isinstance(result.exception, InputError)
    assert "--dmm" in str(result.exception)


def test_importing_the_capture_command_loads_nothing_heavy():
    # Common practice for CLI start-up: heavy libraries load inside the command.
    code = ("import json, sys\nimport reconcile.cli.capture, reconcile.capture.run\n"
            "print(json.dumps(sorted(sys.modules)))\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=60)
    loaded = json.loads(out.stdout)
    heavy = ("pyvisa", "sqlalchemy", "lmfit", "scipy", "pandas", "matplotlib")
    assert [m for m in loaded if m.split(".")[0] in heavy] == []


# ----------------------------------------------------------------------------- gain sweep
def test_gain_sweep_stores_one_gain_per_frequency_self_consistency(store):
    # Self-consistency check: each swept gain against the engine that drives the
    # simulated bench at that frequency; blank frequency = [signal] frequency
    # (docs/formats.md §6.2), so 10 kHz is the board's plain gain.
    board = _line_receiver()  # [signal] frequency 10 kHz
    sid = _session(store, board)
    bench = SimulatedBench(board, noise=False)
    freqs = [20.0, 100.0, 1e3, 1e4, 1e5]
    report = _capture(board, store, sid, bench, input_resistance=False,
                      frequencies=freqs).run()
    gains = [t.reading for t in report.taken if t.reading.quantity == "gain"]
    assert [g.frequency for g in gains] == [None, 20.0, 100.0, 1e3, 1e5]
    for g in gains:
        want = bench.small_signal(g.frequency)["gain"]
        assert g.value == pytest.approx(want, rel=1e-9)
    assert gains[1].value < 0.5 * gains[0].value  # 20 Hz sits below the low corner
    assert "20 Hz sine" in gains[1].note
    writes = bench.transports["generator"].writes
    assert [w for w in writes if w.startswith("FREQ")] == [
        "FREQ 10000", "FREQ 20", "FREQ 100", "FREQ 1000", "FREQ 100000"]
    stored = [(s.reading.quantity, s.reading.frequency) for s in store.readings(sid)]
    assert ("gain", 20.0) in stored and ("gain", None) in stored
    # resume: every swept gain is already stored, nothing is taken twice
    again = _capture(board, store, sid, SimulatedBench(board, noise=False),
                     input_resistance=False, frequencies=freqs).run()
    assert again.taken == () and len(again.skipped_existing) == len(report.taken)


def test_a_gain_at_another_frequency_does_not_resume_the_plain_gain(store):
    board = _line_receiver()
    sid = _session(store, board)
    store.add_reading(sid, Reading.from_si("gain", "", 7.5, 0.1, frequency=50.0),
                      source="test")
    report = _capture(board, store, sid, SimulatedBench(board, noise=False),
                      input_resistance=False).run()
    assert [(t.reading.quantity, t.reading.frequency) for t in report.taken
            if t.reading.quantity == "gain"] == [("gain", None)]


def test_cli_capture_refuses_a_bad_test_frequency(tmp_path):
    db_path = tmp_path / "cli.sqlite"
    board_file = SAMPLES / "line_receiver_cb.toml"
    with open_store(db_path) as db:
        sid = db.create_session(sample_board("line_receiver_cb"))
    result = run_cli("capture", str(board_file), "--session", sid, "--store", str(db_path),
                     "--simulate", str(board_file), "--frequencies", "20,-5")
    assert result.exit_code == 2 and result.crash is None
    assert len(result.message_lines) == 1
    assert "--frequencies" in result.stderr and "'-5'" in result.stderr
