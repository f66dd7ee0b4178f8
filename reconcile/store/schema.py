"""The store's schema: its tables, their versions and migrations, and the stored formats.

Measurement data is append-only. A reading is never updated or deleted: a correction is
a new row whose ``supersedes`` names the row it replaces (it takes that row's place in
the session's order), and a retraction is a row of kind ``retraction`` that supersedes a
reading without replacing it. Ending a session is an event row too. Triggers refuse any
UPDATE or DELETE on the append-only tables.

Version 2 adds the record of each ``session add`` import (``imports``: the file's
SHA-256 and how many readings it holds; ``import_rows``: which of them are stored, each
row committed with its reading), so that a rerun after a crash resumes instead of
storing the first part twice. It adds tables only: code that reads sessions works on a
version-1 store unchanged, so a read-only open never needs to upgrade.

Version 3 adds the nullable column ``readings.frequency`` (Hz, the test frequency of a
small-signal reading; NULL for ``[signal] frequency``). Every stored row keeps its
values (NULL there: what it meant before); a read-only open of an older store reads
the readings without the column (:func:`reading_columns`).

Version 4 adds the nullable column ``analyses.assumed``: the hypothesis an analysis
worked under, as JSON (``{"hypothesis", "faults": [{"ref", "fault", "value"}],
"source", "probability"}``, what the result's ``assumed`` holds); NULL for an analysis
of the board as drawn, and for every analysis recorded before version 4. A read-only
open of an older store reads analyses without it (:func:`analysis_columns`).

Timestamps are UTC ISO-8601 strings with milliseconds (``2025-01-31T14:05:09.123Z``).
"""

from __future__ import annotations

import typing

from collections.abc import Callable, Sequence
from datetime import UTC, datetime

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from reconcile.errors import InputError
from reconcile.model.kinds import AnalysisKind

SCHEMA_VERSION = 4
"""The newest schema this code knows; ``MIGRATIONS[i]`` brings a store to version i+1."""

ANALYSIS_KINDS = typing.get_args(AnalysisKind)
"""Kinds of analysis a session may record."""


_READING = "reading"
_RETRACTION = "retraction"
_ENDED = "ended"
_OUR_TABLES = ("schema_version", "boards", "sessions", "session_events", "readings", "analyses",
               "imports", "import_rows")


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


def _define_v2(md: sa.MetaData) -> None:
    """Tables schema version 2 adds (frozen)."""
    text, integer = sa.Text, sa.Integer
    sa.Table(
        "imports", md,
        sa.Column("id", integer, primary_key=True, autoincrement=True),
        sa.Column("session_id", sa.String(16), sa.ForeignKey("sessions.id"), nullable=False),
        sa.Column("file_sha256", sa.String(64), nullable=False),
        sa.Column("source", text, nullable=False),
        sa.Column("n_rows", integer, nullable=False),
        sa.Column("again", integer, nullable=False),  # 1: a second import asked for
        sa.Column("started", text, nullable=False),
        sa.Column("tool_version", text, nullable=False),
        sa.Index("ix_imports_session_sha", "session_id", "file_sha256"),
        sqlite_autoincrement=True,
    )
    sa.Table(
        "import_rows", md,
        sa.Column("import_id", integer, sa.ForeignKey("imports.id"), primary_key=True,
                  autoincrement=False),
        # the reading's place in the file's readings, from 0; one row each, ever
        sa.Column("position", integer, primary_key=True, autoincrement=False),
        sa.Column("reading_id", integer, sa.ForeignKey("readings.id"), nullable=False,
                  unique=True),
    )


_APPEND_ONLY_TABLES = ("boards", "sessions", "session_events", "readings", "analyses")
_APPEND_ONLY_V2 = ("imports", "import_rows")


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


def _migrate_to_2(conn: Connection) -> None:
    md = sa.MetaData()
    _define_v1(md)  # the tables the new ones refer to
    _define_v2(md)
    md.create_all(conn, tables=[md.tables[name] for name in _APPEND_ONLY_V2])
    _forbid_changes(conn, _APPEND_ONLY_V2)  # (PostgreSQL: the same function, replaced)


def _migrate_to_3(conn: Connection) -> None:
    # Adding a nullable column keeps every row and the append-only triggers as they are.
    conn.exec_driver_sql("ALTER TABLE readings ADD COLUMN frequency DOUBLE PRECISION")


def _define_v3(md: sa.MetaData) -> None:
    """What schema version 3 adds to the tables (frozen)."""
    md.tables["readings"].append_column(
        sa.Column("frequency", sa.Float(precision=53), nullable=True))


def _migrate_to_4(conn: Connection) -> None:
    # A nullable column again: every analysis row and the triggers stay as they are.
    conn.exec_driver_sql("ALTER TABLE analyses ADD COLUMN assumed TEXT")


def _define_v4(md: sa.MetaData) -> None:
    """What schema version 4 adds to the tables (frozen)."""
    md.tables["analyses"].append_column(sa.Column("assumed", sa.Text, nullable=True))


MIGRATIONS: tuple[Callable[[Connection], None], ...] = (
    _migrate_to_1, _migrate_to_2, _migrate_to_3, _migrate_to_4)
"""Schema migrations in order; each runs inside the one transaction that upgrades."""

_MD = sa.MetaData()
_define_v1(_MD)  # the tables queried by this code: the newest version's
_define_v2(_MD)
_define_v3(_MD)
_define_v4(_MD)
T_VERSION, T_BOARDS, T_SESSIONS, T_EVENTS, T_READINGS, T_ANALYSES, T_IMPORTS, T_IMPORT_ROWS = (
    _MD.tables[name] for name in _OUR_TABLES
)



def reading_columns(version: int) -> list[sa.Column]:
    """The columns of ``readings`` a store of schema ``version`` holds."""
    if version >= 3:
        return list(T_READINGS.c)
    return [c for c in T_READINGS.c if c.name != "frequency"]


def analysis_columns(version: int, *, with_result: bool = True) -> list[sa.Column]:
    """The columns of ``analyses`` a store of schema ``version`` holds (``with_result``
    False: all but the result)."""
    return [c for c in T_ANALYSES.c
            if (version >= 4 or c.name != "assumed") and (with_result or c.name != "result")]


# ---------------------------------------------------------------------------- values
def utc_now() -> str:
    """The current time as a UTC ISO-8601 string with milliseconds."""
    return _iso(datetime.now(UTC))


def _iso(moment: datetime) -> str:
    if moment.tzinfo is None:
        raise InputError(f"time {moment.isoformat()} has no time zone; give it in UTC")
    return moment.astimezone(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")

