"""What a capture run reads, in which order, and what the operator is told at each step.

:func:`plan_readings` lists the readings a careful engineer takes first on a board: the
readings of the catalogue (:func:`reconcile.inference.catalogue.readings_one_could_take`)
that the guided-capture bench can take
(:data:`~reconcile.inference.catalogue.GUIDED_CAPTURE_BENCH`), small-signal ones only
when asked, in the catalogue's order:

1. every node's DC voltage against gnd, in the board's node order (a ``[signal]``
   input or output node that reaches gnd only through capacitors has no DC voltage and
   is left out: :func:`~reconcile.inference.catalogue.dc_nodes`);
2. every supply's current (its read-back: the current it delivers into the board);
3. optionally the small-signal gain (AC rms at the input, then at the output);
4. optionally the input resistance by the series-resistor method
   (:func:`reconcile.data.derived_readings.input_resistance_series_method`);
5. optionally a gain sweep: the gain at each of a list of test frequencies
   (``capture --frequencies``), each stored as its own reading with its frequency.

Resistor currents (the circuit opened), the output resistance (a switched load) and
parts measured out of circuit need what a capture does not do.

A :class:`ProbeStep` is one thing the operator is asked to do by hand: put the probe on
a point, or change the set-up (put the series resistor in, take it out). A capture run
hands each step to its ``prompt`` callable; a simulated operator reads the same fields
to know where the probe is.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

from reconcile.errors import InputError
from reconcile.inference.catalogue import (
    GUIDED_CAPTURE_BENCH,
    ReadingKey,
    dc_nodes,
    reading_key,
    reading_label,
    readings_one_could_take,
)
from reconcile.model.board import GND, Board
from reconcile.model.quantities import QuantityKind

__all__ = [
    "PlannedReading",
    "ProbeStep",
    "GENERATOR_SIDE",
    "SKIP_ANSWERS",
    "plan_readings",
    "dc_nodes",
    "dc_probe_step",
    "ac_probe_step",
    "series_setup_step",
    "direct_setup_step",
]

GENERATOR_SIDE = "generator side of the series resistor"
"""The probe point V1 of the series-resistor method (not a board node)."""

SKIP_ANSWERS = ("s", "skip")
"""What an operator types at a prompt to skip that reading (case ignored)."""

_SKIP_HINT = "type s to skip"


@dataclass(frozen=True)
class PlannedReading:
    """One reading a capture run means to take.

    Attributes
    ----------
    quantity : str
        ``voltage``, ``current``, ``gain`` or ``input_resistance`` (readings-file names).
    at : str
        A node (voltage against gnd), a supply ref (current), ``""`` (gain, input
        resistance): the reading's ``at``.
    prompt : str
        What the operator is told when the reading needs hands on the board (``""``
        for a supply read-back, which needs none).
    frequency : float or None
        The test frequency of a gain, Hz (``None``: the board's ``[signal] frequency``).
    """

    quantity: str
    at: str
    prompt: str = ""
    frequency: float | None = None

    @property
    def key(self) -> ReadingKey:
        """``(quantity, at, frequency)``: what a resumed run matches stored readings on
        (:func:`~reconcile.inference.catalogue.reading_key`)."""
        return (self.quantity, self.at, self.frequency)

    @property
    def place(self) -> tuple[str, str]:
        """``(quantity, at)``: where it is taken, whatever the frequency."""
        return (self.quantity, self.at)

    @property
    def label(self) -> str:
        """``voltage at b``, ``current at VCC``, ``gain``, ``gain at 50 Hz``."""
        return reading_label(self.quantity, self.at, self.frequency)

    def to_dict(self) -> dict[str, str | float | None]:
        """``{"quantity", "at", "frequency"}``."""
        return {"quantity": self.quantity, "at": self.at, "frequency": self.frequency}


@dataclass(frozen=True)
class ProbeStep:
    """One thing the operator does by hand, handed to the capture run's ``prompt``.

    Attributes
    ----------
    kind : {"probe_dc", "probe_ac", "setup"}
        Put the DC voltmeter's probe on ``hi`` (black lead on ``lo``); put the AC
        voltmeter's probe on ``hi``; or change the wiring (``series_ohm`` says how).
    text : str
        The instruction as shown, e.g. ``probe node b, black lead on gnd, press Enter
        when the probe is on``.
    hi, lo : str
        The probe's red and black points (``hi`` may be :data:`GENERATOR_SIDE`).
    series_ohm : float or None
        For ``setup``: the series resistor now in the signal path (ohm), or ``None``
        for the generator straight to the input.
    """

    kind: Literal["probe_dc", "probe_ac", "setup"]
    text: str
    hi: str = ""
    lo: str = GND
    series_ohm: float | None = None


def dc_probe_step(node: str, reference: str = GND) -> ProbeStep:
    """The step that puts the DC voltmeter on ``node`` against ``reference``."""
    return ProbeStep(
        "probe_dc",
        f"probe node {node}, black lead on {reference}, press Enter when the probe is on "
        f"({_SKIP_HINT})",
        hi=node,
        lo=reference,
    )


def ac_probe_step(point: str, what: str) -> ProbeStep:
    """The step that puts the AC voltmeter on ``point`` (a node or :data:`GENERATOR_SIDE`)."""
    where = point if point == GENERATOR_SIDE else f"node {point}"
    return ProbeStep(
        "probe_ac",
        f"AC voltmeter on {where} ({what}), black lead on gnd, press Enter when the probe "
        f"is on ({_SKIP_HINT})",
        hi=point,
    )


def series_setup_step(series_ohm: float, input_node: str) -> ProbeStep:
    """The step that puts the series resistor between the generator and the input."""
    return ProbeStep(
        "setup",
        f"put the {series_ohm:g} ohm series resistor between the generator and node "
        f"{input_node}, press Enter when it is in ({_SKIP_HINT})",
        hi=input_node,
        series_ohm=float(series_ohm),
    )


def direct_setup_step(input_node: str) -> ProbeStep:
    """The step that takes the series resistor out again."""
    return ProbeStep(
        "setup",
        f"take the series resistor out: generator straight to node {input_node}, press "
        "Enter when done",
        hi=input_node,
        series_ohm=None,
    )


def plan_readings(
    board: Board, *, gain: bool = False, input_resistance: bool = False,
    frequencies: Sequence[float] = (),
) -> list[PlannedReading]:
    """The readings of a capture run, in the order they are taken.

    Parameters
    ----------
    board : Board
        The board as drawn.
    gain : bool
        Add the small-signal gain (needs the board's ``[signal]`` table).
    input_resistance : bool
        Add the input resistance by the series-resistor method (needs ``[signal]``).
    frequencies : sequence of float
        Test frequencies (Hz) of a gain sweep: one gain at each, in the order given,
        after the readings at ``[signal] frequency`` (one equal to ``[signal]
        frequency`` is the plain gain; repeats are planned once).

    Returns
    -------
    list of PlannedReading
        Node voltages (board node order), supply currents, then gain and input
        resistance when asked, then the gain at each of ``frequencies``.

    Raises
    ------
    InputError
        Gain or input resistance asked for a board with no ``[signal]`` table.
    """
    signal = board.signal
    f0 = signal.frequency
    sweep = [f for f in frequencies if reading_key("gain", "", f, signal_frequency=f0)[2]]
    gain = gain or len(sweep) < len(frequencies)
    if (gain or input_resistance or sweep) and (signal.input is None or signal.output is None):
        what = "input resistance" if input_resistance and not gain else "gain"
        raise InputError(
            f"the {what} needs the board's [signal] table (input and output nodes)",
            path=board.source_path, key="signal",
        )
    asked = {"gain": gain, "input_resistance": input_resistance}
    prompts = {
        "gain": f"AC voltmeter on node {signal.input}, then on node {signal.output}",
        "input_resistance": f"series resistor into the path to node {signal.input}; "
        "AC voltmeter on each side of it",
    }
    plan = []
    for entry in readings_one_could_take(board, bench=GUIDED_CAPTURE_BENCH,
                                         frequencies=sweep):
        if entry.kind is QuantityKind.SMALL_SIGNAL:
            if entry.frequency is not None:
                if entry.quantity == "gain":
                    plan.append(PlannedReading("gain", "", prompts["gain"], entry.frequency))
            elif asked.get(entry.quantity):
                plan.append(PlannedReading(entry.quantity, "", prompts[entry.quantity]))
        elif entry.quantity == "voltage":
            plan.append(PlannedReading("voltage", entry.at, dc_probe_step(entry.at).text))
        else:  # a supply's read-back needs no hands on the board
            plan.append(PlannedReading(entry.quantity, entry.at))
    return plan
