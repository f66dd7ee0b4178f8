"""The one reader of CSV rows in the user's files (readings, lot and sweep files).

Python's :mod:`csv` reader lets a quoted cell run on over line breaks, so one quote left
open swallows every row after it into a single cell, and a cell past its field limit
ends in a traceback. Our files never need a cell that spans lines, so this reader takes
one physical line at a time (a line ends at ``\\n``, ``\\r\\n`` or ``\\r``, nothing else)
and refuses, with the file and the line:

- a row whose quoting does not close on its own line, or that has text after a closing
  quote (``"4k7"x``);
- a line longer than :data:`MAX_LINE_CHARS` characters (refused before it is parsed);
- a cell longer than :data:`MAX_CELL_CHARS` characters.

A refused line is reported and skipped; the lines after it are read as usual, so every
problem of a file is listed together (docs/formats.md §3.2).
"""

from __future__ import annotations

import csv
import re
from collections.abc import Iterator
from dataclasses import dataclass, field

from reconcile.errors import InputError, InputErrors

__all__ = ["MAX_CELL_CHARS", "MAX_LINE_CHARS", "Rows", "first_line", "lines", "read_rows"]

MAX_CELL_CHARS = 2000
"""Longest cell, in characters (a long note fits; a pasted blob does not)."""
MAX_LINE_CHARS = 20000
"""Longest line, in characters; a longer line is refused without reading its cells."""

_LINE_BREAK = re.compile(r"\r\n|\r|\n")


def lines(text: str) -> Iterator[tuple[int, str]]:
    """(line number from 1, line without its break) of ``text`` (byte-order mark dropped).

    Only ``\\n``, ``\\r\\n`` and ``\\r`` end a line, as in the csv module and in editors;
    :meth:`str.splitlines` would also break at form feeds and Unicode separators and so
    number lines differently from the user's editor.
    """
    parts = _LINE_BREAK.split(text.removeprefix("\ufeff"))
    if parts and parts[-1] == "":
        parts.pop()
    yield from enumerate(parts, start=1)


def _skipped(line: str) -> bool:
    stripped = line.strip()
    return not stripped or stripped.startswith("#")


def first_line(text: str) -> tuple[int, str] | None:
    """The first line that is not blank or a ``#`` comment, with its number."""
    return next(((n, ln) for n, ln in lines(text) if not _skipped(ln)), None)


@dataclass
class Rows:
    """The rows of a file that could be read, and the problems of the lines that could not."""

    rows: list[tuple[int, list[str]]] = field(default_factory=list)
    """(line number, cells) of every row that is not blank or a comment."""
    errors: list[InputError] = field(default_factory=list)
    """One error per refused line, in line order."""

    def header(self, expected: str, path: str) -> tuple[int, list[str]]:
        """The header row (line number, cells): the first row of the file.

        ``expected`` is what the message says the header should be.

        Raises
        ------
        InputErrors
            The header line was refused (its problem), or the file has no rows.
        """
        first_refused = self.errors[0].line if self.errors else None
        if first_refused is not None and (not self.rows or first_refused < self.rows[0][0]):
            raise InputErrors(self.errors)
        if not self.rows:
            raise InputErrors([InputError(
                f"no header line: the first line must be {expected}", path=path)])
        return self.rows[0]

    @property
    def body(self) -> list[tuple[int, list[str]]]:
        """The rows after the header."""
        return self.rows[1:]


def _cells(line: str, delimiter: str) -> list[str]:
    return next(csv.reader([line], delimiter=delimiter, strict=True))


def read_rows(text: str, path: str, *, delimiter: str = ",") -> Rows:
    """Split CSV ``text`` into rows, one physical line each (see the module docstring).

    Parameters
    ----------
    text
        The file's text.
    path
        The file's name, for messages.
    delimiter
        The separator between cells (``,``, or ``;`` in a spreadsheet export).

    Returns
    -------
    Rows
        The rows read, in file order, and one :class:`~reconcile.errors.InputError` per
        refused line. Blank lines, ``#`` comment lines and rows whose cells are all
        blank are left out.
    """
    out = Rows()
    for number, line in lines(text):
        if _skipped(line):
            continue
        if len(line) > MAX_LINE_CHARS:
            out.errors.append(InputError(
                f"the line has {len(line)} characters; a line holds at most "
                f"{MAX_LINE_CHARS} (docs/formats.md §3.2)", path=path, line=number))
            continue
        try:
            cells = _cells(line, delimiter)
        except csv.Error as err:
            if "end of data" in str(err):
                what = "a quoted cell does not close on this line"
            else:
                what = "text follows a closing quote"
            out.errors.append(InputError(
                f"{what}: a cell that starts with a quote must end with one before the next "
                f"{delimiter!r}, a quote inside it written twice (\"\"); a cell cannot span "
                "lines", path=path, line=number))
            continue
        long = [i for i, c in enumerate(cells, start=1) if len(c) > MAX_CELL_CHARS]
        if long:
            out.errors.append(InputError(
                f"cell {long[0]} has {len(cells[long[0] - 1])} characters; a cell holds at "
                f"most {MAX_CELL_CHARS} (docs/formats.md §3.2)", path=path, line=number))
            continue
        if any(c.strip() for c in cells):
            out.rows.append((number, cells))
    return out
