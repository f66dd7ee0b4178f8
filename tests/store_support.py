"""Shared pieces of the session-store tests: an invented board, readings, and a child
process runner. Imported by ``test_store.py`` and by the writer child ``store_writer.py``."""

from __future__ import annotations

import contextlib
import os
import pwd
import secrets
from collections.abc import Callable, Iterator

from boards import divider_stage, title

from reconcile.data.readings import Reading

BOARD_TOML = title("Store test stage (invented)") + "\n" + divider_stage(
    vcc="9", r1="47k", r2="10k", rc="4k7", re="1k", device_name="test-npn",
    device_params={"IS": "5f", "beta": {"value": 150, "low": 60, "high": 400}},
)

# A readings file as an operator might write it: value strings in several notations,
# blank and given uncertainties, instrument and note cells, a quoted comma.
READINGS_CSV = """\
quantity,at,value,unit,uncertainty,instrument,note
voltage,vcc,8.98,V,,,
voltage,b,1.5,V,2m,DMM-1,
voltage,c/e,2.15,V,,,"probe on TP3, then TP4"
current,VCC,1.21m,A,,,supply read-back
current,RC,1.18m,A,0.01m,,
resistance,R2,9k93,ohm,,,measured out of circuit
temperature,,27,C,,,ambient
"""


def numbered_reading(i: int, tag: str) -> Reading:
    """Reading number ``i`` of writer ``tag``; the note identifies it uniquely."""
    value = 1.0 + i * 1e-3
    note = f"{tag}-{i}"
    return Reading(
        quantity="voltage", at="b", value=value, unit="V", uncertainty=None,
        note=note, raw=("voltage", "b", repr(value), "V", "", "", note, ""),
    )


def run_unprivileged(job: Callable[[], str]) -> str:
    """Run ``job`` in a forked child that cannot override file permissions, return what
    it returned (or the type and text of the exception it raised).

    As root the child becomes ``nobody`` (root ignores permission bits); as anyone else
    it stays who it is.
    """
    read_end, write_end = os.pipe()
    pid = os.fork()
    if pid == 0:  # child
        os.close(read_end)
        try:
            if os.geteuid() == 0:
                nobody = pwd.getpwnam("nobody")
                os.setgroups([])
                os.setgid(nobody.pw_gid)
                os.setuid(nobody.pw_uid)
            message = job()
        except BaseException as exc:  # noqa: BLE001 - reported to the parent
            message = f"{type(exc).__name__}: {exc}"
        os.write(write_end, message.encode("utf-8"))
        os._exit(0)
    os.close(write_end)
    chunks = []
    while chunk := os.read(read_end, 65536):
        chunks.append(chunk)
    os.close(read_end)
    os.waitpid(pid, 0)
    return b"".join(chunks).decode("utf-8")


@contextlib.contextmanager
def shared_folder(prefix: str = "reconcile-store-"):
    """A folder outside pytest's private tmp tree, so an unprivileged child can reach it;
    emptied and removed afterwards (whatever mode a test left it in)."""
    import tempfile
    from pathlib import Path

    folder = Path(tempfile.mkdtemp(prefix=prefix))
    folder.chmod(0o755)
    try:
        yield folder
    finally:
        folder.chmod(0o755)
        for item in folder.iterdir():
            item.unlink()
        folder.rmdir()


PG_URL = os.environ.get("RECONCILE_TEST_PG_URL", "")


def pg_unavailable(reason: str) -> None:
    """Skip a PostgreSQL test locally; fail it under ``CI=true``."""
    import pytest

    if os.environ.get("CI") == "true":
        pytest.fail(f"{reason}; with CI=true the PostgreSQL store tests must run")
    pytest.skip(f"{reason}: PostgreSQL store tests skipped (.ci/postgres.sh starts a server)")


def pg_admin_url():
    import sqlalchemy as sa

    return sa.make_url(PG_URL).set(drivername="postgresql+psycopg")


@contextlib.contextmanager
def pg_database() -> Iterator[str]:
    """A new, empty PostgreSQL database on the server of RECONCILE_TEST_PG_URL, as a URL
    (with its password, if any); dropped afterwards."""
    import pytest
    import sqlalchemy as sa

    if not PG_URL:
        pg_unavailable("RECONCILE_TEST_PG_URL is not set")
    admin = sa.create_engine(
        pg_admin_url(), isolation_level="AUTOCOMMIT", connect_args={"connect_timeout": 5})
    name = "reconcile_t_" + secrets.token_hex(6)
    try:
        with admin.connect() as conn:
            conn.exec_driver_sql(f'CREATE DATABASE "{name}"')
    except sa.exc.OperationalError as exc:
        admin.dispose()
        pytest.fail(f"PostgreSQL server in RECONCILE_TEST_PG_URL is not reachable: {exc}")
    try:
        yield pg_admin_url().set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.dispose()
