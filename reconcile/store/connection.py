"""Reaching a store: SQLite files and PostgreSQL URLs, transactions, errors, upgrades.

A store is an SQLite file (the default, in the user's data folder) or a PostgreSQL
database reached by URL; both hold the same tables and behave the same. Database errors
become one-line :class:`~reconcile.errors.StoreError` messages here.
"""

from __future__ import annotations

import contextlib
import math
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any, Self

import sqlalchemy as sa
from sqlalchemy import event
from sqlalchemy.engine import Connection, Engine

from reconcile import __version__
from reconcile.errors import InputError, StoreError
from reconcile.store.redact import looks_like_keywords, redact
from reconcile.store.schema import (
    _OUR_TABLES,
    MIGRATIONS,
    SCHEMA_VERSION,
    T_VERSION,
    utc_now,
)

DEFAULT_FILE_NAME = "sessions.sqlite"
STORE_ENV = "RECONCILE_STORE"
"""Environment variable naming the store used when none is given."""

CONNECT_TIMEOUT_S = 5.0
BUSY_TIMEOUT_S = 5.0


def default_store_path() -> Path:
    """``sessions.sqlite`` in the user's data folder (``$RECONCILE_STORE``, a path or a
    URL, overrides it; see :func:`open_engine`)."""
    import platformdirs

    return Path(platformdirs.user_data_dir("reconcile")) / DEFAULT_FILE_NAME


def open_engine(
    location: str | os.PathLike[str] | None, *, busy_timeout_s: float, connect_timeout_s: float
) -> tuple[Engine, str]:
    """The SQLAlchemy engine for a store location, and the location as it may be printed
    (every password replaced by ``***``, see :mod:`reconcile.store.redact`)."""
    if location is None:
        env = os.environ.get(STORE_ENV, "").strip()
        if env and ("://" in env or looks_like_keywords(env)):
            return open_engine(env, busy_timeout_s=busy_timeout_s,
                               connect_timeout_s=connect_timeout_s)
        path = Path(env).expanduser() if env else default_store_path()
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise StoreError(f"cannot create the store folder {path.parent}: {exc}") from exc
        return _sqlite_engine(path, busy_timeout_s), redact(str(path))
    text = os.fspath(location)
    if looks_like_keywords(text):
        return _postgres_engine(_keywords_url(text), connect_timeout_s)
    if "://" in text:
        return _url_engine(text, busy_timeout_s, connect_timeout_s)
    path = Path(text).expanduser()
    return _sqlite_engine(path, busy_timeout_s), redact(str(path))


def _bad_location(text: str, why: str) -> InputError:
    return InputError(f"store {redact(text)!r} cannot be read: {redact(why)}", key="store")


def _url_engine(text: str, busy_s: float, connect_s: float) -> tuple[Engine, str]:
    try:
        url = sa.engine.make_url(text)
        port = url.port  # a bad port or a broken IPv6 literal fails here or above
    except (sa.exc.ArgumentError, ValueError, TypeError) as exc:
        why = "not a URL" if isinstance(exc, sa.exc.ArgumentError) else (
            "bad port or host (an IPv6 address goes in brackets: [::1]:5432)")
        raise _bad_location(text, why) from None
    if port is not None and not 0 < port < 65536:
        raise _bad_location(text, f"port {port} is not between 1 and 65535")
    if "@" in (url.host or ""):
        raise _bad_location(text, "'@' after the user name: write an '@' in a password as %40")
    backend = url.get_backend_name()
    if backend == "sqlite":
        if not url.database or url.database == ":memory:":
            raise InputError("an in-memory store keeps nothing: give a file", key="store")
        path = Path(url.database).expanduser()
        return _sqlite_engine(path, busy_s), redact(str(path))
    if backend in ("postgresql", "postgres"):
        if url.drivername.partition("+")[2] not in ("", "psycopg"):
            raise InputError(
                f"store URL driver {redact(url.drivername)!r} is not supported: "
                "use postgresql:// or postgresql+psycopg://", key="store")
        return _postgres_engine(url, connect_s)
    raise InputError(
        f"store URL {_label(url)!r}: unsupported database "
        f"{redact(backend)!r}; give a file path, sqlite:///PATH or postgresql://...",
        key="store")


def _label(url: sa.URL) -> str:
    """A URL as it may be printed: no password in its user-info or its query."""
    return redact(url.render_as_string(hide_password=True))


def _keywords_url(text: str) -> sa.URL:
    """A libpq keyword string (``host=h dbname=d user=u``) as a PostgreSQL URL."""
    _require_psycopg(redact(text))
    from psycopg import conninfo

    try:
        keys = dict(conninfo.conninfo_to_dict(text))
    except Exception as exc:  # psycopg.ProgrammingError; its text may quote the string
        raise _bad_location(text, _one_line(exc)) from None
    try:
        port = int(keys.pop("port")) if "port" in keys else None
    except (TypeError, ValueError):
        raise _bad_location(text, "the port is not a number") from None
    return sa.URL.create(
        "postgresql+psycopg", username=keys.pop("user", None),
        password=keys.pop("password", None), host=keys.pop("host", None), port=port,
        database=keys.pop("dbname", None), query={k: str(v) for k, v in keys.items()})


def _postgres_engine(url: sa.URL, connect_s: float) -> tuple[Engine, str]:
    url = url.set(drivername="postgresql+psycopg")
    label = _label(url)
    if url.port is not None and not 0 < url.port < 65536:
        raise _bad_location(label, f"port {url.port} is not between 1 and 65535")
    _require_psycopg(label)
    engine = sa.create_engine(
        url,
        # libpq counts whole seconds and reads anything under 2 as 2
        connect_args={"connect_timeout": max(2, math.ceil(connect_s)),
                      "application_name": "reconcile"},
        pool_pre_ping=False,
    )
    return engine, label


def _require_psycopg(label: str) -> None:
    """psycopg is the optional extra ``[postgres]``: say so in one line when it is absent."""
    import importlib.util

    if importlib.util.find_spec("psycopg") is None:
        raise StoreError(
            f"store {label}: a PostgreSQL store needs the psycopg driver, which is not "
            "installed; install it with: pip install 'bench-reconcile[postgres]'"
        )


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


class Database:
    """An open connection pool to a store: transactions, error translation, the schema's
    version and upgrades. :class:`reconcile.store.repository.Store` adds what is stored."""

    def __init__(self, engine: Engine, location: str, *, busy_timeout_s: float) -> None:
        self._engine = engine
        self._busy_timeout_s = busy_timeout_s
        self.location = location
        self.is_sqlite = engine.dialect.name == "sqlite"

    # ------------------------------------------------------------ plumbing
    def close(self) -> None:
        """Release every connection."""
        self._engine.dispose()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _store_error(self, exc: sa.exc.DBAPIError) -> StoreError:
        detail = redact(_one_line(exc.orig if exc.orig is not None else exc))
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

