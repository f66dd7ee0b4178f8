"""A digest of an analysis' inputs, so a stored result names exactly what it saw."""

from __future__ import annotations

import hashlib
import json
from collections.abc import Sequence

from reconcile.data.readings import Reading
from reconcile.model.board import Board


def _sha256(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def inputs_sha256(board: Board, readings: Sequence[Reading]) -> str:
    """A digest of an analysis' inputs: the board text and the readings' values.

    Two analyses with the same digest saw the same board file and the same readings
    (quantity, place, value, unit, uncertainty, device, in order).
    """
    payload = {
        "board": _sha256(board.source_text or ""),
        "readings": [
            [r.quantity, r.at, repr(float(r.value)), r.unit,
             None if r.uncertainty is None else repr(float(r.uncertainty)), r.device]
            for r in readings
        ],
    }
    return _sha256(json.dumps(payload, separators=(",", ":")))
