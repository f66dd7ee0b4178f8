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
