"""Readings a ``session add`` stored before the store kept import records (schema
version 1), found again when the same file is added once more.

A version-1 store has no ``imports`` row for such a file, so without this a rerun would
store every reading a second time. A stored row is taken to be one of the file's rows
when it is an original reading (not a correction, a retraction or a recorded import's
row), has no test frequency (version 1 had none), and agrees with the file's row on the
line number and on every stored cell: quantity, place, value, uncertainty, instrument,
note and device. Values are compared exactly: both sides are the same text parsed the
same way.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import sqlalchemy as sa
from sqlalchemy.engine import Connection

from reconcile.data.readings import Reading
from reconcile.errors import InputError
from reconcile.store.schema import _READING, T_IMPORT_ROWS, T_READINGS

_CELLS = ("source_line", "quantity", "at", "value", "uncertainty", "instrument", "note",
          "device")


@dataclass(frozen=True)
class LegacyMatch:
    """Which of a file's rows (by position) are already stored without an import record:
    ``ids[position]`` is the stored reading, ``sources`` the file names they were stored
    under."""

    n_rows: int
    ids: dict[int, int]
    sources: frozenset[str]

    @property
    def complete(self) -> bool:
        return len(self.ids) == self.n_rows

    @property
    def resumable(self) -> bool:
        """An import that stopped part-way: the first rows, from one file name."""
        return (0 < len(self.ids) < self.n_rows and len(self.sources) == 1
                and set(self.ids) == set(range(len(self.ids))))

    def lines(self, readings: Sequence[Reading]) -> str:
        found = sorted(readings[p].line for p in self.ids if readings[p].line is not None)
        if not found:
            return ""
        return f"line {found[0]}" if len(found) == 1 else f"lines {found[0]}-{found[-1]}"


def _key(row) -> tuple:
    return tuple(getattr(row, name) for name in _CELLS)


def _reading_key(reading: Reading) -> tuple:
    return (reading.line, reading.quantity, reading.at, float(reading.value),
            None if reading.uncertainty is None else float(reading.uncertainty),
            reading.instrument, reading.note, reading.device)


def find_legacy_rows(conn: Connection, session_id: str,
                     readings: Sequence[Reading]) -> LegacyMatch | None:
    """The file's rows this session already holds from an import with no record, or
    ``None`` when it holds none of them."""
    r = T_READINGS
    recorded = sa.select(T_IMPORT_ROWS.c.reading_id)
    query = (sa.select(r.c.id, r.c.source, *(r.c[name] for name in _CELLS))
             .where(r.c.session_id == session_id, r.c.kind == _READING,
                    r.c.supersedes.is_(None), r.c.source_line.is_not(None),
                    r.c.frequency.is_(None), r.c.id.not_in(recorded))
             .order_by(r.c.id))
    stored: dict[tuple, list[tuple[int, str]]] = {}
    for row in conn.execute(query):
        stored.setdefault(_key(row), []).append((row.id, row.source))
    ids: dict[int, int] = {}
    sources: set[str] = set()
    for position, reading in enumerate(readings):
        if reading.frequency is not None:
            continue
        candidates = stored.get(_reading_key(reading))
        if candidates:
            reading_id, source = candidates.pop(0)  # each stored row answers one file row
            ids[position] = reading_id
            sources.add(source)
    if not ids:
        return None
    return LegacyMatch(n_rows=len(readings), ids=ids, sources=frozenset(sources))


def adoptable_legacy_rows(conn: Connection, sid: str,
                          readings: Sequence[Reading]) -> LegacyMatch | None:
    """The file's rows stored before import records that a rerun may adopt (the first
    rows of an import that stopped part-way), or ``None``. Any other overlap, a whole
    earlier import included, is refused as an input error naming it."""
    legacy = find_legacy_rows(conn, sid, readings)
    if legacy is None or legacy.resumable:
        return legacy
    where = legacy.lines(readings)
    names = ", ".join(sorted(legacy.sources))
    if legacy.complete:
        what = f"all {legacy.n_rows} readings of this file"
    else:
        what = f"{len(legacy.ids)} of this file's {legacy.n_rows} readings"
    raise InputError(
        f"session {sid} already holds {what} ({where}, stored from {names} before the "
        "store kept import records); give --again to add them a second time", key="again")
