"""Reading the user's text files (board, readings, sweeps) with one kind of error."""

from __future__ import annotations

import os

from reconcile.errors import InputError


def read_text(path: str | os.PathLike[str], what: str) -> tuple[str, str]:
    """The file's name and its UTF-8 text (a byte-order mark is allowed).

    ``what`` names the file in messages ("board file", "readings file").

    Raises
    ------
    InputError
        The file cannot be read or is not UTF-8 text; the message names the file.
    """
    name = os.fspath(path)
    try:
        with open(name, encoding="utf-8-sig", newline="") as handle:
            return name, handle.read()
    except OSError as err:
        raise InputError(f"cannot read the {what}: {err.strerror}", path=name) from err
    except UnicodeDecodeError as err:
        raise InputError(f"the {what} is not UTF-8 text: {err.reason}", path=name) from err
