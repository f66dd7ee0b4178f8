"""The AC meter's specified band: instrument files give it, capture refuses a test
frequency outside it before it touches the bench (docs/formats.md §6.5).

No hardware: the simulated bench (reconcile/capture/simulated_bench.py, fake transports)
and the pyvisa-sim bench of tests/instruments_sim_bench.yaml. These are rules, not
physics: a meter's accuracy holds only over the band its data sheet gives (common
practice when reading an AC voltmeter's specification).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from cli_support import run_cli
from fit_support import sample_board

from reconcile.capture.bench_setup import open_bench
from reconcile.capture.run import Capture
from reconcile.capture.simulated_bench import SimulatedBench
from reconcile.data.readings import Reading
from reconcile.data.frequency_band import FrequencyBand
from reconcile.errors import InputError
from reconcile.instruments.profile import InstrumentProfile, load_profile
from reconcile.model.board_loader import load_board
from reconcile.pipeline.inputs import AnalysisInputs
from reconcile.store.repository import open_store

HERE = Path(__file__).resolve().parent
SAMPLES = HERE.parent / "sample_data"
DMM = SAMPLES / "instruments" / "bench-dmm.toml"  # band 20 Hz to 20 kHz (invented)


@pytest.fixture
def store(tmp_path):
    db = open_store(tmp_path / "band.sqlite")
    yield db
    db.close()


def _ac_meter_file(tmp_path: Path, band: str, backend: str = "@sim") -> Path:
    path = tmp_path / "meter.toml"
    path.write_text(
        '[instrument]\nrole = ["dc_voltmeter", "ac_voltmeter"]\n'
        f'resource = "TCPIP0::10.9.9.9::INSTR"\nbackend = "{backend}"\n'
        f"[accuracy.ac_volts]\nband_hz = {band}\n", encoding="utf-8")
    return path


def test_instrument_file_gives_the_band_and_refuses_a_bad_one(tmp_path):
    assert load_profile(DMM).ac_band == FrequencyBand(20.0, 20e3)
    profile = load_profile(_ac_meter_file(tmp_path, "[5.0, 1e6]"))
    assert profile.ac_band.text == "5 Hz to 1 MHz" and profile.accuracy == {}
    assert InstrumentProfile.from_dict(profile.to_dict()).ac_band == profile.ac_band
    for bad, words in (("[1e5, 20.0]", "is above its high edge"), ("[20.0]", "[low, high]"),
                       ("[0.0, 1e3]", "> 0"), ('["20", "1k"]', "> 0")):
        with pytest.raises(InputError, match="band") as err:
            load_profile(_ac_meter_file(tmp_path, bad))
        assert words in str(err.value) and "accuracy.ac_volts.band_hz" in str(err.value)
    dc_band = tmp_path / "dc.toml"
    dc_band.write_text('[instrument]\nrole = "dc_voltmeter"\nresource = "SIM::X"\n'
                       '[accuracy.dc_volts]\nband_hz = [20.0, 1e3]\n'
                       'ranges = [{ range = 1.0, percent_of_reading = 0.01 }]\n',
                       encoding="utf-8")
    with pytest.raises(InputError, match=r"\[accuracy.dc_volts.band_hz\] unknown key"):
        load_profile(dc_band)


def test_capture_refuses_a_frequency_outside_the_band_before_sending_anything(store):
    board = sample_board("line_receiver_cb")  # [signal] frequency 10 kHz
    sid = store.create_session(board)
    bench = SimulatedBench(board, noise=False, dmm_profile=load_profile(DMM))
    with pytest.raises(InputError) as err:
        Capture(board, store, sid, frequencies=[20.0, 1e5], **bench.capture_kwargs(
            scanner=True, gain=True))
    text = str(err.value)
    assert "100 kHz" in text and "20 Hz to 20 kHz" in text and str(DMM) in text
    assert len(text.splitlines()) == 1
    assert all(t.writes == [] for t in bench.transports.values())
    assert store.readings(sid) == []
    # the band's edges are inside it: 20 Hz and the board's 10 kHz are taken
    report = Capture(board, store, sid, gain=True, frequencies=[20.0],
                     **bench.capture_kwargs(scanner=True, gain=True)).run()
    assert [t.reading.frequency for t in report.taken if t.reading.quantity == "gain"] == [
        None, 20.0]


def test_capture_checks_the_boards_own_signal_frequency_too(store):
    board = sample_board("line_receiver_cb")  # [signal] frequency 10 kHz
    sid = store.create_session(board)
    narrow = InstrumentProfile.from_dict({
        "instrument": {"role": ["dc_voltmeter", "ac_voltmeter"], "resource": "SIM::DMM",
                       "name": "a narrow meter"},
        "accuracy": {"ac_volts": {"band_hz": [20.0, 5e3]}}})
    bench = SimulatedBench(board, noise=False, dmm_profile=narrow)
    with pytest.raises(InputError, match=r"10 kHz .* 20 Hz to 5 kHz \(a narrow meter\)"):
        Capture(board, store, sid, gain=True, **bench.capture_kwargs(gain=True))
    # DC readings alone need no band
    Capture(board, store, sid, **bench.capture_kwargs(scanner=True))


def test_open_bench_checks_the_band_before_opening_any_instrument(tmp_path):
    # The pyvisa-sim bench has no instrument at 10.9.9.9: opening it would fail, so the
    # band's refusal proves nothing was opened first.
    from reconcile.capture.plan import plan_readings

    board = sample_board("line_receiver_cb")
    meter = _ac_meter_file(tmp_path, "[20.0, 20e3]",
                           backend=f"{(HERE / 'instruments_sim_bench.yaml').as_posix()}@sim")
    plan = plan_readings(board, frequencies=[50e3])
    with pytest.raises(InputError, match=r"50 kHz is outside the AC meter's specified band"):
        open_bench(dmm=meter, board=board, plan=plan)


def test_cli_capture_refuses_a_frequency_outside_the_band_in_one_line(tmp_path):
    db_path = tmp_path / "cli.sqlite"
    board_file = SAMPLES / "line_receiver_cb.toml"
    with open_store(db_path) as db:
        sid = db.create_session(sample_board("line_receiver_cb"))
    common = ("capture", str(board_file), "--session", sid, "--store", str(db_path),
              "--simulate", str(board_file))
    result = run_cli(*common, "--dmm", str(DMM), "--frequencies", "100,100k")
    assert result.exit_code == 2 and result.crash is None
    assert len(result.message_lines) == 1
    line = result.message_lines[0]
    assert "100 kHz" in line and "20 Hz to 20 kHz" in line and "bench-dmm.toml" in line
    # the built-in simulated meter is specified to 300 kHz
    result = run_cli(*common, "--frequencies", "500k", "--json")
    assert result.exit_code == 2 and "500 kHz" in result.message_lines[0]
    assert "10 Hz to 300 kHz" in result.message_lines[0] and result.stdout == ""
    with open_store(db_path) as db:
        assert db.readings(sid) == []


# ----------------------------------------------------------------------------- typed readings
def _board_with_instruments(tmp_path: Path, listed: str) -> Path:
    text = (SAMPLES / "line_receiver_cb.toml").read_text(encoding="utf-8")
    text = text.replace('[bench]\nvoltmeter_ohms = "10M"\n',
                        f'[bench]\nvoltmeter_ohms = "10M"\ninstruments = [{listed}]\n')
    path = tmp_path / "board.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _readings(tmp_path: Path, rows: str) -> Path:
    path = tmp_path / "readings.csv"
    path.write_text("quantity,at,value,unit,uncertainty,instrument,note,frequency\n"
                    "voltage,b,1.2458,V,,DMM-A,,\nvoltage,e,0.6394,V,,DMM-A,,\n" + rows,
                    encoding="utf-8")
    return path


def test_a_typed_reading_outside_its_meters_band_is_kept_and_flagged(tmp_path):
    (tmp_path / "meters").mkdir()
    (tmp_path / "meters" / "bench-dmm.toml").write_text(DMM.read_text(encoding="utf-8"),
                                                        encoding="utf-8")
    board = _board_with_instruments(tmp_path, '"meters/bench-dmm.toml"')
    readings = _readings(tmp_path, "gain,,9.3,,0.1,Bench-DMM,,1k\n"       # inside: silent
                                   "gain,,5.1,,0.1,bench-dmm,,100k\n"       # line 5: outside
                                   "gain,,9.9,,0.1,scope CH1/CH2,,100k\n"   # not a listed meter
                                   "gain,,8.7,,0.1,bench DMM (invented Nullbench DM-65),,\n")
    inputs = AnalysisInputs.from_files(board, readings)
    (flagged,) = inputs.warnings
    assert f"{readings}:5: gain at 100 kHz" in flagged
    assert "20 Hz to 20 kHz" in flagged and "bench-dmm.toml" in flagged
    assert len(inputs.readings) == 6  # every reading kept
    # the board's [signal] frequency (10 kHz) is inside; a narrower band would flag it
    narrow = tmp_path / "meters" / "narrow.toml"
    narrow.write_text('[instrument]\nname = "old meter"\nrole = "ac_voltmeter"\n'
                      'resource = "SIM::X"\n[accuracy.ac_volts]\nband_hz = [20.0, 5e3]\n',
                      encoding="utf-8")
    board = _board_with_instruments(tmp_path, '"meters/narrow.toml"')
    readings = _readings(tmp_path, "input_resistance,,86,ohm,2,OLD METER,,\n")
    (flag,) = AnalysisInputs.from_files(board, readings).warnings
    assert "input_resistance at 10 kHz names instrument 'OLD METER'" in flag
    assert "20 Hz to 5 kHz" in flag


def test_a_stored_sessions_typed_readings_are_flagged_too(tmp_path, store):
    board = _board_with_instruments(tmp_path, f'"{DMM.as_posix()}"')
    sid = store.create_session(load_board(board))
    store.add_reading(sid, Reading.from_si("gain", "", 4.0, 0.1, instrument="bench-dmm",
                                           frequency=50e3), source="test")
    (flag,) = AnalysisInputs.from_session(sid, store=store).warnings
    assert flag.startswith(f"session {sid}: gain at 50 kHz") and "20 Hz to 20 kHz" in flag


def test_bench_instruments_must_be_paths_and_a_missing_one_is_said(tmp_path):
    with pytest.raises(InputError, match="bench.instruments is a list of instrument file"):
        load_board(_board_with_instruments(tmp_path, "3"))
    board = _board_with_instruments(tmp_path, '"nowhere.toml"')
    (said,) = AnalysisInputs.from_files(board, _readings(tmp_path, "")).warnings
    assert "nowhere.toml not found" in said and "[bench.instruments]" in said
    assert load_board(board).bench.instruments == (str(tmp_path / "nowhere.toml"),)
    assert AnalysisInputs.from_files(board).warnings == ()  # design mode: nothing to check
