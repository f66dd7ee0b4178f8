"""One validation for every way a reading comes in (issue 15 item 6).

The readings loader, the store (``session add``, ``session correct``, a capture) and
``derive`` all apply :func:`reconcile.data.validation.reading_problems`; a reading one
of them refuses, every other refuses too, with the same words. Outside references:

- JCGM 100:2008 (GUM) 2.3.1 and 3.3.5, from memory: a standard uncertainty is the
  positive square root of a variance, so zero and negative values are not uncertainties;
- SCPI-1999, from memory: a meter reports an overload as 9.9E37, which must never be
  stored as a voltage (the drivers already refuse it; the rule refuses it again);
- IEEE 754 (Python floats): 1e308 squared overflows, 1e-200 squared underflows to 0
  (what made chi-square overflow and the fit crash).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from cli_support import run_cli
from store_support import BOARD_TOML

from reconcile.capture.run import Capture, CaptureInterrupted
from reconcile.data.derived_readings import gain_from_ac, input_resistance_series_method
from reconcile.data.readings import Reading, readings_from_text
from reconcile.data.validation import reading_problems
from reconcile.errors import InputError, InputErrors
from reconcile.instruments.dc_voltmeter import DcVoltmeter
from reconcile.instruments.fake import FakeTransport
from reconcile.instruments.profile import load_profile
from reconcile.model.board_loader import board_from_text
from reconcile.model.quantities import MIN_RELATIVE_UNCERTAINTY, REGISTRY
from reconcile.store import sessions as commands
from reconcile.store.repository import open_store

SAMPLES = Path(__file__).resolve().parent.parent / "sample_data"
HEADER = "quantity,at,value,unit,uncertainty,instrument,note\n"

#: (readings-file row, the same reading made in code, words of the refusal)
BAD = [
    ("voltage,b,1.5,V,1e-200,,", Reading("voltage", "b", 1.5, "V", 1e-200), "below the smallest"),
    ("voltage,b,1.5,V,1e-12,,", Reading("voltage", "b", 1.5, "V", 1e-12), "below the smallest"),
    ("voltage,b,1e308,V,,,", Reading("voltage", "b", 1e308, "V", None), "physical limits"),
    ("voltage,b,9.9e37,V,0.1,,", Reading("voltage", "b", 9.9e37, "V", 0.1), "physical limits"),
    ("voltage,b,1.5,V,1e300,,", Reading("voltage", "b", 1.5, "V", 1e300), "larger than any"),
    ("current,RC,20,A,,,", Reading("current", "RC", 20.0, "A", None), "physical limits"),
    ("temperature,,1e308,K,,,", Reading("temperature", "", 1e308, "K", None), "physical limits"),
    ("temperature,,1,K,,,", Reading("temperature", "", 1.0, "K", None), "physical limits"),
    ("resistance,R2,1e15,ohm,,,", Reading("resistance", "R2", 1e15, "ohm", None),
     "physical limits"),
    ("gain,,1e9,,1e3,,", Reading("gain", "", 1e9, "", 1e3), "physical limits"),
]


def test_the_limits_are_the_documented_ones():
    doc = (SAMPLES.parent / "docs" / "formats.md").read_text(encoding="utf-8")
    section = doc[doc.index("### 3.3"):]
    section = section[: section.index("\n## ")]
    for q in REGISTRY.values():
        if q.readable:
            assert f"| {q.name} |" in section, q.name
    assert "1e-9" in section and MIN_RELATIVE_UNCERTAINTY == 1e-9


@pytest.mark.parametrize(("row", "reading", "words"), BAD, ids=[b[0] for b in BAD])
def test_the_loader_and_the_rule_refuse_the_same_reading(row, reading, words):
    with pytest.raises(InputErrors) as caught:
        readings_from_text(HEADER + row + "\n", path="bench.csv")
    assert caught.value.errors[0].line == 2 and words in caught.value.errors[0].message
    problems = reading_problems(reading)
    assert problems and words in problems[0]


@pytest.mark.parametrize(("row", "reading", "words"), BAD, ids=[b[0] for b in BAD])
def test_the_store_refuses_what_the_loader_refuses(tmp_path, row, reading, words):
    with open_store(tmp_path / "s.sqlite") as db:
        sid = db.create_session(board_from_text(BOARD_TOML, "stage.toml"))
        with pytest.raises(InputError, match=words):
            db.add_reading(sid, reading)
        assert db.readings(sid) == []


def test_good_readings_pass_the_rule():
    for reading in (Reading("voltage", "b", 0.0, "V", 1e-6), Reading("voltage", "b", -1.2, "V", 2e-3),
                    Reading("temperature", "", 300.0, "K", 1.0), Reading("gain", "", 12.0, "", None)):
        assert reading_problems(reading) == []


@pytest.mark.parametrize("note", ["line one\nline two", "tab\tok but \x07 bell", "x" * 2001])
def test_text_that_could_not_be_exported_and_read_back_is_refused(tmp_path, note):
    reading = Reading("voltage", "b", 1.5, "V", 1e-3, note=note)
    with open_store(tmp_path / "s.sqlite") as db:
        sid = db.create_session(board_from_text(BOARD_TOML, "stage.toml"))
        with pytest.raises(InputError, match="the note"):
            db.add_reading(sid, reading)


def test_session_correct_refuses_a_zero_uncertainty_and_keeps_the_old_reading(tmp_path):
    board = tmp_path / "stage.toml"
    board.write_text(BOARD_TOML, encoding="utf-8")
    good = tmp_path / "good.csv"
    good.write_text(HEADER + "voltage,b,1.5,V,,,\n", encoding="utf-8")
    store = tmp_path / "s.sqlite"
    sid = commands.new_session(board, store=store)["session"]
    rid = commands.add_readings_file(sid, good, store=store)["ids"][0]
    for row in ("voltage,b,1.5,V,0,,", "voltage,b,1.5,V,1e-200,,"):
        result = run_cli("session", "correct", sid, str(rid), row, "--store", str(store))
        assert result.exit_code == 2 and result.crash is None, result
        assert len(result.message_lines) == 1 and "uncertainty" in result.stderr
    shown = commands.show_session(sid, store=store)["readings"]
    assert [r["id"] for r in shown] == [rid]


def test_a_capture_refuses_an_absurdly_small_uncertainty_and_stores_nothing(tmp_path):
    # an instrument file with a slip in its accuracy table (1e-12 % where 0.012 % was meant)
    # and a meter that answers the same value every time (no spread): u ~ 1e-14 V
    text = (SAMPLES / "instruments" / "bench-dmm.toml").read_text(encoding="utf-8")
    text = text.replace("percent_of_reading = 0.008, percent_of_range = 0.001",
                        "percent_of_reading = 1e-12, percent_of_range = 0")
    dmm = tmp_path / "dmm.toml"
    dmm.write_text(text, encoding="utf-8")
    board = board_from_text(BOARD_TOML, "stage.toml")
    meter = DcVoltmeter(
        FakeTransport({"MEAS:VOLT:DC?": ["1.5"] * 10, "*IDN?": "Nullbench,TEST,T1,1.0"},
                      resource="TEST::DMM"), load_profile(dmm))
    with open_store(tmp_path / "s.sqlite") as db:
        sid = db.create_session(board)
        run = Capture(board, db, sid, voltmeter=meter, gain=False, input_resistance=False,
                      prompt=lambda _step: "", sleep=lambda _s: None)
        with pytest.raises(CaptureInterrupted) as caught:
            run.run()
        assert caught.value.exit_code == 2
        assert "below the smallest" in str(caught.value)
        assert db.readings(sid) == []


@pytest.mark.parametrize(
    ("compute", "args", "key"),
    [
        (gain_from_ac, (0.01, 0.0, 1.0, 0.0), "gain"),  # no uncertainty at all
        (gain_from_ac, (1e-300, 1e-303, 1.0, 1e-3), "gain"),  # gain 1e300
        (gain_from_ac, (1e308, 1.0, 1e308, 1.0), "v_in"),  # once an OverflowError
        (input_resistance_series_method, (1.0, 1e-3, 0.5, 1e-3, 1e-300, 0.0), "r_series"),
        (input_resistance_series_method, (1.0, 1e-3, 0.5, 1e-3, 0.0, 0.0), "r_series"),
        (input_resistance_series_method, (1.0, 0.0, 0.999999999999, 0.0, 1e9, 0.0),
         "input_resistance"),
    ],
)
def test_derived_readings_refuse_what_the_loader_would_refuse(compute, args, key):
    with pytest.raises(InputError) as caught:
        compute(*args)
    assert caught.value.key == key


@pytest.mark.parametrize(
    "args",
    [
        ["gain", "--vin", "10m", "--vout", "1", "--u-vin", "0", "--u-vout", "0"],
        ["gain", "--vin", "1e-300", "--vout", "1e300"],
        ["gain", "--vin", "1e308", "--vout", "1e308"],
        ["input-resistance", "--v1", "1", "--v2", "0.5", "--series-resistor", "0"],
        ["input-resistance", "--v1", "1", "--v2", "0.5", "--series-resistor", "1e-300"],
    ],
)
def test_derive_prints_one_line_and_exits_2_instead_of_a_row_the_loader_refuses(args):
    result = run_cli("derive", *args)
    assert result.exit_code == 2 and result.crash is None, result
    assert result.stdout == "" and len(result.message_lines) == 1, result


def test_a_row_derive_prints_loads_back():
    result = run_cli("derive", "gain", "--vin", "10.2m", "--vout", "0.118")
    assert result.exit_code == 0, result
    (reading,) = readings_from_text(result.stdout, path="<derive>")
    assert reading.quantity == "gain"
    # GUM 7.2.6: the value is rounded to the last digit of a two-digit uncertainty
    # u = hypot(G·112 µV, 1.19 mV)/10.2 mV = 0.172 (1 % + 10 µV each, JCGM 100 eq. 10)
    assert reading.uncertainty == pytest.approx(0.17)
    assert abs(reading.value - 0.118 / 10.2e-3) <= 0.005


def test_a_session_poisoned_by_an_earlier_version_is_refused_by_name_not_a_crash(tmp_path):
    import sqlalchemy as sa

    from reconcile.store.schema import T_READINGS

    board = tmp_path / "stage.toml"
    board.write_text(BOARD_TOML, encoding="utf-8")
    good = tmp_path / "good.csv"
    good.write_text(HEADER + "voltage,b,1.5,V,,,\n", encoding="utf-8")
    store = tmp_path / "s.sqlite"
    sid = commands.new_session(board, store=store)["session"]
    rid = commands.add_readings_file(sid, good, store=store)["ids"][0]
    # what an earlier version let in: uncertainty 0, written behind the store's back
    engine = sa.create_engine(f"sqlite:///{store}")
    with engine.begin() as conn:
        conn.execute(sa.text("DROP TRIGGER IF EXISTS readings_no_update"))
        row = conn.execute(sa.select(T_READINGS).where(T_READINGS.c.id == rid)).one()._asdict()
        row.update(id=None, uncertainty=0.0, supersedes=rid)
        conn.execute(T_READINGS.insert().values(**{k: v for k, v in row.items() if k != "id"}))
    engine.dispose()
    result = run_cli("fit", "--session", sid, "--store", str(store))
    assert result.exit_code == 2 and result.crash is None, result
    assert "session correct" in result.stderr and len(result.message_lines) == 1
    assert len(commands.show_session(sid, store=store)["readings"]) == 1  # nothing lost


def test_a_reading_made_in_code_is_held_to_the_rule_before_any_fit():
    from reconcile.inference.fitting import fit_board

    board = board_from_text(BOARD_TOML, "stage.toml")
    poisoned = [Reading.from_si("voltage", "b", 1.5, 1e-200),
                Reading.from_si("voltage", "c", 5.0, 0.01)]
    with pytest.raises(InputErrors, match="below the smallest"):
        fit_board(board, poisoned)
