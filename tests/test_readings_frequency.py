"""Readings taken at their own frequency, gain in dB, and the store's frequency column.

Outside references, each named beside its check:

- the first-order RC high-pass, |H| = 1/sqrt(1 + (f_c/f)^2) with f_c = 1/(2*pi*R*C)
  (Horowitz & Hill, "The Art of Electronics", chapter 1, from memory); exact;
- a decibel level L of a voltage ratio r is L = 20*log10(r), and its standard
  uncertainty carries over by first-order propagation, u(r) = r*ln(10)/20*u(L)
  (JCGM 100:2008, GUM 5.1.2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import sqlalchemy as sa
from store_support import BOARD_TOML, pg_database

from reconcile.data.readings import Reading, readings_from_text, readings_to_csv
from reconcile.errors import InputErrors
from reconcile.inference.measure import MeasurementModel, observations_from
from reconcile.model.board_loader import board_from_text
from reconcile.store import connection as store_connection
from reconcile.store.repository import open_store
from reconcile.store.schema import SCHEMA_VERSION, T_READINGS

HIGH_PASS = """
[supplies.VCC]
node = "vcc"
volts = 5
[resistors.RBIAS]
nodes = ["vcc", "gnd"]
ohms = "10k"
[capacitors.C1]
nodes = ["in", "out"]
farads = "100n"
[resistors.R1]
nodes = ["out", "gnd"]
ohms = "10k"
[signal]
input = "in"
output = "out"
source_ohms = 50
frequency = "10k"
"""


def test_gain_readings_are_predicted_at_their_own_frequency_rc_high_pass() -> None:
    # Reference: first-order high-pass |H| = 1/sqrt(1 + (f_c/f)^2), f_c = 1/(2*pi*R*C)
    # (Horowitz & Hill, from memory); a blank frequency is [signal] frequency (10 kHz).
    board = board_from_text(HIGH_PASS)
    text = ("quantity,at,value,unit,uncertainty,frequency\n"
            "gain,,0.5,,0.01,20\ngain,,0.8,,0.01,159\ngain,,1.0,,0.01,\n"
            "gain,,-3,dB,0.1,1k\ngain,,0.9,,0.01,10 kHz\n")
    readings = readings_from_text(text, board=board)
    model = MeasurementModel(board, observations_from(readings))
    predicted = model.predict(model.space.prior_mean[None, :])[0]  # the nominal board
    fc = 1.0 / (2.0 * math.pi * 10e3 * 100e-9)
    for f, p in zip([20.0, 159.0, 10e3, 1e3, 10e3], predicted, strict=True):
        assert p == pytest.approx(1.0 / math.sqrt(1.0 + (fc / f) ** 2), rel=1e-9)
    assert model.frequencies == (20.0, 159.0, 1e3, 1e4)


def test_a_db_gain_reading_is_the_ratio_with_its_uncertainty_by_gum() -> None:
    # Reference: r = 10^(L/20), u(r) = r*ln(10)/20*u(L) (JCGM 100:2008, GUM 5.1.2).
    [r] = readings_from_text("quantity,value,unit,uncertainty\ngain,20.0,dB,0.2\n")
    assert r.value == pytest.approx(10.0, rel=1e-15)
    assert r.uncertainty == pytest.approx(10.0 * math.log(10.0) / 20.0 * 0.2, rel=1e-12)
    again = readings_from_text(readings_to_csv([r]))[0]
    assert again == r
    made = Reading("gain", "", 2.0, "dB", 0.02)  # written back in its own unit
    line = readings_to_csv([made]).splitlines()[1].split(",")
    assert float(line[2]) == pytest.approx(20.0 * math.log10(2.0), rel=1e-12)
    assert float(line[4]) == pytest.approx(20.0 / math.log(10.0) * 0.02 / 2.0, rel=1e-11)


@pytest.mark.parametrize(("row", "message"), [
    ("voltage,out,1.2,V,,1k", "voltage takes no frequency"),
    ("gain,,2,,,-5", "frequency '-5' must be a positive"),
    ("gain,,2,,,1kV", "frequency"),
    ("input_resistance,,20,dB,,", "only gain takes dB"),
    ("gain,,20,dB,5%,", "bare number of dB"),
])
def test_bad_frequency_and_db_cells_name_the_line(row: str, message: str) -> None:
    with pytest.raises(InputErrors) as info:
        readings_from_text("quantity,at,value,unit,uncertainty,frequency\n" + row + "\n",
                           path="r.csv")
    [err] = info.value.errors
    assert err.line == 2 and message in err.message


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def location(request: pytest.FixtureRequest, tmp_path) -> str:
    if request.param == "sqlite":
        yield str(tmp_path / "sessions.sqlite")
        return
    with pg_database() as url:
        yield url


def _v2_row(sid: str) -> dict:
    return {"session_id": sid, "kind": "reading", "quantity": "gain", "at": "", "value": 9.5,
            "unit": "", "uncertainty": None, "instrument": "", "note": "older", "device": "",
            "raw": '["gain", "", "9.5", "", "", "", "older", ""]', "source": "old.csv",
            "source_line": 2, "taken_at": "2026-01-01T00:00:00.000Z",
            "stored": "2026-01-01T00:00:00.000Z", "supersedes": None}


def test_version_2_store_gains_the_frequency_column_and_loses_nothing(
        location: str, monkeypatch) -> None:
    board = board_from_text(BOARD_TOML, "board.toml")
    monkeypatch.setattr(store_connection, "SCHEMA_VERSION", 2)
    with open_store(location) as store:  # a store as version 2 wrote it
        assert store.schema_version() == 2
        sid = store.create_session(board)
    engine = sa.create_engine(sa.make_url(location) if "://" in location
                              else f"sqlite:///{location}")
    try:
        with engine.begin() as conn:
            conn.execute(sa.insert(T_READINGS).values(**_v2_row(sid)))
    finally:
        engine.dispose()
    with open_store(location, read_only=True) as store:  # a reader of version 2
        [old] = store.readings(sid)
        assert old.reading.frequency is None
    monkeypatch.setattr(store_connection, "SCHEMA_VERSION", SCHEMA_VERSION)
    with open_store(location) as store:
        assert store.schema_version() == SCHEMA_VERSION == 4
        new = readings_from_text("quantity,value,unit,uncertainty,frequency\n"
                                 "gain,-1.5,dB,0.1,50\n", path="new.csv")
        store.import_readings(sid, new, file_sha256="d" * 64, source="new.csv")
        stored = store.readings(sid)
        exported = store.export_csv(sid)
    assert [s.reading.note for s in stored] == ["older", ""]
    assert stored[0].reading.value == 9.5 and stored[0].reading.frequency is None
    assert stored[1].reading == new[0] and stored[1].reading.frequency == 50.0
    assert exported == ("quantity,at,value,unit,uncertainty,instrument,note,frequency\n"
                        "gain,,9.5,,,,older,\ngain,,-1.5,dB,0.1,,,50\n")
    back = readings_from_text(exported)
    assert back[1] == new[0] and np.isclose(back[0].value, 9.5)
