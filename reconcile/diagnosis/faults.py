"""Single-fault hypotheses: what each fault does to the board and to its parameters.

Each :class:`Fault` says how the board would look if that one thing were wrong, in terms
the engine runs directly, so that hypotheses on one topology can be solved side by side
along the engine's sample axis:

===========  ==========  ===================================================================
part         fault       model
===========  ==========  ===================================================================
(none)       none        the board as drawn, every parameter within its prior
resistor     open        resistance held at :data:`OPEN_OHMS`, not fitted
resistor     short       resistance held at :data:`SHORT_OHMS`, not fitted
resistor     wrong-value resistance fitted with a prior flat over decades:
                         sd of ln R = :data:`WRONG_VALUE_LN_SD`, inside the usual ±3-decade
                         hard bounds (:mod:`reconcile.priors`)
capacitor    missing     capacitance held at 0 F (open or missing: electrically the same)
capacitor    short       a DC conductance of :data:`SHORT_SIEMENS` across it
                         (``capacitor_leak_siemens``), capacitance not fitted
transistor   reversed    a board with the transistor's collector and emitter swapped,
                         every parameter fitted (the model then runs it reverse-active)
===========  ==========  ===================================================================

A fault is a property of the part as fitted: a ``resistance`` reading of an open
resistor is predicted as :data:`OPEN_OHMS` (the meter reads over range), of a shorted
one as :data:`SHORT_OHMS`; a ``capacitance`` reading of a missing capacitor as 0 F; a
shorted capacitor gives no capacitance reading at all, so such a reading rules that
hypothesis out.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from reconcile.model.board import Board
from reconcile.model.kinds import HypothesisKind

__all__ = [
    "OPEN_OHMS",
    "SHORT_OHMS",
    "SHORT_SIEMENS",
    "WRONG_VALUE_LN_SD",
    "Fault",
    "as_built",
    "single_faults",
]

OPEN_OHMS = 1e12
"""An open resistor: 1 TΩ, far above any meter or bias network on a bench board."""

SHORT_OHMS = 1e-2
"""A shorted resistor: 10 mΩ, a solder bridge or a failed part. Against the tens of ohms
and more of a bench board this is a dead short; a stiffer value (1 mΩ, 1 kS) buys
nothing and costs Newton its convergence test (node voltages to 1 nV) on some boards."""

SHORT_SIEMENS = 1e2
"""A shorted capacitor: 100 S (10 mΩ) of DC conductance across it, as :data:`SHORT_OHMS`."""

WRONG_VALUE_LN_SD = 3.0
"""Prior sd of ln R for a wrong value: ±1σ spans a factor of 20, so the prior is nearly
flat over the ±3 decades the hard bounds allow (a decade slip costs 0.6 in χ²)."""


@dataclass(frozen=True)
class Fault:
    """One single-fault hypothesis, ready to fit.

    Parameters
    ----------
    ref
        The faulty part's ref (``""`` for ``none``).
    kind
        ``none``, ``open``, ``short``, ``wrong-value``, ``missing`` or ``reversed``.
    board
        The board the hypothesis runs on: the drawn board, or (``reversed``) a copy with
        the transistor's collector and emitter swapped.
    fixed
        Parameter keys the fault decides, left out of the fit.
    overrides
        ``(Parameters field, column, value)`` set on every engine sample.
    part_readings
        ``(quantity, ref, value)``: out-of-circuit readings the fault decides (NaN: the
        reading cannot be taken under this fault).
    widened
        ``(key, internal prior sd)`` of parameters whose prior the fault widens.
    aliases
        Other names the contract has for this hypothesis (``open`` for a capacitor's
        ``missing``).
    members
        For a hypothesis of several faults at once (kind ``pair``, built by
        :func:`reconcile.diagnosis.pairs.combine`), the single faults it joins; empty
        for a single fault.
    """

    ref: str
    kind: HypothesisKind
    board: Board
    fixed: tuple[str, ...] = ()
    overrides: tuple[tuple[str, int, float], ...] = ()
    part_readings: tuple[tuple[str, str, float], ...] = ()
    widened: tuple[tuple[str, float], ...] = ()
    aliases: tuple[str, ...] = ()
    members: tuple[Fault, ...] = ()

    @property
    def parts(self) -> tuple[Fault, ...]:
        """The single faults of this hypothesis (itself for a single fault, none for
        ``none``)."""
        if self.members:
            return self.members
        return () if self.kind == "none" else (self,)

    @property
    def label(self) -> str:
        """``RE open``, ``Q1 reversed``, ``none``, ``CE missing + RF wrong-value``."""
        if self.members:
            return " + ".join(m.label for m in self.members)
        return self.kind if not self.ref else f"{self.ref} {self.kind}"

    @property
    def description(self) -> str:
        """One phrase saying what the hypothesis means on the bench."""
        if self.members:
            return " and ".join(m.description for m in self.members)
        text = {
            "none": "no fault: every part within its tolerance, devices within their ranges",
            "open": "open: a cracked part, a lifted leg or a dry joint",
            "short": "shorted: a solder bridge across it or a failed part",
            "wrong-value": "wrong value loaded",
            "missing": "open or missing",
            "reversed": "fitted the wrong way round: collector and emitter swapped",
        }[self.kind]
        return text if not self.ref else f"{self.ref} {text}"


def single_faults(board: Board) -> list[Fault]:
    """Every single-fault hypothesis of ``board``, ``none`` first.

    Resistors get ``open``, ``short`` and ``wrong-value``; capacitors ``missing``
    (which stands for open too) and ``short``; transistors ``reversed``.
    """
    out = [Fault("", "none", board)]
    for col, (ref, r) in enumerate(board.resistors.items()):
        del r
        out.append(
            Fault(ref, "open", board, fixed=(ref,),
                  overrides=(("resistor_ohms", col, OPEN_OHMS),),
                  part_readings=(("resistance", ref, OPEN_OHMS),))
        )
        out.append(
            Fault(ref, "short", board, fixed=(ref,),
                  overrides=(("resistor_ohms", col, SHORT_OHMS),),
                  part_readings=(("resistance", ref, SHORT_OHMS),))
        )
        out.append(Fault(ref, "wrong-value", board, widened=((ref, WRONG_VALUE_LN_SD),)))
    for col, ref in enumerate(board.capacitors):
        out.append(
            Fault(ref, "missing", board, fixed=(ref,),
                  overrides=(("capacitor_farads", col, 0.0),),
                  part_readings=(("capacitance", ref, 0.0),), aliases=("open",))
        )
        out.append(
            Fault(ref, "short", board, fixed=(ref,),
                  overrides=(("capacitor_leak_siemens", col, SHORT_SIEMENS),),
                  part_readings=(("capacitance", ref, math.nan),))
        )
    for ref, q in board.transistors.items():
        swapped = board.replace_part(dataclasses.replace(q, c=q.e, e=q.c))
        out.append(Fault(ref, "reversed", swapped))
    return out


_PART_FIELDS = {
    "resistor_ohms": ("resistors", "ohms"),
    "capacitor_farads": ("capacitors", "farads"),
    "capacitor_leak_siemens": ("capacitors", "leak_siemens"),
}
"""Which board part and field each engine override of a fault sets."""


def as_built(fault: Fault, *, onto: Board | None = None) -> Board:
    """The board as built if ``fault`` is true: its overrides written into the parts
    (an open resistor at :data:`OPEN_OHMS`, a missing capacitor at 0 F, a shorted one
    with :data:`SHORT_SIEMENS` across it), a reversed transistor swapped, applied onto
    ``onto`` (default the fault's own board; another fault's board as built, to join
    faults). A fit of that board must hold ``fault.fixed`` and widen ``fault.widened``
    as diagnosis does; a wrong value without a known value changes no part."""
    board = fault.board if onto is None else onto
    for member in fault.parts:
        if member.kind == "reversed" and onto is not None:
            board = board.replace_part(member.board.transistors[member.ref])
        for name, col, value in member.overrides:
            table, attr = _PART_FIELDS[name]
            parts = getattr(board, table)
            part = parts[list(parts)[col]]
            board = board.replace_part(dataclasses.replace(part, **{attr: float(value)}))
    return board
