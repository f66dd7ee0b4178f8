"""What the ``reconcile session ...`` commands do, and the ``--session`` side of analyses.

Each function opens the store named by ``store`` (``None`` for the default store, a file
path or a database URL), does one job, closes the store and returns plain data: a dict
that ``--json`` prints as it is, or text. Printing is the command line's job.

SQLAlchemy is imported only when a function here runs (through :mod:`reconcile.store`),
so importing this module costs nothing.
"""

from __future__ import annotations

import os
from typing import TYPE_CHECKING, Any, TypeAlias

if TYPE_CHECKING:
    from reconcile.model.board import Board
    from reconcile.data.readings import Reading
    from reconcile.store.repository import Store

StoreLocation: TypeAlias = "str | os.PathLike[str] | None"
"""``None`` (the default store), an SQLite file path, or a database URL."""


def _open(store: StoreLocation, *, read_only: bool = False) -> Store:
    """Open the store; a command that only reads opens it read-only (creating nothing:
    a mistyped path is an error, not a new empty store)."""
    from reconcile.store.repository import open_store

    return open_store(store, read_only=read_only)


def new_session(
    board_path: str | os.PathLike[str],
    *,
    serial: str = "",
    operator: str = "",
    notes: str = "",
    store: StoreLocation = None,
) -> dict[str, Any]:
    """``session new``: snapshot a board file and start a session on it.

    Returns ``{"session": ID}``.
    """
    from reconcile.model.board_loader import load_board

    board = load_board(board_path)
    with _open(store) as db:
        session_id = db.create_session(board, serial=serial, operator=operator, notes=notes)
    return {"session": session_id}


def add_readings_file(
    session_id: str,
    readings_path: str | os.PathLike[str],
    *,
    again: bool = False,
    store: StoreLocation = None,
) -> dict[str, Any]:
    """``session add``: check a readings file against the session's board, then store
    its readings one by one (each committed as it is stored), as one recorded import.

    The import records the file's SHA-256 and which of its readings are stored. Adding
    the same file again resumes an import a crash left unfinished, and is refused
    (naming the earlier import) once it is complete, unless ``again``.

    Returns ``{"session": ID, "added": N, "ids": [...], "import": {...}, "resumed": B,
    "already_stored": K}``. A file with any problem stores nothing.
    """
    import hashlib
    from pathlib import Path

    from reconcile.data.readings import load_readings

    with _open(store) as db:
        board = db.session_board(session_id)
        readings = load_readings(readings_path, board=board)
        digest = hashlib.sha256(Path(readings_path).read_bytes()).hexdigest()
        done = db.import_readings(session_id, readings, file_sha256=digest,
                                  source=os.fspath(readings_path), again=again)
    return {"session": session_id.strip().upper(), "added": len(done.ids),
            "ids": list(done.ids), "import": done.record.to_dict(), "resumed": done.resumed,
            "already_stored": done.already_stored}


def correct_reading(
    session_id: str,
    reading_id: int,
    row: str,
    *,
    store: StoreLocation = None,
) -> dict[str, Any]:
    """``session correct``: store a corrected reading in place of an earlier one.

    ``row`` is one readings-file row in the standard column order (``quantity,at,value,
    unit,uncertainty,instrument,note,device``; trailing cells may be left off). The old
    reading stays in the store, superseded. Returns ``{"session", "supersedes", "id"}``.
    """
    corrected = _one_reading(row, session_id, store)
    with _open(store) as db:
        new_id = db.correct_reading(session_id, reading_id, corrected)
    return {"session": session_id.strip().upper(), "supersedes": int(reading_id), "id": new_id}


def _one_reading(row: str, session_id: str, store: StoreLocation) -> Reading:
    from reconcile.errors import InputError
    from reconcile.data.readings import readings_from_text

    columns = ("quantity", "at", "value", "unit", "uncertainty", "instrument", "note", "device")
    with _open(store) as db:
        board = db.session_board(session_id)
    text = ",".join(columns) + "\n" + row.strip() + "\n"
    found = readings_from_text(text, path="<corrected reading>", board=board)
    if len(found) != 1:
        raise InputError(f"give exactly one reading row, not {len(found)}", key="row")
    return found[0]


def retract_reading(
    session_id: str,
    reading_id: int,
    *,
    note: str = "",
    store: StoreLocation = None,
) -> dict[str, Any]:
    """``session retract``: withdraw a reading without a replacement (it stays stored,
    superseded). Returns ``{"session", "retracted", "id"}``."""
    with _open(store) as db:
        new_id = db.retract_reading(session_id, reading_id, note=note)
    return {"session": session_id.strip().upper(), "retracted": int(reading_id), "id": new_id}


def export_session(session_id: str, *, store: StoreLocation = None) -> str:
    """``session export``: the session's current readings as a readings file (text)."""
    with _open(store, read_only=True) as db:
        return db.export_csv(session_id)


def list_sessions(*, store: StoreLocation = None) -> dict[str, Any]:
    """``session list``: ``{"store": LOCATION, "sessions": [{session, board_title, serial,
    operator, started, ended, readings, analyses}, ...]}``, oldest first.

    The default store, before any session was started, lists no sessions (and is not
    created)."""
    from reconcile.store.connection import MissingStore

    try:
        db = _open(store, read_only=True)
    except MissingStore:
        from reconcile.store.connection import STORE_ENV, default_store_path

        if store is not None or os.environ.get(STORE_ENV, "").strip():
            raise  # a path the user gave

        return {"store": str(default_store_path()), "sessions": []}
    with db:
        return {"store": db.location, "sessions": [s.to_dict() for s in db.list_sessions()]}


def show_session(session_id: str, *, store: StoreLocation = None) -> dict[str, Any]:
    """``session show``: metadata, current readings and the analyses recorded (without
    their results); see :meth:`reconcile.store.SessionView.to_dict`."""
    with _open(store, read_only=True) as db:
        return db.show_session(session_id).to_dict()


def end_session(
    session_id: str, *, note: str = "", store: StoreLocation = None
) -> dict[str, Any]:
    """``session end``: record the end of a session; returns ``{"session", "ended"}``."""
    with _open(store) as db:
        ended = db.end_session(session_id, note=note)
    return {"session": session_id.strip().upper(), "ended": ended}


def show_analysis(analysis_id: int, *, store: StoreLocation = None) -> dict[str, Any]:
    """One recorded analysis with its result: ``{"id", "kind", "created", "tool_version",
    "inputs_sha256", "assumed", "result"}``."""
    with _open(store, read_only=True) as db:
        return db.analysis(analysis_id).to_dict()


def analysis_inputs(
    session_id: str, *, store: StoreLocation = None
) -> tuple[Board, list[Reading], str]:
    """What ``fit/diagnose/trim --session ID`` analyse: the session's board, its current
    readings, and the digest of both to record with the result."""
    from reconcile.data.digest import inputs_sha256

    with _open(store, read_only=True) as db:
        board, readings = db.session_inputs(session_id)
    return board, readings, inputs_sha256(board, readings)


def record_analysis(
    session_id: str,
    kind: str,
    result: dict[str, Any],
    *,
    inputs_sha256: str,
    store: StoreLocation = None,
    assumed: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Record an analysis result (the object its ``--json`` prints) with a session, and
    the hypothesis it worked under (``assumed``; None: the board as drawn).

    Returns ``{"session", "analysis": ID}``.
    """
    with _open(store) as db:
        analysis_id = db.record_analysis(session_id, kind, result, inputs_sha256=inputs_sha256,
                                         assumed=assumed)
    return {"session": session_id.strip().upper(), "analysis": analysis_id}
