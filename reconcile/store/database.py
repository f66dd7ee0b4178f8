"""The session store: board snapshots, the readings taken on them, and the analyses made.

This is the only module that imports SQLAlchemy (Core, no ORM). A store is an SQLite
file (the default, in the user's data folder) or a PostgreSQL database reached by URL;
both hold the same tables and behave the same.

Measurement data is append-only. A reading is never updated or deleted: a correction is
a new row whose ``supersedes`` names the row it replaces (it takes that row's place in
the session's order), and a retraction is a row of kind ``retraction`` that supersedes a
reading without replacing it. The *current* readings of a session are the rows of kind
``reading`` that nothing supersedes, ordered by the id of the first row of their chain.
Ending a session is an event row too.

Each reading is committed in its own transaction as it is stored, so a writer killed
half-way loses at most the reading in flight. Order comes from an autoincrement id, so
any number of processes may add readings to one session at the same time.

Session ids read ``S-`` and eight base32 characters (RFC 4648 alphabet, 40 random bits
from :mod:`secrets`), for example ``S-K7QX2MZA``; they are matched case-insensitively.
Timestamps are UTC ISO-8601 strings with milliseconds (``2025-01-31T14:05:09.123Z``).
"""

from __future__ import annotations

import base64
import contextlib
import hashlib
import json
import math
import os
import secrets
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import sqlalchemy as sa
from sqlalchemy import event
from sqlalchemy.engine import Connection, Engine

from reconcile import __version__
from reconcile.model.board import Board
from reconcile.errors import InputError, StoreError
from reconcile.data.digest import inputs_sha256  # noqa: F401 - re-exported
from reconcile.data.readings import Reading

SCHEMA_VERSION = 1
"""The newest schema this code knows; ``MIGRATIONS[i]`` brings a store to version i+1."""

ANALYSIS_KINDS = ("fit", "diagnose", "trim", "lot", "capture", "report")
"""Kinds of analysis a session may record."""

DEFAULT_FILE_NAME = "sessions.sqlite"
STORE_ENV = "RECONCILE_STORE"
"""Environment variable naming the store used when none is given."""

CONNECT_TIMEOUT_S = 5.0
BUSY_TIMEOUT_S = 5.0

_READING = "reading"
_RETRACTION = "retraction"
_ENDED = "ended"
_OUR_TABLES = ("schema_version", "boards", "sessions", "session_events", "readings", "analyses")


# ---------------------------------------------------------------------------- schema
def _define_v1(md: sa.MetaData) -> None:
    """Tables of schema version 1 (frozen: a later version adds a migration)."""
    text, integer, real = sa.Text, sa.Integer, sa.Float(precision=53)
    sa.Table(
        "schema_version", md,
        sa.Column("version", integer, primary_key=True, autoincrement=False),
        sa.Column("applied", text, nullable=False),
        sa.Column("tool_version", text, nullable=False),
    )
    sa.Table(
        "boards", md,
        sa.Column("id", integer, primary_key=True, autoincrement=True),
        sa.Column("sha256", sa.String(64), nullable=False, unique=True),
        sa.Column("title", text, nullable=False),
        sa.Column("source_text", text, nullable=False),
        sa.Column("created", text, nullable=False),
        sqlite_autoincrement=True,
    )
    sa.Table(
        "sessions", md,
        sa.Column("id", sa.String(16), primary_key=True),
        sa.Column("board_id", integer, sa.ForeignKey("boards.id"), nullable=False),
        sa.Column("board_path", text, nullable=False),
        sa.Column("serial", text, nullable=False),
        sa.Column("operator", text, nullable=False),
        sa.Column("notes", text, nullable=False),
        sa.Column("started", text, nullable=False),
        sa.Column("tool_version", text, nullable=False),
    )
    sa.Table(
        "session_events", md,
        sa.Column("id", integer, primary_key=True, autoincrement=True),
        sa.Column("session_id", sa.String(16), sa.ForeignKey("sessions.id"), nullable=False),
        sa.Column("kind", text, nullable=False),
        sa.Column("at", text, nullable=False),
        sa.Column("note", text, nullable=False),
        sa.Index("ix_session_events_session", "session_id"),
        sqlite_autoincrement=True,
    )
    sa.Table(
        "readings", md,
        sa.Column("id", integer, primary_key=True, autoincrement=True),
        sa.Column("session_id", sa.String(16), sa.ForeignKey("sessions.id"), nullable=False),
        sa.Column("kind", text, nullable=False),
        sa.Column("quantity", text, nullable=False),
        sa.Column("at", text, nullable=False),
        sa.Column("value", real, nullable=True),
        sa.Column("unit", text, nullable=False),
        sa.Column("uncertainty", real, nullable=True),
        sa.Column("instrument", text, nullable=False),
        sa.Column("note", text, nullable=False),
        sa.Column("device", text, nullable=False),
        sa.Column("raw", text, nullable=False),
        sa.Column("source", text, nullable=False),
        sa.Column("source_line", integer, nullable=True),
        sa.Column("taken_at", text, nullable=False),
        sa.Column("stored", text, nullable=False),
        sa.Column("supersedes", integer, sa.ForeignKey("readings.id"), nullable=True, unique=True),
        sa.CheckConstraint(
            "(kind = 'reading' AND value IS NOT NULL) OR kind = 'retraction'",
            name="ck_readings_kind",
        ),
        sa.Index("ix_readings_session", "session_id", "id"),
        sqlite_autoincrement=True,
    )
    sa.Table(
        "analyses", md,
        sa.Column("id", integer, primary_key=True, autoincrement=True),
        sa.Column("session_id", sa.String(16), sa.ForeignKey("sessions.id"), nullable=False),
        sa.Column("kind", text, nullable=False),
        sa.Column("result", text, nullable=False),
        sa.Column("tool_version", text, nullable=False),
        sa.Column("inputs_sha256", sa.String(64), nullable=False),
        sa.Column("created", text, nullable=False),
        sa.Index("ix_analyses_session", "session_id"),
        sqlite_autoincrement=True,
    )


_APPEND_ONLY_TABLES = ("boards", "sessions", "session_events", "readings", "analyses")


def _forbid_changes(conn: Connection, tables: Sequence[str]) -> None:
    """Triggers that make ``tables`` append-only: any UPDATE or DELETE is refused."""
    if conn.dialect.name == "sqlite":
        for table in tables:
            for verb in ("UPDATE", "DELETE"):
                conn.exec_driver_sql(
                    f"CREATE TRIGGER {table}_no_{verb.lower()} BEFORE {verb} ON {table} "
                    f"BEGIN SELECT RAISE(ABORT, '{table} are append-only'); END")
        return
    conn.exec_driver_sql(
        "CREATE OR REPLACE FUNCTION reconcile_append_only() RETURNS trigger AS $$ "
        "BEGIN RAISE EXCEPTION '%% are append-only', TG_TABLE_NAME; END $$ LANGUAGE plpgsql")
    for table in tables:
        conn.exec_driver_sql(
            f"CREATE TRIGGER {table}_append_only BEFORE UPDATE OR DELETE ON {table} "
            "FOR EACH ROW EXECUTE FUNCTION reconcile_append_only()")


def _migrate_to_1(conn: Connection) -> None:
    md = sa.MetaData()
    _define_v1(md)
    md.create_all(conn)
    _forbid_changes(conn, _APPEND_ONLY_TABLES)


MIGRATIONS: tuple[Callable[[Connection], None], ...] = (_migrate_to_1,)
"""Schema migrations in order; each runs inside the one transaction that upgrades."""

_MD = sa.MetaData()
_define_v1(_MD)  # the tables queried by this code: the newest version's
T_VERSION, T_BOARDS, T_SESSIONS, T_EVENTS, T_READINGS, T_ANALYSES = (
    _MD.tables[name] for name in _OUR_TABLES
)


# Statements used on every reading, built once (building them costs more than running them).
_ENDED_AT = (
    sa.select(sa.func.min(T_EVENTS.c.at))
    .where(T_EVENTS.c.session_id == T_SESSIONS.c.id, T_EVENTS.c.kind == _ENDED)
    .scalar_subquery())
_Q_SESSION = (sa.select(T_SESSIONS.c.id, _ENDED_AT.label("ended"))
              .where(T_SESSIONS.c.id == sa.bindparam("sid")))
# PostgreSQL: a writer holds the session row FOR SHARE, so that ending a session (which
# takes it FOR UPDATE) waits for readings in flight and no reading lands after the end.
_Q_SESSION_SHARED = _Q_SESSION.with_for_update(read=True, of=T_SESSIONS)
_Q_SESSION_EXCLUSIVE = _Q_SESSION.with_for_update(of=T_SESSIONS)
_INSERT_READING = T_READINGS.insert()


# ---------------------------------------------------------------------------- values
def utc_now() -> str:
    """The current time as a UTC ISO-8601 string with milliseconds."""
    return _iso(datetime.now(UTC))


def _iso(moment: datetime) -> str:
    if moment.tzinfo is None:
        raise InputError(f"time {moment.isoformat()} has no time zone; give it in UTC")
    return moment.astimezone(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def new_session_id() -> str:
    """A fresh session id: ``S-`` and 8 base32 characters (40 random bits)."""
    return "S-" + base64.b32encode(secrets.token_bytes(5)).decode("ascii")


def _sha256(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# ---------------------------------------------------------------------------- results
@dataclass(frozen=True)
class StoredReading:
    """A reading as held by the store, with its row id and history."""

    id: int
    session: str
    reading: Reading
    taken_at: str
    stored: str
    source: str = ""
    supersedes: int | None = None

    def to_dict(self) -> dict[str, Any]:
        r = self.reading
        return {
            "id": self.id, "quantity": r.quantity, "at": r.at, "value": r.value,
            "unit": r.unit, "uncertainty": r.uncertainty, "instrument": r.instrument,
            "note": r.note, "device": r.device, "taken_at": self.taken_at,
            "source": self.source, "supersedes": self.supersedes,
        }


@dataclass(frozen=True)
class SessionSummary:
    """One line of a session list."""

    id: str
    board_title: str
    serial: str
    operator: str
    started: str
    ended: str | None
    n_readings: int
    n_analyses: int

    def to_dict(self) -> dict[str, Any]:
        return {
            "session": self.id, "board_title": self.board_title, "serial": self.serial,
            "operator": self.operator, "started": self.started, "ended": self.ended,
            "readings": self.n_readings, "analyses": self.n_analyses,
        }


@dataclass(frozen=True)
class AnalysisRecord:
    """An analysis recorded with a session; ``result`` is what its ``--json`` printed."""

    id: int
    session: str
    kind: str
    tool_version: str
    inputs_sha256: str
    created: str
    result: dict[str, Any] | None = None

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "id": self.id, "kind": self.kind, "created": self.created,
            "tool_version": self.tool_version, "inputs_sha256": self.inputs_sha256,
        }
        if self.result is not None:
            out["result"] = self.result
        return out


@dataclass(frozen=True)
class SessionView:
    """A whole session: metadata, current readings and a summary of its analyses."""

    summary: SessionSummary
    board_sha256: str
    board_path: str
    notes: str
    tool_version: str
    readings: tuple[StoredReading, ...] = ()
    n_superseded: int = 0
    analyses: tuple[AnalysisRecord, ...] = field(default_factory=tuple)

    def to_dict(self) -> dict[str, Any]:
        s = self.summary
        return {
            "session": s.id,
            "board": {"title": s.board_title, "sha256": self.board_sha256,
                      "path": self.board_path},
            "serial": s.serial, "operator": s.operator, "notes": self.notes,
            "started": s.started, "ended": s.ended, "tool_version": self.tool_version,
            "readings": [r.to_dict() for r in self.readings],
            "superseded": self.n_superseded,
            "analyses": [a.to_dict() for a in self.analyses],
        }


# ---------------------------------------------------------------------------- opening
def default_store_path() -> Path:
    """``$RECONCILE_STORE`` if set, else ``sessions.sqlite`` in the user's data folder."""
    env = os.environ.get(STORE_ENV)
    if env:
        return Path(env).expanduser()
    import platformdirs

    return Path(platformdirs.user_data_dir("reconcile")) / DEFAULT_FILE_NAME


def open_store(
    location: str | os.PathLike[str] | None = None,
    *,
    busy_timeout_s: float = BUSY_TIMEOUT_S,
    connect_timeout_s: float = CONNECT_TIMEOUT_S,
) -> Store:
    """Open (creating or upgrading where needed) a session store.

    Parameters
    ----------
    location
        ``None`` for the default store (see :func:`default_store_path`), a file path for
        an SQLite store, or a database URL: ``sqlite:///path``, ``postgresql://...``
        (reached with the psycopg driver).
    busy_timeout_s
        How long an SQLite writer waits for another process' lock, in s.
    connect_timeout_s
        How long to wait for a database server to answer, in s (whole seconds, at
        least 2: libpq's rule).

    Raises
    ------
    InputError
        The location is not a usable path or URL.
    StoreError
        The store cannot be reached, read or written, is not a reconcile store, or has a
        newer schema than this code knows.
    """
    if location is None:
        path = default_store_path()
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise StoreError(f"cannot create the store folder {path.parent}: {exc}") from exc
        engine, label = _sqlite_engine(path, busy_timeout_s), str(path)
    else:
        text = os.fspath(location)
        if "://" in text:
            engine, label = _url_engine(text, busy_timeout_s, connect_timeout_s)
        else:
            path = Path(text).expanduser()
            engine, label = _sqlite_engine(path, busy_timeout_s), str(path)
    store = Store(engine, label, busy_timeout_s=busy_timeout_s)
    try:
        store._prepare_schema()
    except BaseException:
        store.close()
        raise
    return store


def _url_engine(text: str, busy_s: float, connect_s: float) -> tuple[Engine, str]:
    try:
        url = sa.engine.make_url(text)
    except sa.exc.ArgumentError as exc:
        raise InputError(f"store URL {text!r} cannot be read: {exc}", key="store") from exc
    backend = url.get_backend_name()
    if backend == "sqlite":
        if not url.database or url.database == ":memory:":
            raise InputError("an in-memory store keeps nothing: give a file", key="store")
        return _sqlite_engine(Path(url.database).expanduser(), busy_s), url.database
    if backend in ("postgresql", "postgres"):
        if url.drivername.partition("+")[2] not in ("", "psycopg"):
            raise InputError(
                f"store URL driver {url.drivername!r} is not supported: "
                "use postgresql:// or postgresql+psycopg://", key="store")
        url = url.set(drivername="postgresql+psycopg")
        label = url.render_as_string(hide_password=True)
        engine = sa.create_engine(
            url,
            # libpq counts whole seconds and reads anything under 2 as 2
            connect_args={"connect_timeout": max(2, math.ceil(connect_s)),
                          "application_name": "reconcile"},
            pool_pre_ping=False,
        )
        return engine, label
    raise InputError(
        f"store URL {url.render_as_string(hide_password=True)!r}: unsupported database "
        f"{backend!r}; give a file path, sqlite:///PATH or postgresql://...", key="store")


def _sqlite_engine(path: Path, busy_s: float) -> Engine:
    if path.is_dir():
        raise StoreError(f"store {path} is a folder; give a file name such as {DEFAULT_FILE_NAME}")
    if not path.parent.is_dir():
        raise StoreError(f"cannot open store {path}: folder {path.parent} does not exist")
    engine = sa.create_engine(
        sa.URL.create("sqlite", database=str(path)), connect_args={"timeout": busy_s})
    busy_ms = max(0, round(busy_s * 1000))

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        # Let SQLAlchemy's "begin" hook issue BEGIN (sqlite3's own handling is off), so
        # the pragmas below run outside any transaction: WAL cannot be entered in one.
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        try:
            cur.execute(f"PRAGMA busy_timeout={busy_ms}")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute("PRAGMA journal_mode=WAL")
            cur.execute("PRAGMA synchronous=NORMAL")
        finally:
            cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Connection) -> None:
        # A writer takes the write lock up front (IMMEDIATE): a deferred transaction that
        # reads first and writes later fails at once in WAL mode when another process
        # committed in between, instead of waiting out busy_timeout.
        writing = conn.get_execution_options().get("reconcile_write", False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if writing else "BEGIN")

    return engine


# ---------------------------------------------------------------------------- errors
def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())


class Store:
    """An open session store. Make one with :func:`open_store`; close it (or use it as a
    context manager) when done."""

    def __init__(self, engine: Engine, location: str, *, busy_timeout_s: float) -> None:
        self._engine = engine
        self._busy_timeout_s = busy_timeout_s
        self.location = location
        self.is_sqlite = engine.dialect.name == "sqlite"

    # ------------------------------------------------------------ plumbing
    def close(self) -> None:
        """Release every connection."""
        self._engine.dispose()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _store_error(self, exc: sa.exc.DBAPIError) -> StoreError:
        detail = _one_line(exc.orig if exc.orig is not None else exc)
        low = detail.lower()
        where = f"store {self.location}"
        if self.is_sqlite:
            if "locked" in low or "busy" in low:
                return StoreError(
                    f"{where} is locked by another process (waited {self._busy_timeout_s:g} s); "
                    "try again when it has finished")
            if "readonly" in low or "read-only" in low:
                return StoreError(f"{where} is read-only ({self._access_hint()}): {detail}")
            if "unable to open" in low:
                return StoreError(f"cannot open {where} ({self._access_hint()}): {detail}")
            if "not a database" in low or "malformed" in low:
                return StoreError(f"{where} is not a readable SQLite store: {detail}")
            return StoreError(f"{where}: {detail}")
        if isinstance(exc, sa.exc.OperationalError) and (
            "connection" in low or "connect" in low or "timeout" in low
        ):
            return StoreError(f"cannot reach {where}: {detail}")
        return StoreError(f"{where}: {detail}")

    def _access_hint(self) -> str:
        path = Path(self.location)
        if path.exists() and not os.access(path, os.W_OK):
            return "the file is not writable"
        if not os.access(path.parent, os.W_OK):
            return f"folder {path.parent} is not writable"
        return "check the file and folder permissions"

    @contextlib.contextmanager
    def _translated(self) -> Iterator[None]:
        try:
            yield
        except sa.exc.DBAPIError as exc:
            raise self._store_error(exc) from exc

    @contextlib.contextmanager
    def _write(self) -> Iterator[Connection]:
        """A connection inside one committed-on-success write transaction."""
        with self._translated(), self._engine.connect() as conn:
            conn.execution_options(reconcile_write=True)
            with conn.begin():
                yield conn

    @contextlib.contextmanager
    def _read(self) -> Iterator[Connection]:
        """A connection inside one read transaction (a consistent snapshot)."""
        with self._translated(), self._engine.connect() as conn:
            if not self.is_sqlite:
                conn.execution_options(isolation_level="REPEATABLE READ")
            with conn.begin():
                yield conn

    # ------------------------------------------------------------ schema
    def schema_version(self) -> int:
        """The schema version the store holds (0 for an empty store)."""
        with self._read() as conn:
            return self._version(conn)

    def _version(self, conn: Connection) -> int:
        names = set(sa.inspect(conn).get_table_names())
        if "schema_version" not in names:
            ours = names & set(_OUR_TABLES)
            if ours or (self.is_sqlite and names):
                raise StoreError(
                    f"store {self.location} is not a reconcile store (it has tables "
                    f"{', '.join(sorted(names))} but no schema_version)")
            return 0
        return int(conn.execute(sa.select(sa.func.max(T_VERSION.c.version))).scalar() or 0)

    def _refuse_newer(self, version: int) -> None:
        if version > SCHEMA_VERSION:
            raise StoreError(
                f"store {self.location} has schema version {version}, this reconcile knows "
                f"up to {SCHEMA_VERSION}: upgrade reconcile")

    def _prepare_schema(self) -> None:
        with self._read() as conn:
            version = self._version(conn)
        self._refuse_newer(version)
        if version == SCHEMA_VERSION:
            return
        with self._write() as conn:
            if not self.is_sqlite:  # one upgrader at a time; SQLite's IMMEDIATE does this
                conn.execute(sa.text("SELECT pg_advisory_xact_lock(7261657)"))
            version = self._version(conn)
            self._refuse_newer(version)
            for number in range(version + 1, SCHEMA_VERSION + 1):
                MIGRATIONS[number - 1](conn)
                conn.execute(T_VERSION.insert().values(
                    version=number, applied=utc_now(), tool_version=__version__))

    # ------------------------------------------------------------ sessions
    def create_session(
        self,
        board: Board,
        *,
        serial: str = "",
        operator: str = "",
        notes: str = "",
    ) -> str:
        """Start a session on a snapshot of ``board``'s file text; returns its id."""
        if not board.source_text:
            raise InputError("the board has no file text to snapshot", path=board.source_path)
        text = board.source_text
        digest = _sha256(text)
        for _attempt in range(5):
            session_id = new_session_id()
            try:
                with self._write() as conn:
                    board_id = conn.execute(
                        sa.select(T_BOARDS.c.id).where(T_BOARDS.c.sha256 == digest)).scalar()
                    now = utc_now()
                    if board_id is None:
                        board_id = conn.execute(T_BOARDS.insert().values(
                            sha256=digest, title=board.title or "", source_text=text,
                            created=now)).inserted_primary_key[0]
                    conn.execute(T_SESSIONS.insert().values(
                        id=session_id, board_id=board_id, board_path=board.source_path or "",
                        serial=serial, operator=operator, notes=notes, started=now,
                        tool_version=__version__))
                return session_id
            except StoreError as exc:
                if not isinstance(exc.__cause__, sa.exc.IntegrityError):
                    raise  # else an id or board hash taken at the same moment: try again
        raise StoreError(f"store {self.location}: could not create a session (id clashes)")

    def end_session(self, session_id: str, *, note: str = "") -> str:
        """Record that a session has ended; returns the time. No readings may follow."""
        with self._write() as conn:
            sid, ended = self._session_state(conn, session_id, lock="update")
            if ended is not None:
                raise InputError(f"session {sid} already ended at {ended}")
            now = utc_now()
            conn.execute(T_EVENTS.insert().values(session_id=sid, kind=_ENDED, at=now, note=note))
        return now

    def _session_state(
        self, conn: Connection, session_id: str, *, lock: str = ""
    ) -> tuple[str, str | None]:
        """The session's id as stored and when it ended (None while open).

        ``lock`` is ``"share"`` (adding to it) or ``"update"`` (ending it) to hold the
        session row until the transaction ends; SQLite's write lock does that already.
        """
        sid = session_id.strip().upper()
        query = _Q_SESSION
        if lock and not self.is_sqlite:
            query = _Q_SESSION_SHARED if lock == "share" else _Q_SESSION_EXCLUSIVE
        row = conn.execute(query, {"sid": sid}).first()
        if row is None:
            raise InputError(
                f"no session {session_id!r} in store {self.location} "
                "(see 'reconcile session list')", key="session")
        return sid, row.ended

    def _open_session(self, conn: Connection, session_id: str) -> str:
        sid, ended = self._session_state(conn, session_id, lock="share")
        if ended is not None:
            raise InputError(f"session {sid} ended at {ended}: start a new session to add readings")
        return sid

    # ------------------------------------------------------------ readings
    def add_reading(
        self,
        session_id: str,
        reading: Reading,
        *,
        taken_at: datetime | None = None,
        source: str = "",
    ) -> int:
        """Store one reading, committed before this returns; returns its id.

        ``taken_at`` is when it was measured (default: now); ``source`` names where it
        came from (a file path, an instrument capture).
        """
        row = self._reading_row(reading, taken_at, source)
        with self._write() as conn:
            sid = self._open_session(conn, session_id)
            row["session_id"] = sid
            return int(conn.execute(_INSERT_READING, row).inserted_primary_key[0])

    def add_readings(
        self, session_id: str, readings: Iterable[Reading], *, source: str = ""
    ) -> list[int]:
        """Store readings one by one, each in its own committed transaction; their ids.

        On a failure the readings stored so far stay, and the error says how many.
        """
        ids: list[int] = []
        for reading in readings:
            try:
                ids.append(self.add_reading(session_id, reading, source=source))
            except StoreError as exc:
                if not ids:
                    raise
                raise StoreError(
                    f"{exc} (after storing {len(ids)} readings, up to id {ids[-1]})") from exc
        return ids

    def correct_reading(
        self, session_id: str, reading_id: int, corrected: Reading, *,
        source: str = "correction", taken_at: datetime | None = None,
    ) -> int:
        """Store ``corrected`` in place of reading ``reading_id`` of a session; the new id.

        The old row stays; the new one supersedes it and takes its place in the order.
        """
        row = self._reading_row(corrected, taken_at, source)
        return self._supersede(session_id, reading_id, row)

    def retract_reading(self, session_id: str, reading_id: int, *, note: str = "") -> int:
        """Withdraw reading ``reading_id`` of a session with no replacement; the row's id."""
        now = utc_now()
        row = {"kind": _RETRACTION, "quantity": "", "at": "", "value": None, "unit": "",
               "uncertainty": None, "instrument": "", "note": note, "device": "",
               "raw": "[]", "source": "retraction", "source_line": None,
               "taken_at": now, "stored": now}
        return self._supersede(session_id, reading_id, row)

    def _supersede(self, session_id: str, reading_id: int, row: dict[str, Any]) -> int:
        try:
            with self._write() as conn:
                sid = self._open_session(conn, session_id)
                old = conn.execute(
                    sa.select(T_READINGS.c.session_id, T_READINGS.c.kind)
                    .where(T_READINGS.c.id == int(reading_id))).first()
                if old is None or old.kind != _READING or old.session_id != sid:
                    raise InputError(f"session {sid} has no reading {reading_id}",
                                     key="reading")
                newer = conn.execute(sa.select(T_READINGS.c.id).where(
                    T_READINGS.c.supersedes == int(reading_id))).scalar()
                if newer is not None:
                    raise InputError(
                        f"reading {reading_id} was already superseded by reading {newer}; "
                        "correct that one instead", key="reading")
                row.update(session_id=sid, supersedes=int(reading_id))
                return int(conn.execute(_INSERT_READING, row).inserted_primary_key[0])
        except StoreError as exc:
            if isinstance(exc.__cause__, sa.exc.IntegrityError):
                raise InputError(
                    f"reading {reading_id} was superseded by another writer just now; "
                    "look again with 'reconcile session show'", key="reading") from exc
            raise

    @staticmethod
    def _reading_row(reading: Reading, taken_at: datetime | None, source: str) -> dict[str, Any]:
        value = float(reading.value)
        if math.isnan(value):
            raise InputError(f"reading {reading.quantity} at {reading.at!r} has no value (NaN)",
                             line=reading.line)
        now = utc_now()
        return {
            "kind": _READING, "quantity": reading.quantity, "at": reading.at, "value": value,
            "unit": reading.unit,
            "uncertainty": None if reading.uncertainty is None else float(reading.uncertainty),
            "instrument": reading.instrument, "note": reading.note, "device": reading.device,
            "raw": json.dumps(list(reading.raw), ensure_ascii=False),
            "source": source, "source_line": reading.line,
            "taken_at": now if taken_at is None else _iso(taken_at), "stored": now,
            "supersedes": None,
        }

    def _rows(self, conn: Connection, sid: str) -> tuple[list[StoredReading], int]:
        """Current readings in order, and how many rows they supersede."""
        rows = conn.execute(
            sa.select(T_READINGS).where(T_READINGS.c.session_id == sid)
            .order_by(T_READINGS.c.id)).all()
        root: dict[int, int] = {}
        superseded: set[int] = set()
        for row in rows:
            if row.supersedes is not None:
                superseded.add(row.supersedes)
                root[row.id] = root.get(row.supersedes, row.supersedes)
            else:
                root[row.id] = row.id
        current = [_stored(row) for row in rows
                   if row.kind == _READING and row.id not in superseded]
        current.sort(key=lambda r: root[r.id])
        return current, len(superseded)

    def readings(self, session_id: str) -> list[StoredReading]:
        """The session's current readings, in order."""
        with self._read() as conn:
            sid, _ended = self._session_state(conn, session_id)
            return self._rows(conn, sid)[0]

    def export_csv(self, session_id: str) -> str:
        """The session's current readings as readings-file text (cells as written)."""
        from reconcile.data.readings import readings_to_csv

        return readings_to_csv([r.reading for r in self.readings(session_id)])

    def session_board(self, session_id: str) -> Board:
        """The session's board, loaded from its snapshot."""
        with self._read() as conn:
            sid, _ended = self._session_state(conn, session_id)
            return self._board(conn, sid)

    def session_inputs(self, session_id: str) -> tuple[Board, list[Reading]]:
        """The session's board (from its snapshot) and current readings, for analysis."""
        with self._read() as conn:
            sid, _ended = self._session_state(conn, session_id)
            board = self._board(conn, sid)
            current = self._rows(conn, sid)[0]
        return board, [r.reading for r in current]

    @staticmethod
    def _board(conn: Connection, sid: str) -> Board:
        from reconcile.model.board_loader import board_from_text

        snap = conn.execute(
            sa.select(T_BOARDS.c.source_text, T_SESSIONS.c.board_path)
            .join(T_SESSIONS, T_SESSIONS.c.board_id == T_BOARDS.c.id)
            .where(T_SESSIONS.c.id == sid)).one()
        label = f"{snap.board_path or 'board'} (snapshot in session {sid})"
        return board_from_text(snap.source_text, label)

    # ------------------------------------------------------------ analyses
    def record_analysis(
        self,
        session_id: str,
        kind: str,
        result: dict[str, Any],
        *,
        inputs_sha256: str,
        tool_version: str = __version__,
    ) -> int:
        """Record an analysis of a session; returns its id.

        ``result`` is the JSON object the analysis prints; ``inputs_sha256`` is
        :func:`inputs_sha256` of the board and readings it was given.
        """
        if kind not in ANALYSIS_KINDS:
            raise InputError(f"analysis kind {kind!r} is not one of {', '.join(ANALYSIS_KINDS)}")
        from reconcile.jsonout import clean

        try:
            text = json.dumps(clean(result), allow_nan=False, ensure_ascii=False)
        except (TypeError, ValueError) as exc:
            raise StoreError(f"the {kind} result cannot be stored as JSON: {exc}") from exc
        with self._write() as conn:
            sid, _ended = self._session_state(conn, session_id)
            return int(conn.execute(T_ANALYSES.insert().values(
                session_id=sid, kind=kind, result=text, tool_version=tool_version,
                inputs_sha256=inputs_sha256, created=utc_now())).inserted_primary_key[0])

    def analysis(self, analysis_id: int) -> AnalysisRecord:
        """One recorded analysis, with its result."""
        with self._read() as conn:
            row = conn.execute(
                sa.select(T_ANALYSES).where(T_ANALYSES.c.id == int(analysis_id))).first()
        if row is None:
            raise InputError(f"no analysis {analysis_id} in store {self.location}", key="analysis")
        return _analysis(row, with_result=True)

    # ------------------------------------------------------------ listing
    def list_sessions(self) -> list[SessionSummary]:
        """Every session, oldest first."""
        with self._read() as conn:
            rows = conn.execute(_summary_query()).all()
        return [_summary(row) for row in rows]

    def show_session(self, session_id: str) -> SessionView:
        """A session's metadata, current readings and analyses (without their results)."""
        with self._read() as conn:
            sid, _ended = self._session_state(conn, session_id)
            row = conn.execute(_summary_query().where(T_SESSIONS.c.id == sid)).one()
            current, n_superseded = self._rows(conn, sid)
            analyses = conn.execute(
                sa.select(*[c for c in T_ANALYSES.c if c.name != "result"])
                .where(T_ANALYSES.c.session_id == sid).order_by(T_ANALYSES.c.id)).all()
        return SessionView(
            summary=_summary(row), board_sha256=row.board_sha256, board_path=row.board_path,
            notes=row.notes, tool_version=row.tool_version, readings=tuple(current),
            n_superseded=n_superseded,
            analyses=tuple(_analysis(a, with_result=False) for a in analyses))


def _summary_query() -> sa.Select[Any]:
    r, a, e, s, b = T_READINGS, T_ANALYSES, T_EVENTS, T_SESSIONS, T_BOARDS
    later = r.alias("later")
    n_readings = (
        sa.select(sa.func.count()).select_from(r)
        .where(r.c.session_id == s.c.id, r.c.kind == _READING,
               ~sa.exists().where(later.c.supersedes == r.c.id))
        .scalar_subquery())
    n_analyses = (sa.select(sa.func.count()).select_from(a)
                  .where(a.c.session_id == s.c.id).scalar_subquery())
    ended = (sa.select(sa.func.min(e.c.at))
             .where(e.c.session_id == s.c.id, e.c.kind == _ENDED).scalar_subquery())
    return (
        sa.select(s.c.id, s.c.serial, s.c.operator, s.c.notes, s.c.started, s.c.board_path,
                  s.c.tool_version, b.c.title.label("board_title"),
                  b.c.sha256.label("board_sha256"), ended.label("ended"),
                  n_readings.label("n_readings"), n_analyses.label("n_analyses"))
        .join(b, b.c.id == s.c.board_id)
        .order_by(s.c.started, s.c.id))


def _summary(row: Any) -> SessionSummary:
    return SessionSummary(
        id=row.id, board_title=row.board_title, serial=row.serial, operator=row.operator,
        started=row.started, ended=row.ended, n_readings=int(row.n_readings),
        n_analyses=int(row.n_analyses))


def _stored(row: Any) -> StoredReading:
    reading = Reading(
        quantity=row.quantity, at=row.at, value=row.value, unit=row.unit,
        uncertainty=row.uncertainty, instrument=row.instrument, note=row.note,
        device=row.device, line=row.source_line, raw=tuple(json.loads(row.raw)))
    return StoredReading(
        id=row.id, session=row.session_id, reading=reading, taken_at=row.taken_at,
        stored=row.stored, source=row.source, supersedes=row.supersedes)


def _analysis(row: Any, *, with_result: bool) -> AnalysisRecord:
    return AnalysisRecord(
        id=row.id, session=row.session_id, kind=row.kind, tool_version=row.tool_version,
        inputs_sha256=row.inputs_sha256, created=row.created,
        result=json.loads(row.result) if with_result else None)
