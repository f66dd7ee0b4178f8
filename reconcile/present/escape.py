"""User text made safe for each place it is shown: rich markup, matplotlib text, HTML.

Titles, serials, operators, notes, part and node names are the user's own text. Printed
as rich markup, ``[/]`` raises and ``[rev/B]`` vanishes; drawn by matplotlib, a ``$``
starts math text (and an unbalanced one raises); written into HTML, ``<`` starts a tag.
In a one-line message on stderr, a carriage return, a line separator or a terminal
escape sequence would break the line or drive the terminal. Every place that shows user
text passes it through one of these four functions, and nothing else escapes by hand.

``None`` becomes the empty string; anything else is shown through ``str()``.
"""

from __future__ import annotations

import html as _html
import re

__all__ = ["html_text", "markup", "one_line", "plot_text"]


def _text(value: object) -> str:
    return "" if value is None else str(value)


def markup(value: object) -> str:
    """Text for rich markup (table cells, titles, ``console.print``): shown exactly as typed.

    ``rich.markup.escape`` covers brackets that look like tags. Two cases it leaves are
    handled here: rich's renderer turns every other ``\\[`` into ``[`` (so a backslash
    before a plain bracket is doubled), and ``escape`` doubles a single trailing backslash
    in case a tag follows (undone: standalone it would show two). Put a space, or a rich
    ``Text``, between escaped text and a tag that follows it. Emoji codes such as
    ``:smile:`` are not markup; consoles from :mod:`reconcile.present.console` leave them
    alone.
    """
    from rich.markup import escape

    text = _text(value)
    escaped = escape(text)
    if escaped.endswith("\\\\") and not text.endswith("\\\\"):
        escaped = escaped[:-1]
    return _PLAIN_BRACKET.sub(r"\\\g<0>", escaped)


# A backslash directly before a "[" that does not open a tag (rich's tag pattern is
# "[" then one of a-z # / @, then anything up to "]" without another "[").
_PLAIN_BRACKET = re.compile(r"\\(?=\[(?![a-z#/@][^\[]*?\]))")


def plot_text(value: object) -> str:
    """Text for matplotlib labels, titles and legends: no math text, shown as typed.

    matplotlib treats text between ``$`` signs as math text; ``\\$`` is a literal dollar.
    Backslashes outside math text are already literal, so only ``$`` needs escaping.
    """
    return _text(value).replace("$", r"\$")


def html_text(value: object) -> str:
    """Text for HTML element content and quoted attribute values."""
    return _html.escape(_text(value), quote=True)


# C0 and C1 control characters (tab, CR, LF, NUL, ESC...), DEL, and the two Unicode
# separators that str.splitlines() and many terminals treat as line breaks.
_LINE_BREAKING = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029]")


def one_line(value: object) -> str:
    """Text for a one-line message on a terminal: every control character and line
    separator shown as its Python escape (``\\r``, ``\\x00``, ``\\u2028``), so the
    message stays one line and cannot move the cursor or recolour the terminal."""
    return _LINE_BREAKING.sub(
        lambda m: m.group().encode("unicode_escape").decode("ascii"), _text(value))
