"""Tests of reconcile.store.sessions, the logic behind ``reconcile session ...``.

Reference: the contract's section 5 (``session new`` prints ``{"session": ID}``; ``session
export`` prints the readings as a readings file, section 3).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from store_support import BOARD_TOML, READINGS_CSV

from reconcile.store import sessions as commands
from reconcile.errors import InputError, InputErrors


@pytest.fixture
def files(tmp_path: Path) -> dict[str, Path]:
    board = tmp_path / "stage.toml"
    board.write_text(BOARD_TOML, encoding="utf-8")
    readings = tmp_path / "bench.csv"
    readings.write_text(READINGS_CSV, encoding="utf-8")
    return {"board": board, "readings": readings, "store": tmp_path / "sessions.sqlite"}


def test_new_add_export_show_list_end(files):
    store = files["store"]
    created = commands.new_session(files["board"], serial="SN-7", operator="bo", store=store)
    sid = created["session"]
    added = commands.add_readings_file(sid, files["readings"], store=store)
    exported = commands.export_session(sid, store=store)
    shown = commands.show_session(sid, store=store)
    listed = commands.list_sessions(store=store)
    ended = commands.end_session(sid, store=store)
    assert list(created) == ["session"]
    assert added["added"] == 7 and len(added["ids"]) == 7
    assert exported == READINGS_CSV
    assert shown["serial"] == "SN-7" and shown["board"]["path"] == str(files["board"])
    assert [r["id"] for r in shown["readings"]] == added["ids"]
    assert listed["store"] == str(store)
    assert [(s["session"], s["readings"]) for s in listed["sessions"]] == [(sid, 7)]
    assert ended["session"] == sid and ended["ended"].endswith("Z")
    for result in (created, added, shown, listed, ended):
        json.dumps(result, allow_nan=False)  # what --json prints


def test_a_bad_readings_file_stores_nothing(files, tmp_path):
    store = files["store"]
    sid = commands.new_session(files["board"], store=store)["session"]
    bad = tmp_path / "bad.csv"
    bad.write_text(READINGS_CSV + "voltage,nowhere,1.0,V,,,\n", encoding="utf-8")
    with pytest.raises(InputErrors, match="nowhere"):
        commands.add_readings_file(sid, bad, store=store)
    assert commands.show_session(sid, store=store)["readings"] == []


def test_correct_and_retract_by_row(files):
    store = files["store"]
    sid = commands.new_session(files["board"], store=store)["session"]
    ids = commands.add_readings_file(sid, files["readings"], store=store)["ids"]
    fixed = commands.correct_reading(sid, ids[1], "voltage,b,1.52,V,2m,DMM-1,settled",
                                     store=store)
    gone = commands.retract_reading(sid, ids[0], note="meter not zeroed", store=store)
    lines = commands.export_session(sid, store=store).splitlines()
    assert fixed["supersedes"] == ids[1] and gone["retracted"] == ids[0]
    assert lines[1] == "voltage,b,1.52,V,2m,DMM-1,settled"
    assert lines[2:] == READINGS_CSV.splitlines()[3:]
    with pytest.raises(InputErrors, match="nowhere"):
        commands.correct_reading(sid, ids[2], "voltage,nowhere,1,V", store=store)


def test_analysis_inputs_and_record(files):
    store = files["store"]
    sid = commands.new_session(files["board"], store=store)["session"]
    commands.add_readings_file(sid, files["readings"], store=store)
    board, readings, digest = commands.analysis_inputs(sid, store=store)
    recorded = commands.record_analysis(sid, "diagnose", {"hypotheses": []},
                                        inputs_sha256=digest, store=store)
    again = commands.analysis_inputs(sid, store=store)[2]
    shown = commands.show_analysis(recorded["analysis"], store=store)
    assert board.title == "Store test stage (invented)" and len(readings) == 7
    assert again == digest and len(digest) == 64
    assert shown["kind"] == "diagnose" and shown["result"] == {"hypotheses": []}
    assert shown["inputs_sha256"] == digest
    assert commands.list_sessions(store=store)["sessions"][0]["analyses"] == 1


def test_a_missing_session_exits_2(files):
    with pytest.raises(InputError) as info:
        commands.export_session("S-AAAAAAAA", store=files["store"])
    assert info.value.exit_code == 2


def test_importing_the_commands_does_not_import_sqlalchemy():
    code = ("import sys, reconcile.store.sessions; "
            "print(sorted(m for m in sys.modules if m.split('.')[0] in "
            "('sqlalchemy', 'psycopg', 'platformdirs')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    assert out.strip() == "[]"
