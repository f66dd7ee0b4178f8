"""What every command shares for its output: the one-JSON-object rule."""

from __future__ import annotations

import sys


def emit_json(obj: object) -> None:
    """Print ``obj`` as exactly one JSON object on stdout (SI values, ``null`` for inf/NaN)."""
    from reconcile.jsonout import dumps

    sys.stdout.write(dumps(obj) + "\n")
