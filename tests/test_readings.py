"""Readings CSV files (reconcile.readings) against the contract's section 3.

Default uncertainties are checked against the documented table: limits of error of a
4½-digit bench DMM (common practice) turned into a standard uncertainty by dividing by
√3, the rectangular distribution of JCGM 100:2008 (GUM) 4.3.7.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import pytest
import scipy.constants as sc
from boards import capacitor, divider_stage, table

from reconcile.model.board import Board
from reconcile.model.board_loader import board_from_text
from reconcile.errors import InputError, InputErrors
from reconcile.data.readings import (
    DEFAULT_UNCERTAINTY,
    QUANTITIES,
    Reading,
    default_uncertainty,
    load_readings,
    readings_from_text,
    readings_to_csv,
    standard_uncertainty,
)

CONTRACT_EXAMPLE = """\
quantity,at,value,unit,uncertainty,instrument,note
# a line starting with # is a comment
voltage,vcc,4.98,V,,,
voltage,b,1.62,V,,,
voltage,c/e,2.15,V,,,
current,VCC,0.54m,A,,,supply read-back
current,RC,0.33m,A,,,
gain,,11.2,,0.1,,
input_resistance,,79,ohm,3,,series-resistor method
resistance,R2,9.93k,ohm,,,measured out of circuit
temperature,,27,C,,,ambient
"""

BOARD = (
    divider_stage(vcc=5, r1="27k", r2="10k", rc="4k7", re="1k", device_name="d",
                  device_params={"IS": "5f", "beta": 150})
    + capacitor("C1", "in", "b", "10u") + capacitor("C2", "c", "out", "1u")
    + table("signal", input="in", output="out")
)


@pytest.fixture(scope="module")
def board() -> Board:
    return board_from_text(BOARD, path="amp.toml")


def _line_of(text: str, marker: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), 1) if marker in line)


def test_contract_example_parses(tmp_path: Path, board: Board) -> None:
    path = tmp_path / "readings.csv"
    path.write_text(CONTRACT_EXAMPLE, encoding="utf-8")
    readings = load_readings(path, board)
    assert [r.quantity for r in readings] == [
        "voltage", "voltage", "voltage", "current", "current", "gain",
        "input_resistance", "resistance", "temperature",
    ]
    assert [r.line for r in readings] == list(range(3, 12))
    by_line = {r.line: r for r in readings}
    assert by_line[3].at == "vcc" and by_line[3].value == 4.98 and by_line[3].unit == "V"
    assert by_line[5].at == "c/e"
    assert by_line[6].value == 0.54e-3 and by_line[6].note == "supply read-back"
    assert by_line[8].value == 11.2 and by_line[8].uncertainty == 0.1 and by_line[8].unit == ""
    assert by_line[9].value == 79.0 and by_line[9].uncertainty == 3.0
    assert by_line[10].at == "R2" and by_line[10].value == 9930.0
    # temperature stored in kelvin (Celsius zero from scipy.constants)
    assert by_line[11].value == pytest.approx(27 + sc.zero_Celsius)
    assert by_line[11].unit == "C" and by_line[11].uncertainty is None
    assert by_line[3].raw == ("voltage", "vcc", "4.98", "V", "", "", "", "", "")


def test_round_trip_text_readings_csv_readings(board: Board) -> None:
    first = readings_from_text(CONTRACT_EXAMPLE, board=board)
    text = readings_to_csv(first)
    # cell by cell: the same rows, without the comment line
    expected = "".join(
        line + "\n" for line in CONTRACT_EXAMPLE.splitlines() if not line.startswith("#")
    )
    assert text == expected
    again = readings_from_text(text, board=board)
    assert again == first
    assert [r.raw for r in again] == [r.raw for r in first]


def test_round_trip_of_readings_made_in_code() -> None:
    made = [
        Reading("voltage", "b/e", 0.652, "V", 0.0005, instrument="DMM-1"),
        Reading("current", "RC", 3.3e-4, "mA", 2e-6, note="via shunt, 1,0 ohm"),
        Reading("resistance", "R2", 9930.0, "kohm", None),
        Reading("capacitance", "C1", 9.7e-6, "uF", None),
        Reading("temperature", "", 300.15, "C", 0.5),
        Reading("temperature", "", 301.0, "K", None),
        Reading("gain", "", 11.9, "", None, device="D002"),
    ]
    text = readings_to_csv(made)
    assert text.splitlines()[0] == "quantity,at,value,unit,uncertainty,instrument,note,device"
    assert readings_from_text(text) == made


def test_export_follows_a_changed_value_not_the_stale_cells() -> None:
    (reading,) = readings_from_text("quantity,at,value,unit\ncurrent,RC,0.33,mA\n")
    changed = dataclasses.replace(reading, value=4.4e-4)
    text = readings_to_csv([changed])
    assert "current,RC,0.44,mA" in text
    assert readings_from_text(text) == [changed]


def test_device_column_only_when_used() -> None:
    plain = readings_from_text("quantity,value\ngain,10\n")
    assert readings_to_csv(plain).splitlines()[0] == (
        "quantity,at,value,unit,uncertainty,instrument,note"
    )
    lot = readings_from_text("Quantity , VALUE,Device\ngain,10,D001\ngain,11,D002\n")
    assert [r.device for r in lot] == ["D001", "D002"]
    assert readings_to_csv(lot).splitlines()[1] == "gain,,10,,,,,D001"


def test_units_prefixes_and_uncertainty_forms() -> None:
    text = (
        "quantity,at,value,unit,uncertainty\n"
        "current,RC,0.54,mA,0.01\n"  # bare uncertainty is in the reading's unit
        "current,RE,0.54m,A,2u\n"  # a value string stands for itself
        "resistance,R1,4k7,,1%\n"  # percent of the reading; IEC 60062 code
        "capacitance,C1,9.8,uF,\n"
        "voltage,gnd/b,-1.6,V,\n"  # ground is gnd (node 0 is refused, contract v2 §6.1)
        "temperature,,300,K,0.5 K\n"
        "temperature,,25,°C,1\n"
        "output_resistance,,1.5k,ohm,\n"
    )
    r = readings_from_text(text)
    assert r[0].value == pytest.approx(0.54e-3) and r[0].uncertainty == pytest.approx(1e-5)
    assert r[1].uncertainty == pytest.approx(2e-6)
    assert r[2].value == 4700.0 and r[2].uncertainty == pytest.approx(47.0)
    assert r[3].value == pytest.approx(9.8e-6)
    assert r[4].at == "gnd/b" and r[4].value == -1.6
    assert r[5].value == 300.0 and r[5].uncertainty == 0.5
    assert r[6].value == pytest.approx(25 + sc.zero_Celsius) and r[6].uncertainty == 1.0
    assert r[7].value == 1500.0


def test_comments_blank_lines_bom_and_header_case(tmp_path: Path) -> None:
    path = tmp_path / "r.csv"
    body = "# taken on the bench\n\n QUANTITY ,At,Value,Unit\n\n# comment\nvoltage,b,1.6,V\n,,,\n"
    path.write_bytes(b"\xef\xbb\xbf" + body.encode())
    (reading,) = load_readings(path)
    assert reading.line == 6 and reading.value == 1.6


# (id, header + rows, marker of the bad line, message fragment)
BAD_ROWS = [
    ("unknown-quantity", "votage,b,1.6,V", "votage", "did you mean 'voltage'"),
    ("supply-voltage", "supply_voltage,VCC,5,V", "supply_voltage", "supply's node"),
    ("unparseable-value", "voltage,b,1.6.2,V", "1.6.2", "cannot read"),
    ("empty-value", "voltage,b,,V", "voltage,b,,V", "has no value"),
    ("wrong-unit", "voltage,b,1.6,A", "voltage,b,1.6,A", "unit 'A' does not fit"),
    ("unit-in-value-and-column", "voltage,b,1.6 A,V", "1.6 A", "unknown unit"),
    ("negative-uncertainty", "gain,,11,,-0.1", "-0.1", "positive"),
    ("zero-uncertainty", "gain,,11,,0", "gain,,11,,0", "positive"),
    ("temperature-no-unit", "temperature,,27,,", "temperature,,27", "no unit"),
    ("negative-resistance", "resistance,R1,-5,ohm", "-5", "cannot be negative"),
    ("infinite-value", "resistance,R1,inf,ohm", "inf", "finite"),
    ("at-for-gain", "gain,out,11,,", "gain,out", "takes no 'at'"),
    ("missing-at", "current,,1m,A", "current,,1m", "needs 'at'"),
    ("a-a", "voltage,b/b,0,V", "b/b", "same node"),
    ("slash-for-current", "current,R1/R2,1m,A", "R1/R2", "voltage only"),
    ("too-many-cells", "voltage,b,1.6,V,,,,x,y", "x,y", "quote a cell"),
]


@pytest.mark.parametrize(
    ("row", "marker", "fragment"), [pytest.param(*c[1:], id=c[0]) for c in BAD_ROWS]
)
def test_bad_row_names_file_and_line(tmp_path: Path, row: str, marker: str, fragment: str) -> None:
    text = "quantity,at,value,unit,uncertainty,instrument,note\n# ok\nvoltage,c,2.1,V\n" + row
    text += "\n"
    path = tmp_path / "bad.csv"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputErrors) as caught:
        load_readings(path)
    (err,) = caught.value.errors
    assert err.line == _line_of(text, marker) == 4
    assert fragment in err.message
    assert str(err).startswith(f"{path}:4: ")


def test_all_bad_rows_are_reported_together() -> None:
    text = "quantity,at,value,unit,uncertainty\nvotage,b,1,V\nvoltage,b,1,V\ngain,,x\n"
    with pytest.raises(InputErrors) as caught:
        readings_from_text(text, path="r.csv")
    assert [e.line for e in caught.value.errors] == [2, 4]
    assert "r.csv:2:" in str(caught.value) and "r.csv:4:" in str(caught.value)


@pytest.mark.parametrize(
    ("header", "fragment"),
    [
        ("at,value,unit", "missing required column 'quantity'"),
        ("quantity,at,unit", "missing required column 'value'"),
        ("quantity,at,value,uncertainity", "did you mean 'uncertainty'"),
        ("quantity,value,value", "appears twice"),
        ("voltage,b,1.6,V", "the first line must be the header"),
    ],
)
def test_bad_header_names_the_header_line(header: str, fragment: str) -> None:
    text = f"# readings\n{header}\nvoltage,b,1.6,V\n"
    with pytest.raises(InputErrors) as caught:
        readings_from_text(text, path="h.csv")
    assert caught.value.line == 2 and caught.value.path == "h.csv"
    assert fragment in str(caught.value)


def test_empty_file_is_an_error() -> None:
    with pytest.raises(InputErrors, match="no header line"):
        readings_from_text("# nothing\n\n", path="e.csv")


@pytest.mark.parametrize(
    ("row", "fragments"),
    [
        ("voltage,bb,1.6,V", ["unknown node 'bb'", "did you mean 'b'", "vcc, b, c, e"]),
        ("voltage,VCC,5,V", ["VCC is a supply; its node is 'vcc'"]),
        ("voltage,b/x,1,V", ["unknown node 'x'"]),
        ("current,RX,1m,A", ["supplies: VCC", "resistors: R1, R2, RC, RE"]),
        ("current,C1,1m,A", ["not a supply or resistor ref"]),
        ("resistance,VCC,1k,ohm", ["resistors: R1, R2, RC, RE"]),
        ("capacitance,c1,1u,F", ["did you mean 'C1'", "capacitors: C1, C2"]),
        ("capacitance,C3,1u,F", ["capacitors: C1, C2"]),
    ],
)
def test_at_is_checked_against_the_board(board: Board, row: str, fragments: list[str]) -> None:
    with pytest.raises(InputErrors) as caught:
        readings_from_text(f"quantity,at,value,unit\n{row}\n", path="r.csv", board=board)
    (err,) = caught.value.errors
    assert err.path == "r.csv" and err.line == 2
    for fragment in fragments:
        assert fragment in err.message


def test_small_signal_readings_need_a_signal_table() -> None:
    divider = board_from_text(
        '[supplies.V]\nnode = "t"\nvolts = 1\n[resistors.R]\nnodes = ["t", "gnd"]\nohms = 1\n'
    )
    with pytest.raises(InputErrors, match=r"no \[signal\] table"):
        readings_from_text("quantity,value\ngain,3\n", board=divider)
    assert readings_from_text("quantity,value,unit\ntemperature,20,C\n", board=divider)


# ---------------------------------------------------------------- uncertainties
RECT = math.sqrt(3.0)  # JCGM 100:2008 4.3.7: limits ±a -> u = a/√3


@pytest.mark.parametrize(
    ("quantity", "value", "expected"),
    [
        # 4½-digit DMM, 20 000 counts; a count is range/20 000
        ("voltage", 1.62, (0.0005 * 1.62 + 2 * 2.0 / 20000) / RECT),  # 2 V range
        ("voltage", 4.98, (0.0005 * 4.98 + 2 * 20.0 / 20000) / RECT),  # 20 V range
        ("voltage", -0.15, (0.0005 * 0.15 + 2 * 0.2 / 20000) / RECT),  # 200 mV range
        ("voltage", 0.0, (2 * 0.2 / 20000) / RECT),
        ("current", 0.54e-3, (0.002 * 0.54e-3 + 2 * 2e-3 / 20000) / RECT),
        ("resistance", 9930.0, (0.001 * 9930.0 + 2 * 20e3 / 20000 + 0.1) / RECT),
        ("capacitance", 1e-5, 0.02 * 1e-5 / RECT),
        # two AC voltages at 1 % + 10 µV, v_in = 10 mV (JCGM 100:2008 eq. 10 for a ratio)
        ("gain", 11.2, math.hypot(11.2 * 110e-6, 0.01 * 0.112 + 10e-6) / 0.01),
        ("input_resistance", 79.0, 0.02 * 79.0),
        ("output_resistance", 1500.0, 0.02 * 1500.0),
        ("temperature", 300.15, 1.0),
    ],
)
def test_default_uncertainty_table(quantity: str, value: float, expected: float) -> None:
    reading = Reading(quantity, "x", value, "", None)
    assert default_uncertainty(reading) == pytest.approx(expected, rel=1e-12)
    assert standard_uncertainty(reading) == pytest.approx(expected, rel=1e-12)


def test_every_quantity_has_a_documented_default() -> None:
    assert set(DEFAULT_UNCERTAINTY) == set(QUANTITIES)
    assert all(rule.basis for rule in DEFAULT_UNCERTAINTY.values())


def test_given_uncertainty_wins_and_zero_relative_default_is_an_error() -> None:
    assert standard_uncertainty(Reading("gain", "", 11.0, "", 0.3)) == 0.3
    with pytest.raises(InputError, match="give one in the uncertainty column"):
        # 2 % of reading: nothing left at 0 (a gain has an absolute floor: not this case)
        default_uncertainty(Reading("input_resistance", "", 0.0, "", None, line=7))


def test_a_supplys_current_defaults_to_its_read_back_on_the_board(board: Board) -> None:
    # A bench supply's current display: ±(0.2 % of reading + 0.1 mA), rectangular
    # (common practice; JCGM 100:2008 4.3.7 for the √3). Far coarser than a DMM's
    # ±(0.2 % + 2 counts) on the 2 mA range, which a resistor's current keeps.
    supply = next(iter(board.supplies))
    resistor = next(iter(board.resistors))
    at_supply = Reading("current", supply, 0.54e-3, "A", None)
    at_resistor = Reading("current", resistor, 0.54e-3, "A", None)
    readback = (0.002 * 0.54e-3 + 0.1e-3) / RECT
    dmm = (0.002 * 0.54e-3 + 2 * 2e-3 / 20000) / RECT
    assert default_uncertainty(at_supply, board) == pytest.approx(readback, rel=1e-12)
    assert standard_uncertainty(at_supply, board) == pytest.approx(readback, rel=1e-12)
    assert default_uncertainty(at_resistor, board) == pytest.approx(dmm, rel=1e-12)
    assert default_uncertainty(at_supply) == pytest.approx(dmm, rel=1e-12)  # no board
    given = dataclasses.replace(at_supply, uncertainty=1e-6)
    assert standard_uncertainty(given, board) == 1e-6


def test_the_fit_weighs_a_supply_current_as_its_read_back(board: Board) -> None:
    from reconcile.inference.measure import observations_from

    supply = next(iter(board.supplies))
    (ob,) = observations_from([Reading("current", supply, 0.54e-3, "A", None)], board)
    assert ob.uncertainty == pytest.approx((0.002 * 0.54e-3 + 0.1e-3) / RECT, rel=1e-12)
