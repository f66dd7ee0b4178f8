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
from dataclasses import dataclass
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
"""How long a writer waits for another's lock, in s: SQLite's busy_timeout, PostgreSQL's
lock_timeout (``$RECONCILE_STORE_LOCK_TIMEOUT`` overrides it)."""
STATEMENT_TIMEOUT_S = 60.0
"""How long one PostgreSQL statement may run, in s: its statement_timeout
(``$RECONCILE_STORE_STATEMENT_TIMEOUT`` overrides it)."""
LOCK_TIMEOUT_ENV = "RECONCILE_STORE_LOCK_TIMEOUT"
STATEMENT_TIMEOUT_ENV = "RECONCILE_STORE_STATEMENT_TIMEOUT"
MAX_TIMEOUT_S = 86_400.0


def timeout_from_env(name: str, default: float) -> float:
    """A timeout in seconds from environment variable ``name`` (``default`` if unset)."""
    text = os.environ.get(name, "").strip()
    if not text:
        return default
    try:
        value = float(text.removesuffix("s").strip())
    except ValueError:
        value = math.nan
    if not 0.0 < value <= MAX_TIMEOUT_S:  # also refuses NaN
        raise InputError(
            f"{redact(text)!r} is not a timeout: give seconds, more than 0 and at most "
            f"{MAX_TIMEOUT_S:g}", key=name)
    return value


@dataclass(frozen=True)
class Waits:
    """How long a store connection waits, in s, and whether it only reads."""

    busy_s: float = BUSY_TIMEOUT_S
    connect_s: float = CONNECT_TIMEOUT_S
    statement_s: float = STATEMENT_TIMEOUT_S
    read_only: bool = False


def default_store_path() -> Path:
    """``sessions.sqlite`` in the user's data folder (``$RECONCILE_STORE``, a path or a
    URL, overrides it; see :func:`open_engine`)."""
    import platformdirs

    return Path(platformdirs.user_data_dir("reconcile")) / DEFAULT_FILE_NAME


def open_engine(location: str | os.PathLike[str] | None, waits: Waits) -> tuple[Engine, str]:
    """The SQLAlchemy engine for a store location, and the location as it may be printed
    (every password replaced by ``***``, see :mod:`reconcile.store.redact`).

    A read-only open (``waits.read_only``) of an SQLite file that does not exist raises
    :class:`MissingStore` and creates nothing."""
    if location is None:
        env = os.environ.get(STORE_ENV, "").strip()
        if env and ("://" in env or looks_like_keywords(env)):
            return open_engine(env, waits)
        path = Path(env).expanduser() if env else default_store_path()
        if not waits.read_only:
            try:
                path.parent.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise StoreError(
                    f"cannot create the store folder {redact(str(path.parent))}: {exc}") from exc
        return _sqlite_engine(path, waits), redact(str(path))
    text = os.fspath(location)
    if looks_like_keywords(text):
        return _postgres_engine(_keywords_url(text), waits)
    if "://" in text:
        return _url_engine(text, waits)
    path = Path(text).expanduser()
    return _sqlite_engine(path, waits), redact(str(path))


class MissingStore(InputError):
    """A command that only reads was given an SQLite store file that does not exist."""


def _bad_location(text: str, why: str) -> InputError:
    return InputError(f"store {redact(text)!r} cannot be read: {redact(why)}", key="store")


def _url_engine(text: str, waits: Waits) -> tuple[Engine, str]:
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
        return _sqlite_engine(path, waits), redact(str(path))
    if backend in ("postgresql", "postgres"):
        if url.drivername.partition("+")[2] not in ("", "psycopg"):
            raise InputError(
                f"store URL driver {redact(url.drivername)!r} is not supported: "
                "use postgresql:// or postgresql+psycopg://", key="store")
        return _postgres_engine(url, waits)
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
    from psycopg import ProgrammingError, conninfo

    try:
        keys = dict(conninfo.conninfo_to_dict(text))
    except ProgrammingError as exc:  # its text may quote the string
        raise _bad_location(text, _one_line(exc)) from None
    try:
        port = int(keys.pop("port")) if "port" in keys else None
    except (TypeError, ValueError):
        raise _bad_location(text, "the port is not a number") from None
    return sa.URL.create(
        "postgresql+psycopg", username=keys.pop("user", None),
        password=keys.pop("password", None), host=keys.pop("host", None), port=port,
        database=keys.pop("dbname", None), query={k: str(v) for k, v in keys.items()})


def _postgres_engine(url: sa.URL, waits: Waits) -> tuple[Engine, str]:
    url = url.set(drivername="postgresql+psycopg")
    label = _label(url)
    if url.port is not None and not 0 < url.port < 65536:
        raise _bad_location(label, f"port {url.port} is not between 1 and 65535")
    _require_psycopg(label)
    # Every session waits at most busy_s for a lock and statement_s for a statement; set
    # in the start-up packet, so no transaction is needed. The URL's own options follow,
    # so a URL may still override them.
    options = (f"-c lock_timeout={_ms(waits.busy_s)} "
               f"-c statement_timeout={_ms(waits.statement_s)}")
    query = dict(url.query)
    if "options" in query:
        given = query.pop("options")
        options += " " + (" ".join(given) if isinstance(given, tuple) else given)
    engine = sa.create_engine(
        url.set(query=query),
        # libpq counts whole seconds and reads anything under 2 as 2
        connect_args={"connect_timeout": max(2, math.ceil(waits.connect_s)),
                      "application_name": "reconcile", "options": options},
        pool_pre_ping=False,
    )
    return engine, label


def _ms(seconds: float) -> int:
    return max(1, round(seconds * 1000))


def _require_psycopg(label: str) -> None:
    """psycopg is the optional extra ``[postgres]``: say so in one line when it is absent."""
    import importlib.util

    if importlib.util.find_spec("psycopg") is None:
        raise StoreError(
            f"store {label}: a PostgreSQL store needs the psycopg driver, which is not "
            "installed; install it with: pip install 'bench-reconcile[postgres]'"
        )


def _sqlite_engine(path: Path, waits: Waits) -> Engine:
    shown = redact(str(path))
    if path.is_dir():
        raise StoreError(f"store {shown} is a folder; give a file name such as {DEFAULT_FILE_NAME}")
    if waits.read_only and not path.exists():
        raise MissingStore(
            f"no store at {shown} (a mistyped path?); 'reconcile session new' starts one",
            key="store")
    if not path.parent.is_dir():
        raise StoreError(f"cannot open store {shown}: folder {redact(str(path.parent))} "
                         "does not exist")
    busy_ms = max(0, round(waits.busy_s * 1000))
    if waits.read_only:
        engine = _sqlite_reader(path, waits.busy_s)
    else:
        engine = sa.create_engine(
            sa.URL.create("sqlite", database=str(path)), connect_args={"timeout": waits.busy_s})

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        # Let SQLAlchemy's "begin" hook issue BEGIN (sqlite3's own handling is off), so
        # the pragmas below run outside any transaction: WAL cannot be entered in one.
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        try:
            cur.execute(f"PRAGMA busy_timeout={busy_ms}")
            cur.execute("PRAGMA foreign_keys=ON")
            if not waits.read_only:  # a reader keeps the file's journal mode
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


def _sqlite_reader(path: Path, busy_s: float) -> Engine:
    """A read-only SQLite engine: ``mode=ro``, or, where the file's folder cannot take
    the WAL's side files, ``immutable=1`` (SQLite then reads the file as it is, without
    locks; what another writer has not yet checkpointed into it is not seen)."""
    import sqlite3
    from urllib.parse import quote

    base = "file:" + quote(str(path.resolve()), safe="/")
    immutable = not os.access(path.parent, os.W_OK) and not (
        path.with_name(path.name + "-shm").exists())

    def connect() -> sqlite3.Connection:
        uri = base + ("?mode=ro&immutable=1" if immutable else "?mode=ro")
        return sqlite3.connect(uri, uri=True, timeout=busy_s, check_same_thread=False)

    return sa.create_engine("sqlite://", creator=connect)


# ---------------------------------------------------------------------------- errors
def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())


class Database:
    """An open connection pool to a store: transactions, error translation, the schema's
    version and upgrades. :class:`reconcile.store.repository.Store` adds what is stored."""

    def __init__(self, engine: Engine, location: str, waits: Waits) -> None:
        self._engine = engine
        self._waits = waits
        self._busy_timeout_s = waits.busy_s
        self.location = location
        self.is_sqlite = engine.dialect.name == "sqlite"
        self.read_only = waits.read_only
        self.empty = False
        """A read-only open of a store that holds no tables yet (nothing was created)."""

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
        state = getattr(exc.orig, "sqlstate", None)
        if state == "55P03":  # lock_not_available: lock_timeout ran out
            return StoreError(
                f"{where} is locked by another process (waited {self._busy_timeout_s:g} s, "
                f"${LOCK_TIMEOUT_ENV}); try again when it has finished")
        if state == "57014":  # query_canceled: statement_timeout ran out
            return StoreError(
                f"{where}: a statement ran longer than {self._waits.statement_s:g} s "
                f"(${STATEMENT_TIMEOUT_ENV}); try again, or allow longer")
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
        if self.read_only:  # reads work on every older version: nothing is written
            self.empty = version == 0
            return
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

