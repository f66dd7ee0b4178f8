"""What a capture run tells and returns: live values, taken readings, the report, the stop.

Plain frozen values with ``to_dict()`` (what ``capture --json`` prints); nothing here
talks to an instrument or the store.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from reconcile.errors import InstrumentError
from reconcile.data.readings import Reading

from reconcile.capture.plan import PlannedReading

__all__ = ["LiveValue", "TakenReading", "CaptureReport", "CaptureInterrupted"]


@dataclass(frozen=True)
class LiveValue:
    """One event for the ``show`` callable: a value read, or a reading stored.

    Attributes
    ----------
    label : str
        ``voltage at b``; ``gain: V_in at node in`` for the AC readings of a derived one.
    value : float
        SI units.
    unit : str
        ``V``, ``A``, ``ohm`` or ``""``.
    sample : int
        Number of the value in its settle run (0 for a stored derived reading).
    settled : bool
        The value completed a settled window.
    stored : bool
        The reading was committed to the store (``uncertainty`` then given).
    uncertainty : float or None
        Standard uncertainty of a stored reading.
    spread, band : float or None
        The settle window's spread and band, where known.
    """

    label: str
    value: float
    unit: str
    sample: int
    settled: bool
    stored: bool = False
    uncertainty: float | None = None
    spread: float | None = None
    band: float | None = None


@dataclass(frozen=True)
class TakenReading:
    """A reading this run took and stored."""

    id: int
    reading: Reading
    samples: int

    def to_dict(self) -> dict[str, Any]:
        r = self.reading
        return {
            "id": self.id, "quantity": r.quantity, "at": r.at, "frequency": r.frequency,
            "value": r.value,
            "unit": r.unit, "uncertainty": r.uncertainty, "instrument": r.instrument,
            "note": r.note, "samples": self.samples,
        }


@dataclass(frozen=True)
class CaptureReport:
    """What a capture run did.

    Attributes
    ----------
    session : str
        The session id.
    taken : tuple of TakenReading
        Stored by this run, in order.
    skipped_existing : tuple of PlannedReading
        Already in the session (a resumed run).
    skipped : tuple of (PlannedReading, str)
        Not taken, with the reason (no instrument for it, skipped by the operator).
    failed : PlannedReading or None
        The reading in flight when the run stopped.
    error : str or None
        Why it stopped.
    stored_total : int
        Current readings in the session at the end.
    instruments : dict
        Role -> identity string from ``*IDN?``.
    """

    session: str
    taken: tuple[TakenReading, ...] = ()
    skipped_existing: tuple[PlannedReading, ...] = ()
    skipped: tuple[tuple[PlannedReading, str], ...] = ()
    failed: PlannedReading | None = None
    error: str | None = None
    stored_total: int = 0
    instruments: dict[str, str] = field(default_factory=dict)

    @property
    def complete(self) -> bool:
        """Whether the run went through the whole plan."""
        return self.failed is None and self.error is None

    def to_dict(self) -> dict[str, Any]:
        """``{session, taken, skipped, stored_total, complete, failed, error, instruments}``;
        ``skipped`` lists readings already stored (reason ``already in the session``)
        and those not taken."""
        skipped = [{**p.to_dict(), "reason": "already in the session"}
                   for p in self.skipped_existing]
        skipped += [{**p.to_dict(), "reason": why} for p, why in self.skipped]
        return {
            "session": self.session,
            "taken": [t.to_dict() for t in self.taken],
            "skipped": skipped,
            "stored_total": self.stored_total,
            "complete": self.complete,
            "failed": None if self.failed is None else self.failed.to_dict(),
            "error": self.error,
            "instruments": dict(self.instruments),
        }


class CaptureInterrupted(InstrumentError):
    """A capture run stopped on a fault; the readings taken before it are stored.

    Attributes
    ----------
    report : CaptureReport
        What was taken before the stop.
    exit_code : int
        The stopping error's exit code (2 when it was bad input, else 1).
    """

    def __init__(self, message: str, report: CaptureReport, exit_code: int = 1) -> None:
        super().__init__(message)
        self.report = report
        self.exit_code = exit_code
