"""Imports of readings files: recorded by file hash and rows, resumed after a crash,
refused when repeated, forced with ``--again``.

References: SHA-256 from FIPS 180-4 (checked through :mod:`hashlib`); SQLite's
documentation for WAL with ``synchronous=NORMAL`` (a committed transaction survives an
application crash); resuming an interrupted import from its committed part is common
practice for measurement logs.
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import sqlalchemy as sa
from store_support import BOARD_TOML, READINGS_CSV, pg_database

from reconcile.data.readings import readings_from_text
from reconcile.errors import InputError, StoreError
from reconcile.model.board_loader import board_from_text
from reconcile.store.repository import open_store
from reconcile.store.schema import SCHEMA_VERSION

ROOT = Path(__file__).resolve().parent.parent
TESTS = Path(__file__).resolve().parent


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def location(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    if request.param == "sqlite":
        yield str(tmp_path / "sessions.sqlite")
        return
    with pg_database() as url:
        yield url


@pytest.fixture
def board():
    return board_from_text(BOARD_TOML, "board.toml")


def _many_readings(n: int) -> str:
    """A readings file of ``n`` base-voltage readings, each with its own note."""
    rows = [f"voltage,b,{1.0 + i * 1e-4:.4f},V,,,row-{i}" for i in range(n)]
    return "quantity,at,value,unit,uncertainty,instrument,note\n" + "\n".join(rows) + "\n"


def _run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "reconcile", *args], capture_output=True,
                          text=True, cwd=ROOT, timeout=300)


def _notes(location: str, sid: str) -> list[str]:
    with open_store(location, read_only=True) as store:
        return [r.reading.note for r in store.readings(sid)]


def test_an_import_records_the_file_hash_and_its_rows(location, board, tmp_path):
    path = tmp_path / "r.csv"
    path.write_text(READINGS_CSV, encoding="utf-8")
    readings = readings_from_text(READINGS_CSV, path=str(path), board=board)
    sha = hashlib.sha256(path.read_bytes()).hexdigest()  # FIPS 180-4 via hashlib
    with open_store(location) as store:
        sid = store.create_session(board)
        done = store.import_readings(sid, readings, file_sha256=sha, source=str(path))
        [record] = store.imports(sid)
    assert not done.resumed and done.already_stored == 0 and len(done.ids) == len(readings)
    assert record == done.record
    assert (record.file_sha256, record.n_rows, record.stored) == (sha, 7, 7)
    # the data rows are file lines 2 to 8 (line 1 is the header)
    assert (record.first_line, record.last_line) == (2, 8)


def test_a_repeated_import_is_refused_naming_the_earlier_one_and_again_forces_it(
        location, board):
    readings = readings_from_text(READINGS_CSV, path="r.csv", board=board)
    with open_store(location) as store:
        sid = store.create_session(board)
        first = store.import_readings(sid, readings, file_sha256="a" * 64, source="r.csv")
        with pytest.raises(InputError, match=rf"already added to session {sid}: "
                                             rf"import {first.record.id} of r.csv .*7 of 7"):
            store.import_readings(sid, readings, file_sha256="a" * 64, source="r.csv")
        second = store.import_readings(sid, readings, file_sha256="a" * 64, source="r.csv",
                                       again=True)
        assert second.record.id != first.record.id and len(second.ids) == 7
        assert len(store.readings(sid)) == 14
        other = store.create_session(board)  # the same file in another session is new
        assert len(store.import_readings(other, readings, file_sha256="a" * 64,
                                         source="r.csv").ids) == 7


def test_the_import_record_refuses_updates_and_deletes(location, board):
    readings = readings_from_text(READINGS_CSV, path="r.csv", board=board)
    with open_store(location) as store:
        sid = store.create_session(board)
        store.import_readings(sid, readings, file_sha256="b" * 64, source="r.csv")
    engine = sa.create_engine(sa.make_url(location) if "://" in location
                              else f"sqlite:///{location}")
    try:
        for statement in ("UPDATE imports SET n_rows = 1", "DELETE FROM import_rows"):
            with pytest.raises(sa.exc.DBAPIError, match="append-only"):
                with engine.begin() as conn:
                    conn.exec_driver_sql(statement)
    finally:
        engine.dispose()


def test_a_version_1_store_is_upgraded_to_record_imports(tmp_path, board):
    path = tmp_path / "v1.sqlite"
    with sqlite3.connect(path) as conn:
        conn.executescript((TESTS / "reference" / "store_v1.sql").read_text(encoding="utf-8"))
    conn.close()
    with open_store(path, read_only=True) as store:  # a reader leaves it at version 1
        assert store.schema_version() == 1 and store.imports("S-FIXTURE2") == []
    with open_store(path) as store:
        assert store.schema_version() == SCHEMA_VERSION == 4
        sid = store.create_session(board)
        readings = readings_from_text(READINGS_CSV, path="r.csv", board=board)
        store.import_readings(sid, readings, file_sha256="c" * 64, source="r.csv")
        assert [v.n_readings for v in store.list_sessions()] == [2, 7]


@pytest.mark.slow  # a child process killed mid-import, then two reruns
def test_sigkill_during_session_add_then_rerun_stores_no_duplicates(location, tmp_path):
    n = 800  # enough that the child is still storing when it is killed
    board_path = tmp_path / "board.toml"
    board_path.write_text(BOARD_TOML, encoding="utf-8")
    path = tmp_path / "many.csv"
    path.write_text(_many_readings(n), encoding="utf-8")
    new = _run("session", "new", str(board_path), "--store", location, "--json")
    sid = json.loads(new.stdout)["session"]

    child = subprocess.Popen(
        [sys.executable, "-m", "reconcile", "session", "add", sid, str(path),
         "--store", location], cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 120
        stored = 0
        while stored < 50 and time.monotonic() < deadline and child.poll() is None:
            time.sleep(0.01)
            stored = len(_notes(location, sid))
        os.kill(child.pid, signal.SIGKILL)
    finally:
        child.wait(timeout=30)
        child.stderr.close()
    assert child.returncode == -signal.SIGKILL
    before = _notes(location, sid)
    assert 50 <= len(before) < n, "the child should be killed in the middle of its import"

    rerun = _run("session", "add", sid, str(path), "--store", location, "--json")
    assert rerun.returncode == 0, rerun.stderr
    out = json.loads(rerun.stdout)
    assert out["resumed"] is True
    assert out["already_stored"] + out["added"] == n
    assert out["already_stored"] >= len(before)  # the killed child may commit one more
    notes = _notes(location, sid)
    assert notes == [f"row-{i}" for i in range(n)]  # each row once, in the file's order

    third = _run("session", "add", sid, str(path), "--store", location)
    assert third.returncode == 2 and "Traceback" not in third.stderr
    assert f"import {out['import']['import']} of {path}" in third.stderr
    assert "--again" in third.stderr and len(third.stderr.strip().splitlines()) == 1
    assert len(_notes(location, sid)) == n

    again = _run("session", "add", sid, str(path), "--store", location, "--again", "--json")
    assert again.returncode == 0 and json.loads(again.stdout)["added"] == n
    assert len(_notes(location, sid)) == 2 * n


def test_an_ended_session_takes_no_import(location, board):
    readings = readings_from_text(READINGS_CSV, path="r.csv", board=board)
    with open_store(location) as store:
        sid = store.create_session(board)
        store.end_session(sid)
        with pytest.raises(InputError, match="ended at"):
            store.import_readings(sid, readings, file_sha256="d" * 64, source="r.csv")
        assert store.imports(sid) == []


def test_a_failed_import_says_how_to_resume(location, board, monkeypatch):
    from reconcile.store import repository

    readings = readings_from_text(READINGS_CSV, path="r.csv", board=board)
    real = repository.Store._add_imported
    calls = []

    def failing(self, sid, import_id, position, reading, source):
        calls.append(position)
        if len(calls) == 4:
            raise StoreError("store X: disk full")
        return real(self, sid, import_id, position, reading, source)

    with open_store(location) as store:
        sid = store.create_session(board)
        monkeypatch.setattr(repository.Store, "_add_imported", failing)
        with pytest.raises(StoreError, match=r"3 of 7 readings stored; run the same command"):
            store.import_readings(sid, readings, file_sha256="e" * 64, source="r.csv")
        monkeypatch.setattr(repository.Store, "_add_imported", real)
        done = store.import_readings(sid, readings, file_sha256="e" * 64, source="r.csv")
        assert done.resumed and done.already_stored == 3 and len(done.ids) == 4
        assert [r.reading.value for r in store.readings(sid)] == [r.value for r in readings]


def test_a_store_of_schema_version_2_still_opens_and_knows_its_import(tmp_path, board):
    # tests/reference/store_v2.sql: a store written at schema version 2 (see its header)
    path = tmp_path / "v2.sqlite"
    with sqlite3.connect(path) as conn:
        conn.executescript((TESTS / "reference" / "store_v2.sql").read_text(encoding="utf-8"))
    conn.close()
    text = ("quantity,at,value,unit,uncertainty,instrument,note\n"
            "voltage,vcc,8.98,V,,,\nvoltage,b,1.5,V,2m,DMM-1,\n")
    sha = hashlib.sha256(text.encode("utf-8")).hexdigest()  # FIPS 180-4 via hashlib
    with open_store(path) as store:
        [record] = store.imports("S-FIXTURE3")
        assert (record.file_sha256, record.n_rows, record.stored, record.source) == (
            sha, 2, 2, "bench.csv")
        assert [r.reading.value for r in store.readings("S-FIXTURE3")] == [8.98, 1.5]
        readings = readings_from_text(text, path="bench.csv", board=board)
        with pytest.raises(InputError, match="already added to session S-FIXTURE3: import 1"):
            store.import_readings("S-FIXTURE3", readings, file_sha256=sha, source="bench.csv")
