"""What every command shares for its output: the one-JSON-object rule."""

from __future__ import annotations

import sys


def emit_json(obj: object) -> None:
    """Print ``obj`` as exactly one JSON object on stdout (SI values, ``null`` for inf/NaN).

    The input warnings noted while the command ran (a board that parses but looks wrong,
    :func:`reconcile.errors.warn_input`) are added to its ``warnings`` list."""
    from reconcile.errors import input_warnings
    from reconcile.jsonout import dumps

    noted = input_warnings()
    if noted and isinstance(obj, dict):
        have = list(obj.get("warnings") or [])
        obj = {**obj, "warnings": have + [w for w in noted if w not in have]}
    sys.stdout.write(dumps(obj) + "\n")


#: file types matplotlib writes with its standard Agg/vector backends
PLOT_SUFFIXES = (".png", ".svg", ".svgz", ".pdf", ".eps", ".ps", ".jpg", ".jpeg", ".tif",
                 ".tiff", ".webp")


_NAMED = (".png", ".svg", ".pdf")


def check_plot_path(path) -> None:
    """Refuse, before any work, a ``--plot`` file whose type cannot be drawn or whose
    folder does not exist (one line, exit 2)."""
    from pathlib import Path

    from reconcile.errors import InputError

    p = Path(path)
    if p.suffix.lower() not in PLOT_SUFFIXES:
        raise InputError(f"cannot draw a {p.suffix or 'file without an extension'!r} plot: "
                         f"name it .png, .svg or .pdf (also "
                         f"{', '.join(x for x in PLOT_SUFFIXES if x not in _NAMED)})",
                         path=str(p), key="--plot")
    if not p.parent.is_dir():
        raise InputError("the folder for the plot does not exist", path=str(p), key="--plot")


def check_count(value: int, option: str, *, minimum: int = 0) -> int:
    """Refuse, before any work, a count or seed option below ``minimum`` (one line, exit 2)."""
    from reconcile.errors import InputError

    if value < minimum:
        raise InputError(f"must be at least {minimum}, got {value}", key=option)
    return value
