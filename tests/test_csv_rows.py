"""CSV rows of the user's files: quoting that does not close, over-long lines and cells.

Issue 15 item 1. Outside reference for the quoting rules: RFC 4180 section 2 (a field
that starts with a double quote ends at the next lone double quote; a double quote inside
it is written twice), from memory. Our format deliberately narrows it: a quoted cell may
not hold a line break (docs/formats.md §3.2), so one quote left open cannot swallow the
rows after it. Python's csv module is the second reference: a row it reads on its own is
what our reader returns.
"""

from __future__ import annotations

import csv
from pathlib import Path

import pytest
from cli_support import run_cli
from store_support import BOARD_TOML, READINGS_CSV

from reconcile.data.csv_rows import MAX_CELL_CHARS, MAX_LINE_CHARS, lines, read_rows
from reconcile.data.readings import readings_from_text
from reconcile.data.sweep_file import sweeps_from_text
from reconcile.errors import InputErrors
from reconcile.store import sessions as commands

HEADER = "quantity,at,value,unit,uncertainty,instrument,note\n"

# Line 3 opens a quote that never closes; line 5's quoted note would close it for a
# reader that lets cells span lines, swallowing line 4 into one cell.
UNCLOSED = (
    HEADER
    + "voltage,vcc,4.98,V,,DMM,\n"
    + 'voltage,b,1.62,V,,DMM,"probe on R1 lead\n'
    + "voltage,e,0.98,V,,DMM,\n"
    + 'voltage,c,2.9,V,,DMM,"a quoted, closed note"\n'
)


def test_rfc4180_quoting_is_read_as_the_csv_module_reads_it():
    # RFC 4180 2.6-2.7: separators and doubled quotes inside a quoted field.
    line = 'voltage,b,1.6,V,,"DMM, hand-held","said ""approx"""'
    rows = read_rows(HEADER + line + "\n", "f.csv")
    assert rows.errors == []
    assert rows.body == [(2, next(csv.reader([line])))]
    assert rows.body[0][1][5:] == ["DMM, hand-held", 'said "approx"']


def test_the_unterminated_quote_is_refused_with_its_line_and_later_rows_still_read():
    with pytest.raises(InputErrors) as caught:
        readings_from_text(UNCLOSED + "voltage,nowhere/b/c,1,V,,,\n", path="bench.csv")
    errors = caught.value.errors
    assert [e.line for e in errors] == [3, 6]
    assert "does not close on this line" in errors[0].message
    assert str(errors[0]).startswith("bench.csv:3: ")
    assert "nowhere" in errors[1].message  # line 6 was read, not swallowed


def test_without_the_bad_row_every_other_row_is_a_reading():
    text = UNCLOSED.replace('"probe on R1 lead', "probe on R1 lead")
    found = readings_from_text(text, path="bench.csv")
    assert [r.at for r in found] == ["vcc", "b", "e", "c"]
    assert found[3].note == "a quoted, closed note"


def test_text_after_a_closing_quote_is_refused():
    with pytest.raises(InputErrors, match=r"f\.csv:2: text follows a closing quote"):
        readings_from_text(HEADER + 'voltage,b,"1.6"x,V,,,\n', path="f.csv")


@pytest.mark.parametrize("where", ["header", "row"])
def test_an_unclosed_quote_in_a_semicolon_export_is_refused(where):
    header = "quantity;at;value;unit;uncertainty\n"
    row = "voltage;b;1,62;V;\n"
    if where == "header":
        header = header.replace("at;", '"at;')
    else:
        row = row.replace("V;", '"V;')
    with pytest.raises(InputErrors, match="does not close") as caught:
        readings_from_text(header + row, path="export.csv")
    assert caught.value.errors[0].line == (1 if where == "header" else 2)


def test_a_cell_over_the_limit_is_refused_not_a_csv_field_limit_traceback():
    # the csv module's own field limit is 131072 characters; our limit is far below it
    assert MAX_CELL_CHARS < MAX_LINE_CHARS < csv.field_size_limit()
    long_note = "x" * (MAX_CELL_CHARS + 1)
    with pytest.raises(InputErrors, match=r"f\.csv:2: cell 7 has 2001 characters"):
        readings_from_text(HEADER + f"voltage,b,1.6,V,,,{long_note}\n", path="f.csv")
    fits = readings_from_text(HEADER + f"voltage,b,1.6,V,,,{'x' * MAX_CELL_CHARS}\n")
    assert len(fits[0].note) == MAX_CELL_CHARS


def test_a_line_past_the_csv_modules_field_limit_is_refused_with_its_line():
    huge = '"' + "y" * 200_000  # an open quote and a blob: once a csv.Error traceback
    text = HEADER + "voltage,b,1.6,V,,,ok\n" + f"voltage,e,1,V,,,{huge}\n"
    with pytest.raises(InputErrors, match=r"f\.csv:3: the line has 200017 characters"):
        readings_from_text(text, path="f.csv")


def test_only_newline_carriage_return_and_crlf_end_a_line():
    # a form feed or a Unicode line separator inside a cell does not renumber the lines
    text = "a\r\nb\x0cc\rd\u2028e\nf"
    assert list(lines(text)) == [(1, "a"), (2, "b\x0cc"), (3, "d\u2028e"), (4, "f")]
    assert list(lines("\ufeffa\n\n")) == [(1, "a"), (2, "")]


def test_the_sweep_file_refuses_an_unclosed_quote_with_its_line():
    text = (
        "device,vbe,ic,ib,note\n"
        "D1,0.60,100u,0.5u,\n"
        'D1,0.66,1m,5u,"hot\n'
        'D1,0.70,3m,15u,"a, b"\n'
    )
    with pytest.raises(InputErrors, match=r"s\.csv:3: a quoted cell does not close"):
        sweeps_from_text(text, path="s.csv")
    fixed = sweeps_from_text(text.replace('"hot', "hot"), path="s.csv")
    assert fixed.points.tolist() == [3]


def test_session_add_of_a_file_with_an_unclosed_quote_stores_nothing(tmp_path: Path):
    board = tmp_path / "stage.toml"
    board.write_text(BOARD_TOML, encoding="utf-8")
    store = tmp_path / "s.sqlite"
    sid = commands.new_session(board, store=store)["session"]
    rows = READINGS_CSV.splitlines(keepends=True)
    rows[2] = rows[2].rstrip("\n") + '"open quote\n'  # the note cell opens a quote
    bad = tmp_path / "bad.csv"
    bad.write_text("".join(rows), encoding="utf-8")
    result = run_cli("session", "add", sid, str(bad), "--store", str(store))
    assert result.exit_code == 2 and result.crash is None, result
    assert len(result.message_lines) == 1 and f"{bad}:3:" in result.stderr, result.stderr
    assert commands.show_session(sid, store=store)["readings"] == []
