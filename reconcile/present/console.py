"""The one way to get a rich console: user text is shown as typed, on any terminal.

Consoles are made here so that every table treats text the same way: no emoji codes
(``:smile:`` in a note stays ``:smile:``); user text inside markup still goes through
:func:`reconcile.present.escape.markup`. On a terminal whose encoding cannot show
``±``, ``Ω`` or box lines (``PYTHONIOENCODING=ascii``), rich already falls back to ASCII
boxes and :func:`tolerate_narrow_encoding` makes the streams replace what is left.
"""

from __future__ import annotations

import sys
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from rich.console import Console


def make_console(*, stderr: bool = False, **options: Any) -> Console:
    """A rich ``Console`` for stdout (or stderr) with emoji codes left alone."""
    from rich.console import Console

    options.setdefault("emoji", False)
    return Console(stderr=stderr, **options)


def tolerate_narrow_encoding() -> None:
    """Let stdout and stderr replace characters their encoding cannot show.

    Called once at start-up by the command line. A UTF-8 stream is left as it is; any
    other text stream keeps its encoding and gets ``errors="replace"`` (so ``±`` prints
    as ``?`` on an ASCII terminal instead of raising ``UnicodeEncodeError``).
    """
    import codecs

    for stream in (sys.stdout, sys.stderr):
        encoding = getattr(stream, "encoding", None) or "utf-8"
        try:
            if codecs.lookup(encoding).name == "utf-8":
                continue
        except LookupError:
            pass
        reconfigure = getattr(stream, "reconfigure", None)
        if reconfigure is not None:
            reconfigure(errors="replace")
