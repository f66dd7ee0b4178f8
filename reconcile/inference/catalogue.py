"""The one catalogue of readings one could take on a board, and what each one needs.

:func:`readings_one_could_take` lists every reading of the board that the measurement
model predicts, once, in a fixed order. Everything that needs such a list filters it
instead of building its own: the next-reading suggestions
(:mod:`reconcile.analysis.next_reading`, "not yet taken"), diagnosis' separating reading
(:mod:`reconcile.diagnosis.separating`, "not yet taken"), the capture plan
(:mod:`reconcile.capture.plan`, "on the guided-capture bench", small-signal readings
only when asked), the simulated bench (:mod:`reconcile.capture.simulated_bench`, "DMM
and supply read-back") and the simulated readings of :mod:`reconcile.inference.simulate`
(the capture plan's readings).

The rules
---------
For each quantity of the registry (:mod:`reconcile.model.quantities`) that a readings
file accepts and the measurement model predicts, in registry order:

- ``voltage``: at every node with a DC path to gnd, against gnd, in the board's node
  order. Supply nodes are included (the rail as it reaches the board informs a supply
  with a tolerance); so are ``[signal]`` input and output nodes with a DC path (a bleed
  resistor: they read about 0 V, and a leaky or shorted coupling capacitor shows there).
  A ``[signal]`` node reached only through capacitors has no DC voltage
  (docs/formats.md §2.2) and is left out. Readings between two nodes (``a/b``) are
  allowed in a readings file but not listed: there are too many and they add nothing a
  pair of node voltages does not say.
- ``current``: at every supply (its read-back: what it delivers into the board), then
  at every resistor (an ammeter in series: the circuit opened at one end).
- ``gain``, ``input_resistance``, ``output_resistance``: once each, only when the board's
  ``[signal]`` table names both an input and an output node.
- ``resistance`` at every resistor and ``capacitance`` at every capacitor, measured out
  of circuit (the part lifted).

Not listed: ``source_gain`` and ``gain_phase_deg`` (not accepted in a readings file) and
``temperature`` (the ambient: it sets a prior, it is not a reading of the board).

"Not yet taken" compares :func:`reading_key` of both sides, so ``b/gnd`` in a readings
file counts as the node voltage at ``b``. The key carries a small-signal reading's test
frequency: a gain read at 50 Hz is not the gain at ``[signal] frequency`` (a blank
frequency, or one equal to the board's ``[signal] frequency``, is the board's).

Small-signal readings at other test frequencies are listed only when asked
(``frequencies=``): each small-signal place once more at each of them, after the
readings at ``[signal] frequency`` (the next reading asks for a few that inform the
capacitors; a capture's ``--frequencies`` plans its gains that way).

To add a reading quantity: register it (:data:`reconcile.model.quantities.REGISTRY`),
give it a rule here (:data:`_RULES`: where it is taken and what it needs), and its
prediction in :mod:`reconcile.inference.measure`; ``tests/test_catalogue.py`` fails
until every readable, predicted quantity has a rule.
"""

from __future__ import annotations

import enum
from collections.abc import Callable, Collection, Iterable, Iterator
from dataclasses import dataclass

from reconcile.model.board import GND, Board
from reconcile.model.quantities import REGISTRY, QuantityKind
from reconcile.model.values import format_si

__all__ = [
    "BenchNeed",
    "CatalogueEntry",
    "DC_BENCH",
    "GUIDED_CAPTURE_BENCH",
    "dc_nodes",
    "ReadingKey",
    "reading_key",
    "reading_label",
    "readings_one_could_take",
    "taken_keys",
]


class BenchNeed(str, enum.Enum):
    """One thing a bench must have (or do) to take a reading."""

    DC_VOLTMETER = "dc_voltmeter"
    """A DC voltmeter, probe on the node and black lead on gnd."""
    SUPPLY_READBACK = "supply_readback"
    """The bench supply's own current read-back (or an ammeter in its lead)."""
    AMMETER_IN_SERIES = "ammeter_in_series"
    """An ammeter in series with a part: the circuit opened at one end of it."""
    GENERATOR = "generator"
    """A signal generator on the ``[signal]`` input, behind ``source_ohms``."""
    AC_VOLTMETER = "ac_voltmeter"
    """An AC voltmeter (or oscilloscope) on the ``[signal]`` nodes."""
    SERIES_RESISTOR = "series_resistor"
    """A known resistor put between the generator and the input."""
    SWITCHED_LOAD = "switched_load"
    """The output read loaded and unloaded."""
    OHMMETER = "ohmmeter"
    """A resistance meter."""
    CAPACITANCE_METER = "capacitance_meter"
    """A capacitance meter."""
    PART_OUT_OF_CIRCUIT = "part_out_of_circuit"
    """The part lifted from the board (power off first)."""

    def __str__(self) -> str:
        return self.value


DC_BENCH: frozenset[BenchNeed] = frozenset({BenchNeed.DC_VOLTMETER, BenchNeed.SUPPLY_READBACK})
"""A powered board, a DC voltmeter and the supplies' read-back: nothing opened or lifted."""

GUIDED_CAPTURE_BENCH: frozenset[BenchNeed] = DC_BENCH | {
    BenchNeed.GENERATOR, BenchNeed.AC_VOLTMETER, BenchNeed.SERIES_RESISTOR,
}
"""What a guided capture works with (:mod:`reconcile.capture`): the DC bench, plus a
generator, an AC voltmeter and the series resistor of the input-resistance method."""


@dataclass(frozen=True)
class CatalogueEntry:
    """One reading one could take.

    Attributes
    ----------
    quantity : str
        A registered quantity name (:mod:`reconcile.model.quantities`).
    at : str
        The node, supply or part it is taken at, ``""`` for the ``[signal]`` readings:
        the reading's ``at`` as a readings file writes it.
    label : str
        A short human label (``voltage at node b``).
    needs : tuple of BenchNeed
        What a bench needs to take it.
    frequency : float or None
        The test frequency of a small-signal reading, Hz; ``None`` for the board's
        ``[signal] frequency`` (and every other quantity).
    """

    quantity: str
    at: str
    label: str
    needs: tuple[BenchNeed, ...]
    frequency: float | None = None

    @property
    def key(self) -> ReadingKey:
        """``(quantity, at, frequency)``, as :func:`reading_key` writes it (frequency
        ``None``: the board's ``[signal] frequency``)."""
        return (self.quantity, self.at, self.frequency)

    @property
    def place(self) -> tuple[str, str]:
        """``(quantity, at)``: where it is taken, whatever the frequency."""
        return (self.quantity, self.at)

    @property
    def kind(self) -> QuantityKind:
        """The registry's kind of the quantity (DC, small-signal, part)."""
        return REGISTRY[self.quantity].kind

    def possible_on(self, bench: Collection[BenchNeed]) -> bool:
        """Whether a bench with ``bench`` can take it."""
        return _within(self.needs, bench)

    def to_dict(self) -> dict:
        """``{"quantity", "at", "frequency", "label", "needs"}``."""
        return {"quantity": self.quantity, "at": self.at, "frequency": self.frequency,
                "label": self.label, "needs": [str(n) for n in self.needs]}


ReadingKey = tuple[str, str, "float | None"]
"""``(quantity, at, frequency)``: what "already taken" compares."""


def reading_key(quantity: str, at: str, frequency: float | None = None, *,
                signal_frequency: float | None = None) -> ReadingKey:
    """The catalogue's key of a reading: ``at`` stripped, ``a/gnd`` written as ``a``, and
    the test frequency of a small-signal reading (Hz, to 12 significant digits).

    The frequency is ``None`` for the board's ``[signal] frequency``: when ``frequency``
    is None (a blank cell), when it equals ``signal_frequency``, and for every quantity
    that is not small-signal.
    """
    at = at.strip()
    if quantity == "voltage" and "/" in at:
        hi, lo = (part.strip() for part in at.split("/", 1))
        at = hi if lo == GND else f"{hi}/{lo}"
    spec = REGISTRY.get(quantity)
    if frequency is None or spec is None or spec.kind is not QuantityKind.SMALL_SIGNAL:
        return (quantity, at, None)
    f = float(f"{float(frequency):.12g}")
    if signal_frequency is not None and f == float(f"{float(signal_frequency):.12g}"):
        return (quantity, at, None)
    return (quantity, at, f)


def reading_label(quantity: str, at: str, frequency: float | None = None) -> str:
    """``voltage at b``, ``gain``, ``gain at 50 Hz``: a reading as a suggestion names it."""
    label = f"{quantity} at {at}" if at else quantity
    return label if frequency is None else f"{label} at {format_si(frequency, 'Hz', 4)}"


def _within(needs: Iterable[BenchNeed], bench: Collection[BenchNeed]) -> bool:
    return all(need in bench for need in needs)


# ------------------------------------------------------------------------- the rules
@dataclass(frozen=True)
class _Rule:
    """Where one quantity is taken: ``places(board)`` gives (at, label) pairs."""

    places: Callable[[Board], Iterator[tuple[str, str]]]
    needs: tuple[BenchNeed, ...]


def _at_dc_nodes(board: Board) -> Iterator[tuple[str, str]]:
    for node in dc_nodes(board):
        yield node, f"voltage at node {node}"


def _at_supplies(board: Board) -> Iterator[tuple[str, str]]:
    for ref in board.supplies:
        yield ref, f"current of supply {ref}"


def _at_resistors(what: str) -> Callable[[Board], Iterator[tuple[str, str]]]:
    def places(board: Board) -> Iterator[tuple[str, str]]:
        for ref in board.resistors:
            yield ref, f"{what} {ref}"
    return places


def _at_capacitors(board: Board) -> Iterator[tuple[str, str]]:
    for ref in board.capacitors:
        yield ref, f"capacitance of {ref} (out of circuit)"


def _with_signal(name: str) -> Callable[[Board], Iterator[tuple[str, str]]]:
    def places(board: Board) -> Iterator[tuple[str, str]]:
        if board.signal.input and board.signal.output:
            yield "", REGISTRY[name].label
    return places


_AC = (BenchNeed.GENERATOR, BenchNeed.AC_VOLTMETER)

#: quantity -> where it is taken and what it needs; one quantity may have several rules
#: (a current at a supply and at a resistor), listed in the order the catalogue keeps.
_RULES: dict[str, tuple[_Rule, ...]] = {
    "voltage": (_Rule(_at_dc_nodes, (BenchNeed.DC_VOLTMETER,)),),
    "current": (
        _Rule(_at_supplies, (BenchNeed.SUPPLY_READBACK,)),
        _Rule(_at_resistors("current through"), (BenchNeed.AMMETER_IN_SERIES,)),
    ),
    "gain": (_Rule(_with_signal("gain"), _AC),),
    "input_resistance": (
        _Rule(_with_signal("input_resistance"), (*_AC, BenchNeed.SERIES_RESISTOR)),
    ),
    "output_resistance": (
        _Rule(_with_signal("output_resistance"), (*_AC, BenchNeed.SWITCHED_LOAD)),
    ),
    "resistance": (
        _Rule(_at_resistors("resistance of"),
              (BenchNeed.OHMMETER, BenchNeed.PART_OUT_OF_CIRCUIT)),
    ),
    "capacitance": (
        _Rule(_at_capacitors, (BenchNeed.CAPACITANCE_METER, BenchNeed.PART_OUT_OF_CIRCUIT)),
    ),
}


def catalogued_quantities() -> tuple[str, ...]:
    """The quantities the catalogue lists: readable and predicted, in registry order."""
    return tuple(q.name for q in REGISTRY.values() if q.readable and q.predicted)


def dc_nodes(board: Board) -> list[str]:
    """The board's nodes that have a DC voltage (a DC path to gnd), in node order.

    A ``[signal]`` input or output reached only through capacitors has none (the
    loader allows that one exception to the DC-path rule, docs/formats.md §2.2).
    """
    from reconcile.engine import compile_board  # numpy: only when a catalogue is made

    circuit = compile_board(board)
    floating = {circuit.node_names[i] for i in circuit.dc_floating.tolist()}
    return [node for node in board.nodes if node not in floating]


def taken_keys(board: Board, taken: Iterable[tuple]) -> set[ReadingKey]:
    """:func:`reading_key` of each ``(quantity, at)`` or ``(quantity, at, frequency)``,
    against ``board``'s ``[signal] frequency``."""
    f0 = board.signal.frequency
    return {reading_key(*t, signal_frequency=f0) for t in taken}


def readings_one_could_take(
    board: Board,
    *,
    taken: Iterable[tuple] = (),
    bench: Collection[BenchNeed] | None = None,
    frequencies: Iterable[float] = (),
) -> tuple[CatalogueEntry, ...]:
    """Every reading one could take on ``board``, in the catalogue's order.

    Parameters
    ----------
    board : Board
        The board as drawn.
    taken : iterable of (quantity, at) or (quantity, at, frequency)
        Readings already taken (any spelling :func:`reading_key` accepts); left out.
    bench : collection of BenchNeed, optional
        Keep only the readings a bench with these can take (default: every reading).
    frequencies : iterable of float, optional
        Test frequencies (Hz) other than ``[signal] frequency``: each small-signal
        reading is listed again at each of them (one equal to ``[signal] frequency``
        adds nothing).

    Returns
    -------
    tuple of CatalogueEntry
        Registry order of the quantities, then the order of the places (board node
        order; supplies before resistors; the board's part order); then the small-signal
        readings at ``frequencies``, in their order.
    """
    done = taken_keys(board, taken)
    listed: list[CatalogueEntry] = []
    for name in catalogued_quantities():
        for rule in _RULES[name]:
            if bench is not None and not _within(rule.needs, bench):
                continue
            for at, label in rule.places(board):
                listed.append(CatalogueEntry(name, at, label, rule.needs))
    small = [e for e in listed if e.kind is QuantityKind.SMALL_SIGNAL]
    for f in frequencies:
        f_key = reading_key("gain", "", f, signal_frequency=board.signal.frequency)[2]
        if f_key is not None:
            listed += [_at_frequency(e, f_key) for e in small]
    seen: set[ReadingKey] = set()
    out = []
    for e in listed:
        if e.key not in done and e.key not in seen:
            seen.add(e.key)
            out.append(e)
    return tuple(out)


def _at_frequency(entry: CatalogueEntry, frequency: float) -> CatalogueEntry:
    return CatalogueEntry(entry.quantity, entry.at,
                          f"{entry.label} at {format_si(frequency, 'Hz', 4)}", entry.needs,
                          frequency)
