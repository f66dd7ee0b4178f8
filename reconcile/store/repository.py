"""The session store: board snapshots, the readings taken on them, and the analyses made.

:class:`Store` reads and writes sessions over a :class:`~reconcile.store.connection.Database`;
:func:`open_store` opens one. The *current* readings of a session are the rows of kind
``reading`` that nothing supersedes, ordered by the id of the first row of their chain
(see :mod:`reconcile.store.schema` for the append-only rules).

Each reading is committed in its own transaction as it is stored, so a writer killed
half-way loses at most the reading in flight. Order comes from an autoincrement id, so
any number of processes may add readings to one session at the same time.

Session ids read ``S-`` and eight base32 characters (RFC 4648 alphabet, 40 random bits
from :mod:`secrets`), for example ``S-K7QX2MZA``; they are matched case-insensitively.

The store package is the only one importing SQLAlchemy (Core, no ORM).
"""

from __future__ import annotations

import base64
import hashlib
import json
import os
import secrets
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from reconcile import __version__
from reconcile.data.digest import inputs_sha256  # noqa: F401 - re-exported
from reconcile.data.readings import Reading
from reconcile.errors import InputError, StoreError
from reconcile.model.board import Board
from reconcile.store.connection import (
    BUSY_TIMEOUT_S,
    CONNECT_TIMEOUT_S,
    LOCK_TIMEOUT_ENV,
    STATEMENT_TIMEOUT_ENV,
    STATEMENT_TIMEOUT_S,
    Database,
    Waits,
    open_engine,
    timeout_from_env,
)
from reconcile.store.legacy_imports import adoptable_legacy_rows
from reconcile.store.schema import (
    _ENDED,
    _READING,
    _RETRACTION,
    ANALYSIS_KINDS,
    T_ANALYSES,
    T_BOARDS,
    T_EVENTS,
    T_IMPORT_ROWS,
    T_IMPORTS,
    T_READINGS,
    T_SESSIONS,
    _iso,
    analysis_columns,
    reading_columns,
    utc_now,
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
        """The reading in SI with its SI unit; what the user typed in ``typed``."""
        from reconcile.model.quantities import REGISTRY

        r = self.reading
        raw = list(r.raw) + [""] * (5 - len(r.raw))
        typed = {
            "value": raw[2].strip() or None,
            "unit": r.unit,
            "uncertainty": raw[4].strip() or None,
        }
        return {
            "id": self.id, "quantity": r.quantity, "at": r.at, "value": r.value,
            "unit": REGISTRY[r.quantity].unit if r.quantity in REGISTRY else "",
            "uncertainty": r.uncertainty, "typed": typed, "instrument": r.instrument,
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
    assumed: dict[str, Any] | None = None
    """The hypothesis the analysis worked under (None: the board as drawn)."""

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "id": self.id, "kind": self.kind, "created": self.created,
            "tool_version": self.tool_version, "inputs_sha256": self.inputs_sha256,
            "assumed": self.assumed,
        }
        if self.result is not None:
            out["result"] = self.result
        return out


@dataclass(frozen=True)
class ImportRecord:
    """One ``session add`` of a readings file: its SHA-256, how many readings it holds,
    how many of them are stored and the file lines they came from."""

    id: int
    session: str
    file_sha256: str
    source: str
    n_rows: int
    started: str
    stored: int = 0
    first_line: int | None = None
    last_line: int | None = None

    @property
    def complete(self) -> bool:
        return self.stored >= self.n_rows

    def describe(self) -> str:
        """``import 3 of FILE on TIME (7 of 7 readings, lines 2-8)``."""
        lines = ("" if self.first_line is None
                 else f", lines {self.first_line}-{self.last_line}")
        return (f"import {self.id} of {self.source} on {self.started} "
                f"({self.stored} of {self.n_rows} readings{lines})")

    def to_dict(self) -> dict[str, Any]:
        return {"import": self.id, "file_sha256": self.file_sha256, "source": self.source,
                "rows": self.n_rows, "stored": self.stored, "started": self.started,
                "lines": None if self.first_line is None else [self.first_line,
                                                                self.last_line]}


@dataclass(frozen=True)
class ImportOutcome:
    """What one ``session add`` did: the import it wrote to (a new one, or an earlier
    one resumed), the ids it stored, and how many readings were stored before."""

    record: ImportRecord
    ids: tuple[int, ...]
    resumed: bool
    already_stored: int


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


def open_store(
    location: str | os.PathLike[str] | None = None,
    *,
    busy_timeout_s: float | None = None,
    connect_timeout_s: float = CONNECT_TIMEOUT_S,
    statement_timeout_s: float | None = None,
    read_only: bool = False,
) -> Store:
    """Open (creating or upgrading where needed) a session store.

    Parameters
    ----------
    location
        ``None`` for the default store (see :func:`default_store_path`), a file path for
        an SQLite store, or a database URL: ``sqlite:///path``, ``postgresql://...``
        (reached with the psycopg driver).
    busy_timeout_s
        How long a writer waits for another process' lock, in s (SQLite's busy_timeout,
        PostgreSQL's lock_timeout); default ``$RECONCILE_STORE_LOCK_TIMEOUT`` or 5 s.
    connect_timeout_s
        How long to wait for a database server to answer, in s (whole seconds, at
        least 2: libpq's rule).
    statement_timeout_s
        How long one PostgreSQL statement may run, in s (its statement_timeout);
        default ``$RECONCILE_STORE_STATEMENT_TIMEOUT`` or 60 s.
    read_only
        Only read: nothing is created or upgraded, a missing SQLite file is a
        :class:`~reconcile.store.connection.MissingStore` error, and a file in a folder
        that cannot take SQLite's side files is read as it is (``immutable``).

    Raises
    ------
    InputError
        The location is not a usable path or URL.
    StoreError
        The store cannot be reached, read or written, is not a reconcile store, or has a
        newer schema than this code knows.
    """
    waits = Waits(
        busy_s=(timeout_from_env(LOCK_TIMEOUT_ENV, BUSY_TIMEOUT_S)
                if busy_timeout_s is None else busy_timeout_s),
        connect_s=connect_timeout_s,
        statement_s=(timeout_from_env(STATEMENT_TIMEOUT_ENV, STATEMENT_TIMEOUT_S)
                     if statement_timeout_s is None else statement_timeout_s),
        read_only=read_only)
    engine, label = open_engine(location, waits)
    store = Store(engine, label, waits)
    try:
        store._prepare_schema()
    except BaseException:
        store.close()
        raise
    return store


class Store(Database):
    """An open session store. Make one with :func:`open_store`; close it (or use it as a
    context manager) when done."""

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
        if self.empty:
            raise InputError(
                f"no session {session_id!r} in store {self.location} (it holds no sessions)",
                key="session")
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

    # ------------------------------------------------------------ imports
    def import_readings(
        self,
        session_id: str,
        readings: Sequence[Reading],
        *,
        file_sha256: str,
        source: str,
        again: bool = False,
    ) -> ImportOutcome:
        """Store a readings file's readings as one recorded import, each reading
        committed with its place in the file.

        If this session already has an import of the same file (same SHA-256): an
        unfinished one (a crash, a kill) is resumed, storing only the readings it lacks;
        a finished one is refused, naming it, unless ``again`` asks for a second import.
        """
        with self._write() as conn:
            # PostgreSQL: one import decision at a time per session (SQLite: IMMEDIATE)
            sid, ended = self._session_state(conn, session_id, lock="update")
            if ended is not None:
                raise InputError(
                    f"session {sid} ended at {ended}: start a new session to add readings")
            earlier = self._latest_import(conn, sid, file_sha256)
            resume = (earlier is not None and not again and not earlier.complete
                      and earlier.n_rows == len(readings))
            if earlier is not None and not again and not resume:
                raise InputError(
                    f"this file was already added to session {sid}: {earlier.describe()}; "
                    "give --again to add its readings a second time", key="again")
            legacy = None if earlier is not None or again else adoptable_legacy_rows(conn, sid, readings)
            if resume:
                assert earlier is not None
                import_id = earlier.id
                done = set(conn.execute(sa.select(T_IMPORT_ROWS.c.position).where(
                    T_IMPORT_ROWS.c.import_id == import_id)).scalars())
            else:
                import_id = int(conn.execute(T_IMPORTS.insert().values(
                    session_id=sid, file_sha256=file_sha256, source=source,
                    n_rows=len(readings), again=int(earlier is not None), started=utc_now(),
                    tool_version=__version__)).inserted_primary_key[0])
                done = set()
            if legacy is not None:  # adopt the rows stored before import records
                resume = True
                for position, reading_id in sorted(legacy.ids.items()):
                    conn.execute(T_IMPORT_ROWS.insert().values(
                        import_id=import_id, position=position, reading_id=reading_id))
                done = set(legacy.ids)
        ids: list[int] = []
        for position, reading in enumerate(readings):
            if position in done:
                continue
            try:
                new_id = self._add_imported(sid, import_id, position, reading, source)
            except StoreError as exc:
                raise StoreError(
                    f"{exc} (import {import_id}: {len(done) + len(ids)} of {len(readings)} "
                    "readings stored; run the same command again to add the rest)") from exc
            if new_id is not None:
                ids.append(new_id)
        with self._read() as conn:
            record = self._import(conn, import_id)
        return ImportOutcome(record=record, ids=tuple(ids), resumed=resume,
                             already_stored=len(done))

    def _add_imported(
        self, sid: str, import_id: int, position: int, reading: Reading, source: str
    ) -> int | None:
        """One reading of an import and its place, in one transaction; ``None`` when
        another process resuming the same import stored that place first."""
        row = self._reading_row(reading, None, source)
        try:
            with self._write() as conn:
                row["session_id"] = self._open_session(conn, sid)
                reading_id = int(conn.execute(_INSERT_READING, row).inserted_primary_key[0])
                conn.execute(T_IMPORT_ROWS.insert().values(
                    import_id=import_id, position=position, reading_id=reading_id))
                return reading_id
        except StoreError as exc:
            if isinstance(exc.__cause__, sa.exc.IntegrityError):
                return None  # rolled back with its reading: nothing stored twice
            raise

    def _latest_import(self, conn: Connection, sid: str, sha: str) -> ImportRecord | None:
        newest = conn.execute(
            sa.select(sa.func.max(T_IMPORTS.c.id))
            .where(T_IMPORTS.c.session_id == sid, T_IMPORTS.c.file_sha256 == sha)).scalar()
        return None if newest is None else self._import(conn, int(newest))

    @staticmethod
    def _import(conn: Connection, import_id: int) -> ImportRecord:
        head = conn.execute(sa.select(T_IMPORTS).where(T_IMPORTS.c.id == import_id)).one()
        ir, r = T_IMPORT_ROWS, T_READINGS
        stored, first, last = conn.execute(
            sa.select(sa.func.count(), sa.func.min(r.c.source_line), sa.func.max(r.c.source_line))
            .select_from(ir.join(r, r.c.id == ir.c.reading_id))
            .where(ir.c.import_id == import_id)).one()
        return ImportRecord(
            id=head.id, session=head.session_id, file_sha256=head.file_sha256,
            source=head.source, n_rows=head.n_rows, started=head.started, stored=int(stored),
            first_line=first, last_line=last)

    def imports(self, session_id: str) -> list[ImportRecord]:
        """The session's recorded imports, oldest first (none on a version-1 store)."""
        with self._read() as conn:
            sid, _ended = self._session_state(conn, session_id)
            if self._version(conn) < 2:
                return []
            found = conn.execute(sa.select(T_IMPORTS.c.id).where(
                T_IMPORTS.c.session_id == sid).order_by(T_IMPORTS.c.id)).scalars().all()
            return [self._import(conn, int(i)) for i in found]

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
        if not 1 <= int(reading_id) < 2**63:  # ids are positive 64-bit integers
            raise InputError(f"session {session_id.strip().upper()} has no reading "
                             f"{reading_id}", key="reading")
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
        from reconcile.data.validation import check_reading

        check_reading(reading)  # what the readings loader refuses, the store refuses
        value = float(reading.value)
        now = utc_now()
        return {
            "kind": _READING, "quantity": reading.quantity, "at": reading.at, "value": value,
            "unit": reading.unit,
            "uncertainty": None if reading.uncertainty is None else float(reading.uncertainty),
            "instrument": reading.instrument, "note": reading.note, "device": reading.device,
            "frequency": None if reading.frequency is None else float(reading.frequency),
            "raw": json.dumps(list(reading.raw), ensure_ascii=False),
            "source": source, "source_line": reading.line,
            "taken_at": now if taken_at is None else _iso(taken_at), "stored": now,
            "supersedes": None,
        }

    def _rows(self, conn: Connection, sid: str) -> tuple[list[StoredReading], int]:
        """Current readings in order, and how many rows they supersede."""
        rows = conn.execute(
            sa.select(*reading_columns(self._version(conn)))
            .where(T_READINGS.c.session_id == sid).order_by(T_READINGS.c.id)).all()
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
        _refuse_poisoned(sid, current)
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
        assumed: dict[str, Any] | None = None,
    ) -> int:
        """Record an analysis of a session; returns its id.

        ``result`` is the JSON object the analysis prints; ``inputs_sha256`` is
        :func:`inputs_sha256` of the board and readings it was given; ``assumed`` the
        hypothesis it worked under (None: the board as drawn).
        """
        if kind not in ANALYSIS_KINDS:
            raise InputError(f"analysis kind {kind!r} is not one of {', '.join(ANALYSIS_KINDS)}")
        from reconcile.jsonout import clean

        try:
            text = json.dumps(clean(result), allow_nan=False, ensure_ascii=False)
            hypothesis = None if assumed is None else json.dumps(
                clean(assumed), allow_nan=False, ensure_ascii=False)
        except (TypeError, ValueError) as exc:
            raise StoreError(f"the {kind} result cannot be stored as JSON: {exc}") from exc
        with self._write() as conn:
            sid, _ended = self._session_state(conn, session_id)
            return int(conn.execute(T_ANALYSES.insert().values(
                session_id=sid, kind=kind, result=text, tool_version=tool_version,
                inputs_sha256=inputs_sha256, created=utc_now(),
                assumed=hypothesis)).inserted_primary_key[0])

    def analysis(self, analysis_id: int) -> AnalysisRecord:
        """One recorded analysis, with its result."""
        if self.empty or not 1 <= int(analysis_id) < 2**63:
            raise InputError(f"no analysis {analysis_id} in store {self.location}",
                             key="analysis")
        with self._read() as conn:
            row = conn.execute(
                sa.select(*analysis_columns(self._version(conn)))
                .where(T_ANALYSES.c.id == int(analysis_id))).first()
        if row is None:
            raise InputError(f"no analysis {analysis_id} in store {self.location}", key="analysis")
        return _analysis(row, with_result=True)

    # ------------------------------------------------------------ listing
    def list_sessions(self) -> list[SessionSummary]:
        """Every session, oldest first."""
        if self.empty:
            return []
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
                sa.select(*analysis_columns(self._version(conn), with_result=False))
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


def _refuse_poisoned(sid: str, current: list[StoredReading]) -> None:
    """Refuse to analyse a session holding a reading the store would now refuse (stored
    by an earlier version): the message names it and how to mend it; nothing is lost."""
    from reconcile.data.validation import reading_problems

    for stored in current:
        problems = reading_problems(stored.reading)
        if problems:
            raise InputError(
                f"session {sid} reading {stored.id} ({stored.reading.quantity}): "
                f"{problems[0]}; replace it with 'reconcile session correct {sid} "
                f"{stored.id} ROW' or withdraw it with 'session retract'", key="reading")


def _stored(row: Any) -> StoredReading:
    reading = Reading(
        quantity=row.quantity, at=row.at, value=row.value, unit=row.unit,
        uncertainty=row.uncertainty, instrument=row.instrument, note=row.note,
        device=row.device, frequency=getattr(row, "frequency", None), line=row.source_line,
        raw=tuple(json.loads(row.raw)))
    return StoredReading(
        id=row.id, session=row.session_id, reading=reading, taken_at=row.taken_at,
        stored=row.stored, source=row.source, supersedes=row.supersedes)


def _analysis(row: Any, *, with_result: bool) -> AnalysisRecord:
    return AnalysisRecord(
        id=row.id, session=row.session_id, kind=row.kind, tool_version=row.tool_version,
        inputs_sha256=row.inputs_sha256, created=row.created,
        result=json.loads(row.result) if with_result else None,
        assumed=None if getattr(row, "assumed", None) is None else json.loads(row.assumed))
