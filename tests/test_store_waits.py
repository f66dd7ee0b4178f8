"""Shared-store waits and read-only access.

References: the PostgreSQL documentation, from memory: ``lock_timeout`` and
``statement_timeout`` are per-session settings in milliseconds that a client may pass at
start-up as ``options='-c name=value'``; expiry raises SQLSTATE 55P03
(lock_not_available) and 57014 (query_canceled); ``SELECT ... FOR UPDATE`` on a row
conflicts with ``FOR SHARE`` on it. SQLite's documentation (URI filenames): ``mode=ro``
opens read-only, ``immutable=1`` reads a file that cannot change, with no locks and no
side files.
"""

from __future__ import annotations

import hashlib
import json
import os
import stat
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import sqlalchemy as sa
from store_support import (
    BOARD_TOML,
    READINGS_CSV,
    numbered_reading,
    pg_database,
    run_unprivileged,
    shared_folder,
)

from reconcile.errors import InputError, StoreError
from reconcile.model.board_loader import board_from_text
from reconcile.store.connection import LOCK_TIMEOUT_ENV, STATEMENT_TIMEOUT_ENV
from reconcile.store.repository import open_store

ROOT = Path(__file__).resolve().parent.parent


def _run(*args: str, env: dict | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "reconcile", *args], capture_output=True, text=True,
        cwd=ROOT, timeout=120, env={**os.environ, **(env or {})})


def _one_line(done: subprocess.CompletedProcess, code: int) -> str:
    assert done.returncode == code, done.stdout + done.stderr
    assert "Traceback" not in done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    return lines[0]


@pytest.fixture
def board():
    return board_from_text(BOARD_TOML, "board.toml")


@pytest.fixture
def pg_url() -> Iterator[str]:
    with pg_database() as url:
        yield url


# ----------------------------------------------------------------------------- PostgreSQL
def _settings(store) -> dict[str, str]:
    with store._read() as conn:  # noqa: SLF001 - checking the connection set-up itself
        return {name: conn.exec_driver_sql(f"SHOW {name}").scalar()
                for name in ("lock_timeout", "statement_timeout")}


@pytest.mark.postgres
def test_every_postgres_connection_has_lock_and_statement_timeouts(pg_url, monkeypatch):
    monkeypatch.delenv(LOCK_TIMEOUT_ENV, raising=False)
    monkeypatch.delenv(STATEMENT_TIMEOUT_ENV, raising=False)
    with open_store(pg_url) as store:
        assert _settings(store) == {"lock_timeout": "5s", "statement_timeout": "1min"}
    monkeypatch.setenv(LOCK_TIMEOUT_ENV, "1.5")
    monkeypatch.setenv(STATEMENT_TIMEOUT_ENV, "30 s")
    with open_store(pg_url) as store:
        assert _settings(store) == {"lock_timeout": "1500ms", "statement_timeout": "30s"}
    with open_store(pg_url, busy_timeout_s=0.25, statement_timeout_s=2) as store:
        assert _settings(store) == {"lock_timeout": "250ms", "statement_timeout": "2s"}


@pytest.mark.postgres
def test_a_long_statement_ends_at_its_timeout(pg_url):
    with open_store(pg_url, statement_timeout_s=0.3) as store:
        started = time.perf_counter()
        with pytest.raises(StoreError, match=r"ran longer than 0.3 s"):
            with store._read() as conn:  # noqa: SLF001 - a statement our code never runs
                conn.exec_driver_sql("SELECT pg_sleep(5)")
        assert time.perf_counter() - started < 3.0


@pytest.mark.slow  # a child process behind a held lock
@pytest.mark.postgres
def test_a_postgres_writer_behind_a_held_lock_fails_within_its_timeout(pg_url, board, tmp_path):
    with open_store(pg_url) as store:
        sid = store.create_session(board)
    readings = tmp_path / "r.csv"
    readings.write_text(READINGS_CSV, encoding="utf-8")
    holder = sa.create_engine(sa.make_url(pg_url))
    try:
        with holder.connect() as conn, conn.begin():
            # what 'session end' takes: every writer to this session must wait for it
            conn.exec_driver_sql("SELECT id FROM sessions WHERE id = %(sid)s FOR UPDATE",
                                 {"sid": sid})
            with open_store(pg_url, busy_timeout_s=0.5) as store:
                started = time.perf_counter()
                with pytest.raises(StoreError, match=r"is locked by another process "
                                                     r"\(waited 0.5 s"):
                    store.add_reading(sid, numbered_reading(0, "held"))
                assert time.perf_counter() - started < 3.0
            started = time.perf_counter()
            done = _run("session", "add", sid, str(readings), "--store", pg_url, "--json",
                        env={LOCK_TIMEOUT_ENV: "1"})
            elapsed = time.perf_counter() - started
        line = _one_line(done, 1)
        assert "is locked by another process (waited 1 s" in line and done.stdout == ""
        assert elapsed < 20.0  # 1 s of waiting plus process start-up on a busy machine
    finally:
        holder.dispose()
    with open_store(pg_url) as store:
        assert store.readings(sid) == []  # the writer stored nothing


@pytest.mark.postgres
def test_reading_an_empty_postgres_database_creates_nothing(pg_url):
    with open_store(pg_url, read_only=True) as store:
        assert store.list_sessions() == []
        with pytest.raises(InputError, match="holds no sessions"):
            store.show_session("S-AAAAAAAA")
    engine = sa.create_engine(sa.make_url(pg_url))
    try:
        assert sa.inspect(engine).get_table_names() == []
    finally:
        engine.dispose()


# ----------------------------------------------------------------------------- settings
@pytest.mark.parametrize("value", ["0", "-1", "abc", "nan", "1e9"])
def test_a_bad_timeout_setting_is_one_line_exit_2(tmp_path, value):
    done = _run("session", "list", "--store", str(tmp_path / "s.sqlite"),
                env={LOCK_TIMEOUT_ENV: value})
    assert LOCK_TIMEOUT_ENV in _one_line(done, 2)


def test_the_lock_timeout_setting_is_sqlite_busy_timeout(tmp_path, monkeypatch):
    monkeypatch.setenv(LOCK_TIMEOUT_ENV, "0.3")
    with open_store(tmp_path / "s.sqlite") as store:
        with store._engine.connect() as conn:  # noqa: SLF001 - the set-up itself
            assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() == 300


# ----------------------------------------------------------------------------- read-only
@pytest.mark.slow  # six processes
def test_reading_commands_never_create_a_store_for_a_mistyped_path(tmp_path):
    missing = tmp_path / "sesions.sqlite"
    for args in (("session", "list"), ("session", "show", "S-AAAAAAAA"),
                 ("session", "export", "S-AAAAAAAA"), ("fit", "--session", "S-AAAAAAAA"),
                 ("session", "list", "--json")):
        done = _run(*args, "--store", str(missing))
        assert f"no store at {missing}" in _one_line(done, 2)
        assert done.stdout == ""
    done = _run("session", "list", "--store", f"sqlite:///{missing}")
    assert "no store at" in _one_line(done, 2)
    assert list(tmp_path.iterdir()) == []


def test_the_default_store_lists_no_sessions_before_the_first(tmp_path):
    env = {"XDG_DATA_HOME": str(tmp_path / "data"), "HOME": str(tmp_path)}
    env_without = {k: v for k, v in os.environ.items() if k != "RECONCILE_STORE"}
    done = subprocess.run(
        [sys.executable, "-m", "reconcile", "session", "list", "--json"], capture_output=True,
        text=True, cwd=ROOT, timeout=120, env={**env_without, **env})
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout)["sessions"] == []
    assert not (tmp_path / "data").exists()


@pytest.fixture
def shared_dir() -> Iterator[Path]:
    """A folder outside pytest's private tmp tree, so an unprivileged child can reach it."""
    with shared_folder() as folder:
        yield folder


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.mark.parametrize("file_mode", [0o444, 0o644])
def test_a_store_in_a_read_only_folder_can_be_read(shared_dir, board, file_mode):
    path = shared_dir / "s.sqlite"
    with open_store(path) as store:
        sid = store.create_session(board, serial="RO-1")
        store.add_reading(sid, numbered_reading(0, "ro"))
    assert sorted(p.name for p in shared_dir.iterdir()) == ["s.sqlite"]  # WAL checkpointed
    path.chmod(file_mode)
    shared_dir.chmod(stat.S_IRUSR | stat.S_IXUSR | stat.S_IRGRP | stat.S_IXGRP
                     | stat.S_IROTH | stat.S_IXOTH)
    before = _digest(path)

    def job() -> str:
        from reconcile.store.sessions import export_session, list_sessions, show_session

        listed = list_sessions(store=str(path))["sessions"]
        shown = show_session(sid, store=str(path))
        exported = export_session(sid, store=str(path))
        return json.dumps([[s["serial"] for s in listed], len(shown["readings"]), exported])

    got = run_unprivileged(job)
    serials, n, exported = json.loads(got)
    assert serials == ["RO-1"] and n == 1 and exported.count("\n") == 2
    assert sorted(p.name for p in shared_dir.iterdir()) == ["s.sqlite"]
    assert _digest(path) == before
