"""The check to make with a meter for each single-fault hypothesis, as one sentence.

Each check says what to measure (power off, out of circuit or across the part in
circuit; or with power on, the transistor node whose voltage tells the fault apart) and
what to expect if the hypothesis holds and if the part is good.
"""

from __future__ import annotations

from reconcile.diagnosis.fault_fit import FaultFit
from reconcile.diagnosis.faults import OPEN_OHMS
from reconcile.diagnosis.in_circuit import ohms_between, readings_differ
from reconcile.model.board import GND, Board
from reconcile.model.values import format_si

def _ohm(x: float) -> str:
    return format_si(x, "ohm", 3)


def check(board, ft: FaultFit, none_fit: FaultFit, value, near, series, slip) -> str:
    """The check to make with a meter, one sentence."""
    f = ft.fault
    ref = f.ref
    if f.kind == "none":
        return "no single fault needed: the readings fit the board as drawn"
    if ref in board.resistors:
        r = board.resistors[ref]
        a, b = r.nodes
        if f.kind == "open":
            return (
                f"with power off, measure {ref} out of circuit (lift one leg): expect an open "
                f"circuit (over range, modelled as {_ohm(OPEN_OHMS)}) if this is the fault, "
                f"about {_ohm(r.ohms)} if the part is good; check its solder joints too"
            )
        if f.kind == "short":
            return _short_check(board, ref, a, b,
                                f"a good {_ohm(r.ohms)} part in parallel with the network "
                                f"around it")
        text = (
            f"with power off, measure {ref} out of circuit: expect about {_ohm(value)} if "
            f"this is the fault (drawn {_ohm(r.ohms)}; nearest {series} value {_ohm(near)}"
        )
        if abs(slip) == 1:
            text += f", a decade slip from {_ohm(r.ohms)}"
        elif slip:
            text += f", a slip of {abs(slip)} decades from {_ohm(r.ohms)}"
        return text + "); read its colour bands or marking"
    if ref in board.capacitors:
        c = board.capacitors[ref]
        a, b = c.nodes
        if f.kind == "missing":
            return (
                f"look at {ref}: is it fitted, with both legs soldered? With power off, "
                f"measure its capacitance out of circuit: expect about 0 F (open or missing) "
                f"if this is the fault, about {format_si(c.farads, 'F', 3)} if it is good"
            )
        return _short_check(board, ref, a, b, "a good capacitor charges and reads open, "
                            "leaving the network around it")
    q = board.transistors[ref]
    node, v_h, v_0 = _telling_node(ft, none_fit, (q.e, q.c, q.b), board)
    text = (
        f"check {ref}'s orientation against its footprint (collector and emitter swapped: "
        f"pin order, flat side or tab)"
    )
    if node is not None and readings_differ("voltage", v_h, v_0):
        text += (
            f"; with power on, measure V({node}): expect about {v_h:.3g} V if this is the "
            f"fault, {v_0:.3g} V if it is placed as drawn"
        )
    return text


def _short_check(board: Board, ref: str, a: str, b: str, good: str) -> str:
    """A shorted part's check: across it in circuit when the network around it reads
    apart from 0 Ω, else out of circuit (both outcomes would read the same)."""
    good_reads = ohms_between(board, a, b)
    if readings_differ("resistance", 0.0, good_reads):
        shown = "open" if good_reads == float("inf") else f"about {_ohm(good_reads)}"
        return (
            f"with power off and the supply disconnected, measure across {ref} in circuit "
            f"({a} to {b}, a low-power ohms range): expect about 0 ohm if this is the "
            f"fault, {shown} if it is good ({good}); look for a solder bridge"
        )
    return (
        f"with power off, lift one leg of {ref} and measure across it out of circuit (in "
        f"circuit the network around it reads about {_ohm(good_reads)}, as a short would): "
        f"expect about 0 ohm if this is the fault; look for a solder bridge"
    )


def _telling_node(ft: FaultFit, none_fit: FaultFit, nodes, board: Board):
    """The transistor node whose voltage differs most between ``ft`` and ``none``."""
    supplies = {s.node for s in board.supplies.values()} | {GND, "0"}
    best = (None, 0.0, 0.0)
    gap = -1.0
    for n in nodes:
        if n in supplies or n not in ft.node_volts or n not in none_fit.node_volts:
            continue
        d = abs(ft.node_volts[n] - none_fit.node_volts[n])
        if d > gap:
            gap = d
            best = (n, ft.node_volts[n], none_fit.node_volts[n])
    return best

