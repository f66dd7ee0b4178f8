"""A file added to a session before the store kept import records (schema version 1) is
not stored twice when it is added again after the upgrade.

The version-1 store comes from tests/reference/store_v1.sql (written by version 0.1.0).
A second, open session is then written into it the way version 0.1.0 stored a
``session add``: one row per reading with its file name and line, and no import record.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest
from store_support import BOARD_TOML, READINGS_CSV

from reconcile.data.readings import readings_from_text
from reconcile.errors import InputError
from reconcile.model.board_loader import board_from_text
from reconcile.store.repository import open_store
from reconcile.store.schema import SCHEMA_VERSION

TESTS = Path(__file__).resolve().parent
SID = "S-LEGACY01"
STAMP = "2026-12-02T02:00:00.000Z"


def _readings():
    board = board_from_text(BOARD_TOML, "board.toml")
    return readings_from_text(READINGS_CSV, path="readings.csv", board=board)


def _version_1_store(tmp_path: Path, positions: list[int], shift: float = 0.0) -> Path:
    """The reference version-1 store plus an open session holding the readings file's
    rows at ``positions``, as version 0.1.0 stored them (each value plus ``shift``)."""
    path = tmp_path / "v1.sqlite"
    readings = _readings()
    with sqlite3.connect(path) as conn:
        conn.executescript((TESTS / "reference" / "store_v1.sql").read_text(encoding="utf-8"))
        conn.execute("INSERT INTO sessions VALUES (?, 1, 'board.toml', 'FX-2', 'fixture', "
                     "'', ?, '0.1.0')", (SID, STAMP))
        for p in positions:
            r = readings[p]
            conn.execute(
                "INSERT INTO readings (session_id, kind, quantity, at, value, unit, "
                "uncertainty, instrument, note, device, raw, source, source_line, taken_at, "
                "stored, supersedes) VALUES (?, 'reading', ?, ?, ?, ?, ?, ?, ?, ?, ?, "
                "'readings.csv', ?, ?, ?, NULL)",
                (SID, r.quantity, r.at, float(r.value) + shift, r.unit, r.uncertainty, r.instrument,
                 r.note, r.device, json.dumps(list(r.raw)), r.line, STAMP, STAMP))
    conn.close()
    return path


def _add(path: Path, *, again: bool = False):
    with open_store(path) as store:
        outcome = store.import_readings(SID, _readings(), file_sha256="d" * 64,
                                        source="readings.csv", again=again)
        return outcome, store.readings(SID)


def test_a_whole_file_added_at_version_1_is_refused_not_stored_twice(tmp_path):
    path = _version_1_store(tmp_path, list(range(7)))
    with pytest.raises(InputError, match=r"already holds all 7 readings of this file "
                                         r"\(lines 2-8, stored from readings.csv") as err:
        _add(path)
    assert err.value.key == "again"
    with open_store(path) as store:
        assert store.schema_version() == SCHEMA_VERSION
        assert len(store.readings(SID)) == 7  # nothing written by the refusal
    outcome, view = _add(path, again=True)  # asked for: a second copy
    assert len(outcome.ids) == 7 and len(view) == 14


def test_an_import_cut_short_at_version_1_resumes_with_the_missing_rows(tmp_path):
    path = _version_1_store(tmp_path, [0, 1, 2])
    outcome, view = _add(path)
    assert outcome.resumed and outcome.already_stored == 3 and len(outcome.ids) == 4
    assert outcome.record.complete and outcome.record.stored == 7
    got = [(s.reading.quantity, s.reading.at, s.reading.value) for s in view]
    assert got == [(r.quantity, r.at, r.value) for r in _readings()]  # file order, once each
    with pytest.raises(InputError, match="already added"):  # now a recorded, whole import
        _add(path)


def test_rows_that_match_only_in_part_are_refused_naming_them(tmp_path):
    path = _version_1_store(tmp_path, [1, 4])
    with pytest.raises(InputError, match=r"already holds 2 of this file's 7 readings "
                                         r"\(lines 3-6"):
        _add(path)


def test_readings_of_another_file_are_not_taken_for_this_one(tmp_path):
    path = _version_1_store(tmp_path, [0, 1], shift=1e-3)  # same lines, other values
    outcome, view = _add(path)
    assert outcome.resumed is False and len(outcome.ids) == 7 and len(view) == 9
