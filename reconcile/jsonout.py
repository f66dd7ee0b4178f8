"""JSON for ``--json``: one object on stdout, SI floats, non-finite numbers as null."""

from __future__ import annotations

import json
import math
from typing import Any


def clean(obj: Any) -> Any:
    """Make ``obj`` JSON-safe: numpy scalars to Python, NaN and inf to None."""
    if isinstance(obj, dict):
        return {str(k): clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [clean(v) for v in obj]
    if hasattr(obj, "item") and not isinstance(obj, str | bytes):
        try:
            obj = obj.item()
        except (ValueError, TypeError):
            return clean(obj.tolist())
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    return obj


def dumps(obj: Any) -> str:
    """One line of JSON, strictly valid (no NaN)."""
    return json.dumps(clean(obj), allow_nan=False)
