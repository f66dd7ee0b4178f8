"""A hypothesis the user assumes (``--assume``): parsed, and the board as built under it.

Each ``--assume`` text names one fault the way diagnosis names it:

- ``REF:FAULT``: ``open``, ``short`` or (resistors) ``wrong-value``, ``missing`` or
  ``open`` (capacitors, the same hypothesis), ``reversed`` (transistors);
- ``REF=VALUE``: a resistor or capacitor known from an out-of-circuit reading to have
  this value (a wrong value when it differs from the drawn one), e.g. ``RE1=270``,
  ``R2=56k``, ``CE=47u``. Its prior is the reading's, :data:`KNOWN_TOLERANCE`.

The faults are the very :class:`~reconcile.diagnosis.faults.Fault` objects diagnosis fits
(:func:`~reconcile.diagnosis.faults.single_faults`), applied to the board by
:func:`~reconcile.diagnosis.faults.as_built`, so an assumed fault means exactly what a
diagnosed one does. A ``wrong-value`` without a value is fitted with the widened prior
diagnosis gives it (:data:`~reconcile.diagnosis.faults.WRONG_VALUE_LN_SD`).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass

from reconcile.diagnosis.faults import Fault, as_built, single_faults
from reconcile.errors import InputError
from reconcile.model.board import Board

__all__ = ["KNOWN_TOLERANCE", "Assumption", "assumption_of", "parse_assumptions"]

KNOWN_TOLERANCE = 0.01
"""A part's value read out of circuit on a bench meter: ±1 % (common practice for a
handheld meter's resistance and capacitance ranges), fitted as a rectangular prior."""

OPTION = "--assume"


@dataclass(frozen=True)
class Assumption:
    """The faults assumed, and the board as built under them.

    ``faults`` are diagnosis' hypotheses (``known`` gives, by ref, the value of a part
    read out of circuit); ``board`` is the board as built, ``fixed`` the parameter keys
    the faults decide and ``widened`` the priors they widen (as diagnosis fits them).
    """

    drawn: Board
    faults: tuple[Fault, ...]
    known: tuple[tuple[str, float], ...]
    board: Board
    fixed: tuple[str, ...]
    widened: tuple[tuple[str, float], ...]
    centres: tuple[tuple[str, float], ...] = ()

    @property
    def label(self) -> str:
        """``CE missing + RE1=270`` (ohms as a plain number; farads with their prefix and
        unit, ``CE=47µF``)."""
        known = dict(self.known)
        return " + ".join(
            _known_label(self.drawn, f.ref, known[f.ref]) if f.ref in known else f.label
            for f in self.faults
        )

    @property
    def refs(self) -> tuple[str, ...]:
        return tuple(f.ref for f in self.faults)

    def to_list(self) -> list[dict]:
        """``[{"ref", "fault", "value"}]`` as a diagnosis' hypothesis names its faults."""
        values = dict(self.centres) | dict(self.known)
        return [{"ref": f.ref, "fault": f.kind, "value": values.get(f.ref)} for f in self.faults]


def _known_label(board: Board, ref: str, value: float) -> str:
    if ref in board.resistors:
        return f"{ref}={value:g}"
    from reconcile.model.values import format_si

    return f"{ref}={format_si(value, 'F', 3).replace(' ', '')}"


def parse_assumptions(board: Board, texts: Sequence[str]) -> Assumption | None:
    """The ``--assume`` texts as one :class:`Assumption` (None when there are none).

    Raises :class:`InputError` (one line naming the option and the text) for an unknown
    part or fault, a bad value, or a part named twice.
    """
    if not texts:
        return None
    catalogue = {(f.ref, f.kind): f for f in single_faults(board)}
    for f in list(catalogue.values()):
        for alias in f.aliases:
            catalogue.setdefault((f.ref, alias), f)
    faults: list[Fault] = []
    known: list[tuple[str, float]] = []
    for text in texts:
        fault, value = _one(board, catalogue, str(text))
        if fault.ref in {f.ref for f in faults}:
            raise InputError(f"{OPTION} names {fault.ref} twice ({text.strip()!r})")
        faults.append(fault)
        if value is not None:
            known.append((fault.ref, value))
    return _assumption(board, tuple(faults), tuple(known))


def assumption_of(board: Board, faults: Sequence[Fault],
                  fitted: Sequence[tuple[str, float]] = ()) -> Assumption:
    """A diagnosis' hypothesis as an assumption: its faults (a pair's members), each
    wrong value's prior centred on its fitted value ``fitted`` (widened as diagnosis
    fits it), so a fit of the board as built starts at the hypothesis' own minimum."""
    return _assumption(board, tuple(faults), (), tuple(fitted))


def _one(board: Board, catalogue: dict, text: str) -> tuple[Fault, float | None]:
    """One ``REF:FAULT`` or ``REF=VALUE`` text: its fault and the known value."""
    stripped = text.strip()
    if "=" in stripped:
        ref, _, value_text = (s.strip() for s in stripped.partition("="))
        _check_ref(board, ref, stripped)
        kind = _value_kind(board, ref, stripped)
        from reconcile.model.values import parse_value

        try:
            value = parse_value(value_text, kind)
        except InputError as exc:
            raise InputError(f"{OPTION} {stripped!r}: {exc.message}") from None
        if not (math.isfinite(value) and value > 0):
            raise InputError(f"{OPTION} {stripped!r}: the value must be a finite number above "
                             "zero")
        from reconcile.model.board_loader import PLAUSIBLE
        from reconcile.model.values import format_si

        low, high = PLAUSIBLE[kind]
        if not low <= value <= high:  # "47" for a capacitor is 47 F: a unit left out
            unit = "ohm" if kind == "ohms" else "F"
            raise InputError(
                f"{OPTION} {stripped!r}: {format_si(value, unit, 3)} is far outside what a "
                f"discrete board uses ({format_si(low, unit)} to {format_si(high, unit)}); "
                "give the unit's prefix, e.g. 47u")
        # a capacitor has no wrong-value hypothesis of its own in diagnosis (its value
        # is fitted within tolerance): a known value is that hypothesis, set, not fitted
        fault = catalogue.get((ref, "wrong-value")) or Fault(ref, "wrong-value", board)
        return fault, value
    ref, sep, kind_text = (s.strip() for s in stripped.partition(":"))
    if not sep or not ref or not kind_text:
        raise InputError(
            f"{OPTION} {stripped!r}: expected REF:FAULT (e.g. CE:missing) or REF=VALUE "
            "(e.g. RE1=270)")
    _check_ref(board, ref, stripped)
    fault = catalogue.get((ref, kind_text))
    if fault is None:
        kinds = sorted({k for (r, k) in catalogue if r == ref})
        raise InputError(
            f"{OPTION} {stripped!r}: {ref} can be {', '.join(kinds)}, not {kind_text!r}")
    return fault, None


def _check_ref(board: Board, ref: str, text: str) -> None:
    parts = {*board.resistors, *board.capacitors, *board.transistors}
    if ref not in parts:
        raise InputError(f"{OPTION} {text!r}: the board has no part {ref!r}")


def _value_kind(board: Board, ref: str, text: str) -> str:
    if ref in board.resistors:
        return "ohms"
    if ref in board.capacitors:
        return "farads"
    raise InputError(f"{OPTION} {text!r}: only a resistor's or a capacitor's value can be "
                     "given (REF=VALUE)")


def _assumption(
    board: Board, faults: tuple[Fault, ...], known: tuple[tuple[str, float], ...],
    centres: tuple[tuple[str, float], ...] = (),
) -> Assumption:
    """The board as built under ``faults``: each fault applied by
    :func:`~reconcile.diagnosis.faults.as_built`, then the known values and the
    wrong values' centres set."""
    values = dict(known)
    built = board
    fixed: list[str] = []
    widened: list[tuple[str, float]] = []
    for f in faults:
        if f.ref in values:
            continue
        built = as_built(f, onto=built)
        fixed.extend(f.fixed)
        widened.extend(f.widened)
    for ref, value in known:
        if ref in built.resistors:
            part = dataclasses.replace(built.resistors[ref], ohms=value,
                                       tolerance=KNOWN_TOLERANCE)
        else:
            part = dataclasses.replace(built.capacitors[ref], farads=value,
                                       tolerance=KNOWN_TOLERANCE)
        built = built.replace_part(part)
    for ref, value in centres:
        built = built.with_resistor_ohms(ref, value)
    return Assumption(board, faults, known, built, tuple(fixed), tuple(widened), centres)
