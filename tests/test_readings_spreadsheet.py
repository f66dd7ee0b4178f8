"""Readings files as spreadsheets save them (reconcile/data/csv_dialect.py).

Reference: the contract's own example file (docs/formats.md §3), written the way a
spreadsheet set to a decimal-comma language exports "CSV" (common practice: ';' between
cells, ',' as the decimal mark, CRLF line ends, a byte-order mark, and an empty cell for
every unused column at the end of each line). Reading the export must give exactly the
readings of the plain file; what cannot be read is refused with the hint "use commas".
"""

from __future__ import annotations

import pytest

from reconcile.data.readings import load_readings, readings_from_text
from reconcile.errors import InputError, InputErrors

PLAIN = """\
quantity,at,value,unit,uncertainty,instrument,note
# a line starting with # is a comment
voltage,vcc,4.98,V,,,
voltage,b,1.62,V,,,
voltage,c/e,2.15,V,0.0015,,
current,VCC,0.54m,A,,,supply read-back
current,RC,0.33m,A,1.5%,,
gain,,11.2,,0.1,,
input_resistance,,79,ohm,3,,"series-resistor method, 1k"
resistance,R2,9.93k,ohm,,,measured out of circuit
temperature,,27,C,,,ambient
"""

# what the spreadsheet writes: BOM, ';', decimal commas, CRLF, trailing empty columns
EXPORT = (
    "\ufeffquantity;at;value;unit;uncertainty;instrument;note;;\r\n"
    "# a line starting with # is a comment;;;;;;;;\r\n"
    "voltage;vcc;4,98;V;;;;;\r\n"
    "voltage;b;1,62;V;;;;;\r\n"
    "voltage;c/e;2,15;V;0,0015;;;;\r\n"
    "current;VCC;0,54m;A;;;supply read-back;;\r\n"
    "current;RC;0,33m;A;1,5%;;;;\r\n"
    "gain;;11,2;;0,1;;;;\r\n"
    "input_resistance;;79;ohm;3;;series-resistor method, 1k;;\r\n"
    "resistance;R2;9,93k;ohm;;;measured out of circuit;;\r\n"
    "temperature;;27;C;;;ambient;;\r\n"
)


def _key(r):
    return (r.quantity, r.at, r.value, r.unit, r.uncertainty, r.instrument, r.note)


def test_semicolon_decimal_comma_export_reads_as_the_plain_file(tmp_path):
    path = tmp_path / "export.csv"
    path.write_bytes(EXPORT.encode("utf-8"))
    notices: list[str] = []
    got = load_readings(path, notices=notices)
    want = readings_from_text(PLAIN)
    assert [_key(r) for r in got] == [_key(r) for r in want]
    # the loader says what it did, once
    assert len(notices) == 1 and "';' between cells" in notices[0] and "decimal comma" in notices[0]
    # the note keeps its comma: only number columns take a decimal comma
    assert got[6].note == "series-resistor method, 1k"


def test_plain_file_says_nothing():
    notices: list[str] = []
    readings_from_text(PLAIN, notices=notices)
    assert notices == []


def test_trailing_empty_columns_are_ignored_in_a_comma_file():
    text = "quantity,at,value,unit,,,\nvoltage,b,1.2,V,,,\ngain,,9.5,,,,\n"
    got = readings_from_text(text)
    assert [(r.quantity, r.at, r.value) for r in got] == [("voltage", "b", 1.2), ("gain", "", 9.5)]


@pytest.mark.parametrize(
    ("text", "words"),
    [
        # a thousands separator and a decimal mark: ambiguous, refused
        ("quantity;at;value;unit\nresistance;R2;9.930,5;ohm\n", ("point and a comma",)),
        # tabs between cells
        ("quantity\tat\tvalue\nvoltage\tb\t1.2\n", ("tabs",)),
        # a decimal comma that is not a number
        ("quantity;at;value;unit\nvoltage;b;1,2,3;V\n", ("decimal comma",)),
    ],
)
def test_unreadable_spreadsheet_exports_are_refused_with_use_commas(text, words):
    with pytest.raises((InputError, InputErrors)) as info:
        readings_from_text(text, path="bench.csv")
    message = str(info.value)
    assert "bench.csv:" in message and "use commas" in message
    for w in words:
        assert w in message


def test_node_0_in_a_reading_is_refused_with_the_hint_gnd():
    # contract version 2, section 6.1: ground is gnd, node 0 is refused with that hint
    with pytest.raises(InputErrors, match="write gnd"):
        readings_from_text("quantity,at,value,unit\nvoltage,b/0,1.2,V\n", path="r.csv")
