"""A rework applied to a known board: each change's part given its value after the change.

For checking a proposal against a board whose parts are known (the demo's hidden board,
a test's truth): a replacement sets the new value; a part added in parallel combines with
the one in place, resistances as R_a·R_b/(R_a + R_b) and capacitances as C_a + C_b
(basic circuit theory).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable

from reconcile.model.board import Board
from reconcile.trim.rework import Change


def apply_changes(board: Board, changes: Iterable[Change]) -> Board:
    """``board`` with every change of ``changes`` made."""
    for c in changes:
        if c.part == "capacitor":
            part = board.capacitors[c.ref]
            value = c.value if c.action == "replace" else part.farads + c.value
            board = board.replace_part(dataclasses.replace(part, farads=value))
        else:
            part = board.resistors[c.ref]
            built = part.ohms
            value = c.value if c.action == "replace" else built * c.value / (built + c.value)
            board = board.replace_part(dataclasses.replace(part, ohms=value))
    return board
