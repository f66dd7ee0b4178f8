"""A capture's test frequencies held to the AC meter's specified band, before the bench.

Every small-signal reading of a capture plan (a gain, the input resistance) is taken
with the generator at a test frequency: the reading's own, or the board's ``[signal]
frequency``. The AC meter's instrument file may give the band its accuracy is specified
for (``[accuracy.ac_volts] band_hz``); :func:`check_test_frequencies` refuses the first
test frequency outside it in one line naming the frequency, the band and the file, so
a capture stops before it sends anything.
"""

from __future__ import annotations

from collections.abc import Iterable

from reconcile.errors import InputError
from reconcile.model.board import Board
from reconcile.model.values import format_si

from reconcile.capture.plan import PlannedReading
from reconcile.instruments.profile import InstrumentProfile

__all__ = ["check_test_frequencies", "planned_frequencies"]

_SMALL_SIGNAL = ("gain", "input_resistance")


def planned_frequencies(board: Board, plan: Iterable[PlannedReading]) -> list[float]:
    """The distinct test frequencies of a plan's small-signal readings, in plan order, Hz."""
    out: list[float] = []
    for planned in plan:
        if planned.quantity in _SMALL_SIGNAL:
            f = board.signal.frequency if planned.frequency is None else planned.frequency
            if f not in out:
                out.append(f)
    return out


def check_test_frequencies(board: Board, plan: Iterable[PlannedReading],
                           profile: InstrumentProfile | None) -> None:
    """Refuse a test frequency outside the AC meter's specified band.

    Parameters
    ----------
    board : Board
        The board as drawn (its ``[signal] frequency`` for readings with none of their own).
    plan : iterable of PlannedReading
        What the capture means to take.
    profile : InstrumentProfile or None
        The AC meter's instrument file; ``None``, or a file with no band, checks nothing.

    Raises
    ------
    InputError
        One line: the frequency, the band, and the instrument file (key
        ``accuracy.ac_volts.band_hz``).
    """
    band = None if profile is None else profile.ac_band
    if band is None:
        return
    for f in planned_frequencies(board, plan):
        if not band.contains(f):
            where = "" if profile.path else f" ({profile.name or profile.resource})"
            raise InputError(
                f"test frequency {format_si(f, 'Hz', 4)} is outside the AC meter's "
                f"specified band, {band.text}{where}: its accuracy is not specified there; "
                "leave the frequency out or use a meter specified for it",
                path=profile.path, key="accuracy.ac_volts.band_hz")
