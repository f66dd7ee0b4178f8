"""How a spreadsheet saved the readings file: the separator and the decimal mark.

A spreadsheet set to a language that writes decimal commas (``4,98``) saves "CSV" with
``;`` between cells. The readings loader reads that too: the header line decides. If
the header splits into known columns at ``,`` the file is plain CSV; if it splits only
at ``;`` the file is a semicolon export, and a number cell may use a decimal comma.
Anything else (tabs, a number with both ``.`` and ``,``) is refused with the hint to
save with commas.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from reconcile.errors import InputError

__all__ = ["Dialect", "COMMA", "detect"]

USE_COMMAS = "use commas: save the file as CSV with ',' between cells and '.' as the decimal mark"

# a number written with a decimal comma, optionally followed by a prefix and a unit
# (``4,98``, ``-0,5``, ``1,5e-3``, ``0,54m``, ``12,3 %``); never a thousands separator
_DECIMAL_COMMA = re.compile(r"^\s*[+-]?\d*,\d+(?:[eE][+-]?\d+)?(?:\s*[^\d\s,.;][^,.;]*)?\s*$")
_BOTH_MARKS = re.compile(r"\d[.,]\d+[.,]\d")


@dataclass(frozen=True)
class Dialect:
    """The separator between cells and whether numbers use a decimal comma."""

    delimiter: str
    decimal_comma: bool

    @property
    def notice(self) -> str | None:
        """What the loader tells the user about the file, or None for plain CSV."""
        if self.delimiter == ",":
            return None
        return "read as a spreadsheet export: ';' between cells, decimal commas in numbers"

    def number(self, cell: str, *, path: str, line: int | None, column: str) -> str:
        """A number cell as the value parser reads it (a decimal comma becomes a point)."""
        if not self.decimal_comma or "," not in cell:
            return cell
        if "." in cell and _BOTH_MARKS.search(cell):
            raise InputError(
                f"{column} {cell.strip()!r} has both a point and a comma; write one decimal "
                f"mark and no thousands separator ({USE_COMMAS})",
                path=path, line=line,
            )
        if not _DECIMAL_COMMA.match(cell):
            raise InputError(
                f"{column} {cell.strip()!r} cannot be read as a number with a decimal comma "
                f"({USE_COMMAS})",
                path=path, line=line,
            )
        return cell.replace(",", ".", 1)


COMMA = Dialect(",", False)


def _known(cells: list[str], columns: tuple[str, ...]) -> int:
    return sum(1 for c in cells if c.strip().strip('"').lower() in columns)


def detect(header_line: str, columns: tuple[str, ...], *, path: str, line: int) -> Dialect:
    """The dialect of a readings file, from its header line.

    Parameters
    ----------
    header_line
        The first line that is not blank or a comment.
    columns
        The column names the file may have.

    Raises
    ------
    InputError
        The header is separated by tabs, or by both ``,`` and ``;`` in a way that cannot
        be read, with the hint to save with commas.
    """
    by_comma = _known(header_line.split(","), columns)
    by_semicolon = _known(header_line.split(";"), columns)
    if by_comma >= 2 or (by_comma >= 1 and by_semicolon <= 1):
        return COMMA
    if by_semicolon >= 2:
        return Dialect(";", True)
    if _known(header_line.split("\t"), columns) >= 2:
        raise InputError(
            f"the header is separated by tabs; {USE_COMMAS}", path=path, line=line
        )
    return COMMA  # not a header at all: the header check says what is wrong
