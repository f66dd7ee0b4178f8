"""Where keys sit in a TOML text, for error messages (:mod:`tomllib` keeps no positions)."""

from __future__ import annotations

import re
import tomllib
from typing import Any

from reconcile.errors import InputError

__all__ = ["MAX_TOML_DEPTH", "Key", "TomlLines", "parse_toml", "syntax_error_line"]

MAX_TOML_DEPTH = 16
"""Deepest nesting of tables and arrays an input file may have (ours need four)."""

#: A key path, e.g. ``("resistors", "R1", "ohms")``.
Key = tuple[str, ...]

_BARE = r"[A-Za-z0-9_-]+"
_QUOTED = r'"(?:[^"\\]|\\.)*"' + r"|'[^']*'"
_KEY_RE = rf"(?:{_BARE}|{_QUOTED})"
_DOTTED = rf"{_KEY_RE}(?:\s*\.\s*{_KEY_RE})*"
_HEADER = re.compile(rf"\s*\[\[?\s*({_DOTTED})\s*\]")
_ASSIGN = re.compile(rf"\s*({_DOTTED})\s*=\s*")
_INLINE = re.compile(rf"[{{,]\s*({_DOTTED})\s*=")
_ONE_KEY = re.compile(_KEY_RE)
_TOML_AT = re.compile(r"\(at line (\d+), column \d+\)")


def _split_key(dotted: str) -> Key:
    return tuple(k[1:-1] if k[0] in "\"'" else k for k in _ONE_KEY.findall(dotted))


def syntax_error_line(err: tomllib.TOMLDecodeError) -> int | None:
    """The line number in a :class:`tomllib.TOMLDecodeError` message, if it has one."""
    found = _TOML_AT.search(str(err))
    return int(found.group(1)) if found else None


def _depth(data: Any) -> int:
    """How deeply tables and arrays nest in parsed TOML (iterative: no recursion limit)."""
    deepest, stack = 0, [(data, 0)]
    while stack:
        value, depth = stack.pop()
        if isinstance(value, dict):
            children = list(value.values())
        elif isinstance(value, list):
            children = value
        else:
            continue
        deepest = max(deepest, depth + 1)
        if deepest > MAX_TOML_DEPTH:
            break
        stack.extend((child, depth + 1) for child in children)
    return deepest


def parse_toml(text: str, path: str, *, syntax: str = "not valid TOML") -> dict[str, Any]:
    """Parse the TOML text of an input file (board, fault weights, instrument).

    ``syntax`` starts the message of a syntax error.

    Raises
    ------
    InputError
        A syntax error (with its line), or tables and arrays nested deeper than
        :data:`MAX_TOML_DEPTH` (so deep that the parser's recursion would give out, or
        deeper than any input file of ours).
    """
    try:
        data = tomllib.loads(text.removeprefix("\ufeff"))
    except tomllib.TOMLDecodeError as err:
        raise InputError(f"{syntax}: {err}", path=path, line=syntax_error_line(err)) from err
    except RecursionError:
        data = None
    if data is None or _depth(data) > MAX_TOML_DEPTH:
        raise InputError(
            f"tables and arrays are nested more than {MAX_TOML_DEPTH} deep; an input file "
            "needs a few levels", path=path) from None
    return data


class TomlLines:
    """The line where each key path first appears in a TOML text.

    Table headers (``[resistors.R1]``), ``key =`` lines (dotted keys too) and the keys
    of inline tables (one line each, as TOML requires) are indexed. Lines inside
    multi-line strings are skipped. :meth:`find` falls back to the nearest enclosing
    key that was found, so a missing key points at its table's header.

    Parameters
    ----------
    text
        The TOML text (already known to parse).
    """

    def __init__(self, text: str) -> None:
        self._lines: dict[Key, int] = {}
        table: Key = ()
        in_string = False
        for number, line in enumerate(text.splitlines(), start=1):
            quotes = line.count('"""') + line.count("'''")
            if in_string:
                in_string = quotes % 2 == 0
                continue
            in_string = quotes % 2 == 1
            stripped = line.lstrip()
            if not stripped or stripped[0] == "#":
                continue
            header = _HEADER.match(line)
            if header:
                table = _split_key(header.group(1))
                self._add(table, number)
                continue
            assign = _ASSIGN.match(line)
            if not assign:
                continue
            key = table + _split_key(assign.group(1))
            self._add(key, number)
            rest = line[assign.end():]
            if rest.startswith("{"):
                for inner in _INLINE.finditer(rest):
                    self._add(key + _split_key(inner.group(1)), number)

    def _add(self, key: Key, number: int) -> None:
        for i in range(1, len(key) + 1):
            self._lines.setdefault(key[:i], number)

    def find(self, key: Key) -> int | None:
        """Line (1-based) of ``key``, else of its nearest enclosing key, else None."""
        for i in range(len(key), 0, -1):
            if key[:i] in self._lines:
                return self._lines[key[:i]]
        return None
