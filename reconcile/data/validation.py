"""The one rule for what a reading may be, whichever way it comes in.

A reading reaches an analysis or the session store from a readings file, from
``session add`` and ``session correct``, from a guided capture, from ``derive`` and from
code (:meth:`reconcile.data.readings.Reading.from_si`). Every one of those ways calls
:func:`reading_problems` (or :func:`check_reading`), so the store refuses exactly what the
readings loader refuses (docs/formats.md §3.3):

- a quantity that is not a readable one of the registry;
- a value that is not finite, negative where the quantity cannot be, or outside the
  quantity's documented physical limits (``Quantity.value_range``);
- an uncertainty that is not finite, not positive, smaller than the quantity's floor
  (``Quantity.min_uncertainty``) or than 1 part in 10⁹ of the reading
  (:data:`~reconcile.model.quantities.MIN_RELATIVE_UNCERTAINTY`), or larger than the
  largest value the quantity allows;
- text (``at``, instrument, note, device) with a line break or another control
  character, or longer than a readings-file cell may be
  (:data:`reconcile.data.csv_rows.MAX_CELL_CHARS`), so that every stored reading can be
  exported as a readings file and read back.
"""

from __future__ import annotations

import math
import unicodedata
from typing import Protocol

from reconcile.data.csv_rows import MAX_CELL_CHARS
from reconcile.errors import InputError, InputErrors
from reconcile.model.quantities import MIN_RELATIVE_UNCERTAINTY, REGISTRY

__all__ = ["check_reading", "reading_problems", "text_problem"]


class Reading(Protocol):
    """What the rule reads of a reading (:class:`reconcile.data.readings.Reading`; named
    structurally so that this module does not import the readings module, which uses it)."""

    quantity: str
    at: str
    value: float
    uncertainty: float | None
    instrument: str
    note: str
    device: str
    line: int | None


def _si(x: float, unit: str) -> str:
    return f"{x:g} {unit}".rstrip()


def _float(x: object) -> float | None:
    if isinstance(x, (str, bytes)):
        return None
    try:
        return float(x)  # type: ignore[arg-type]
    except (TypeError, ValueError, OverflowError):
        return None


def text_problem(text: str, what: str) -> str | None:
    """What is wrong with a free-text field of a reading, or None."""
    if len(text) > MAX_CELL_CHARS:
        return f"{what} has {len(text)} characters; at most {MAX_CELL_CHARS}"
    bad = next((c for c in text if c != "\t" and unicodedata.category(c) == "Cc"), None)
    if bad is not None:
        kind = "a line break" if bad in "\r\n" else f"control character U+{ord(bad):04X}"
        return f"{what} holds {kind}; write it on one line"
    return None


def _value_problem(reading: Reading) -> str | None:
    q = REGISTRY[reading.quantity]
    value = _float(reading.value)
    if value is None or not math.isfinite(value):
        return f"{q.name} value {reading.value!r} must be a finite number"
    if q.non_negative and value < 0.0:
        return f"{q.name} cannot be negative, found {_si(value, q.unit)}"
    low, high = q.value_range
    if not low <= value <= high:
        return (
            f"{q.name} value {_si(value, q.unit)} is outside the physical limits "
            f"{_si(low, q.unit)} to {_si(high, q.unit)} (docs/formats.md §3.3)"
        )
    return None


def _frequency_problem(reading: Reading) -> str | None:
    f = getattr(reading, "frequency", None)
    if f is None:
        return None
    q = REGISTRY[reading.quantity]
    if not q.small_signal:
        return f"{q.name} takes no frequency: only small-signal readings do"
    value = _float(f)
    if value is None or not (math.isfinite(value) and value > 0.0):
        return f"frequency {f!r} must be a positive finite number of Hz"
    return None


def _uncertainty_problem(reading: Reading) -> str | None:
    if reading.uncertainty is None:
        return None
    q = REGISTRY[reading.quantity]
    u = _float(reading.uncertainty)
    if u is None or not (math.isfinite(u) and u > 0.0):
        return (
            f"uncertainty {reading.uncertainty!r} must be a positive finite number (one standard "
            "uncertainty), or blank for the default"
        )
    value = _float(reading.value)
    value = value if value is not None and math.isfinite(value) else 0.0
    floor = max(q.min_uncertainty, MIN_RELATIVE_UNCERTAINTY * abs(value))
    if u < floor:
        return (
            f"uncertainty {_si(u, q.unit)} of a {q.name} reading of {_si(value, q.unit)} "
            f"is below the smallest accepted, {_si(floor, q.unit)} (the larger of "
            f"{_si(q.min_uncertainty, q.unit)} and 1e-9 of the reading; docs/formats.md §3.3)"
        )
    ceiling = max(abs(x) for x in q.value_range)
    if u > ceiling:
        return (
            f"uncertainty {_si(u, q.unit)} is larger than any {q.name} reading can be "
            f"({_si(ceiling, q.unit)}; docs/formats.md §3.3)"
        )
    return None


def reading_problems(reading: Reading) -> list[str]:
    """Every reason ``reading`` may not be analysed or stored (empty when it may)."""
    q = REGISTRY.get(reading.quantity)
    if q is None or not q.readable:
        readable = ", ".join(n for n, r in REGISTRY.items() if r.readable)
        return [f"unknown quantity {reading.quantity!r}; one of {readable}"]
    problems = [p for p in (_value_problem(reading), _uncertainty_problem(reading),
                            _frequency_problem(reading)) if p]
    for what, text in (("at", reading.at), ("the instrument", reading.instrument),
                       ("the note", reading.note), ("the device", reading.device)):
        if not isinstance(text, str):
            problems.append(f"{what} must be text, got {text!r}")
        elif (problem := text_problem(text, what)) is not None:
            problems.append(problem)
    return problems


def check_reading(
    reading: Reading, *, path: str | None = None, line: int | None = None,
    key: str | None = None,
) -> None:
    """Raise when :func:`reading_problems` finds anything.

    Raises
    ------
    InputErrors
        Every problem of the reading, located at ``path``, ``line`` (default: the
        reading's own line) and ``key``.
    """
    problems = reading_problems(reading)
    if problems:
        where = reading.line if line is None else line
        what = f"{reading.quantity} at {reading.at!r}: " if reading.at else ""
        raise InputErrors([
            InputError(what + p, path=path, line=where, key=key) for p in problems
        ])
