"""The one registry of reading quantities: name, unit, kind, default uncertainty, label.

Every table that lists quantities reads it: the readings loader and writer
(:mod:`reconcile.data.readings`), the measurement model, the simulated readings, the
next-reading and separating-reading candidates, the board's ``[spec]`` keys, the
renderers and the report. To add a quantity, add one :class:`Quantity` to
:data:`REGISTRY` (and its prediction to :mod:`reconcile.inference.measure` when the
fit should use it); nothing else keeps a list of names, units or default uncertainties.

The names and units are those of the readings file and the JSON outputs
(docs/formats.md §3, §4): SI units written as the JSON writes them (``"ohm"``, not
``"Ω"``; ``"K"`` for temperature inside, whatever the file said).

This module needs only the standard library, so every layer may import it.
"""

from __future__ import annotations

import enum
import math
import types
from collections.abc import Iterator, Mapping
from dataclasses import dataclass

__all__ = [
    "COUNTS_FULL_SCALE",
    "MIN_RELATIVE_UNCERTAINTY",
    "Quantity",
    "QuantityKind",
    "REGISTRY",
    "UncertaintyRule",
    "names",
    "quantity",
]


class QuantityKind(str, enum.Enum):
    """What sort of reading a quantity is."""

    DC = "dc"
    """Read on the powered board at DC (node voltages, currents)."""
    SMALL_SIGNAL = "small_signal"
    """Read with the ``[signal]`` set-up (gain, input and output resistance)."""
    PART = "part"
    """A part measured out of circuit (resistance, capacitance)."""
    AMBIENT = "ambient"
    """The surroundings (temperature); sets a prior, is not predicted."""

    def __str__(self) -> str:
        return self.value


# ------------------------------------------------------------------ uncertainty
#: Display counts of the 4½-digit bench meter the defaults assume (±19 999).
COUNTS_FULL_SCALE = 20000


@dataclass(frozen=True)
class UncertaintyRule:
    """A default uncertainty: limits ±(relative·|reading| + counts·resolution + absolute).

    ``resolution`` is the auto-selected range (the smallest of ``ranges`` above
    |reading|, else the largest) divided by :data:`COUNTS_FULL_SCALE`. The limits are
    divided by ``divisor`` to give one standard uncertainty: √3 for an instrument's
    accuracy specification taken as a rectangular distribution (JCGM 100:2008, GUM
    4.3.7), 1 where the figure already is a standard uncertainty.
    """

    relative: float
    counts: float = 0.0
    ranges: tuple[float, ...] = ()
    absolute: float = 0.0
    divisor: float = 1.0
    basis: str = ""

    def full_scale(self, value: float) -> float | None:
        """The auto-selected range for ``value`` (the smallest of ``ranges`` above
        |value|, else the largest); ``None`` when the rule has no ranges."""
        if not self.ranges:
            return None
        magnitude = abs(value)
        return next((r for r in self.ranges if magnitude < r), self.ranges[-1])

    @property
    def systematic_relative(self) -> float:
        """The proportional part as one relative standard uncertainty: the instrument's
        calibration (gain) error, shared by every reading on one range."""
        return self.relative / self.divisor

    def limits(self, value: float) -> float:
        """Half-width of the limits of error, SI units."""
        full_scale = self.full_scale(value)
        resolution = 0.0 if full_scale is None else full_scale / COUNTS_FULL_SCALE
        return self.relative * abs(value) + self.counts * resolution + self.absolute

    def standard(self, value: float) -> float:
        """One standard uncertainty, SI units."""
        return self.limits(value) / self.divisor


_RECT = math.sqrt(3.0)

AC_VOLTAGE_DEFAULT = UncertaintyRule(
    0.01, absolute=10e-6,
    basis="AC voltage, rms: 1 % of reading + a 10 µV noise floor, standard uncertainty",
)
"""An AC voltage read by hand with no uncertainty given (``derive``, and the two
voltages of the gain default): 1 % of reading plus a 10 µV noise floor, as one standard
uncertainty (common practice for a bench AC meter or an oscilloscope's rms measurement
on its lowest ranges)."""

SUPPLY_READBACK_DEFAULT = UncertaintyRule(
    0.002, absolute=0.1e-3, divisor=_RECT,
    basis="bench supply current read-back ±(0.2 % of reading + 0.1 mA), rectangular",
)
"""A ``current`` at a supply ref typed with no uncertainty: the supply's own current
read-back, ±(0.2 % of reading + 0.1 mA) taken as rectangular (common practice for a
bench supply's display with 0.1 mA resolution). A current read with an ammeter in the
supply's lead is as good as that ammeter: give its uncertainty, or it is taken at this
read-back default."""

GAIN_INPUT_VRMS = 0.01
"""The input amplitude, V rms, the gain default assumes: the capture run's generator
amplitude (:data:`reconcile.capture.run.DEFAULT_SIGNAL_VRMS`; a test holds them equal)."""


@dataclass(frozen=True)
class RatioRule(UncertaintyRule):
    """The default of a gain v_out/v_in typed with no uncertainty: the two AC voltages
    it was worked out from, each at :data:`AC_VOLTAGE_DEFAULT`, v_in at
    :data:`GAIN_INPUT_VRMS`, uncorrelated, propagated to first order (JCGM 100:2008
    eq. 10), exactly as ``derive gain`` does with its defaults::

        u(G)² = (G·u(v_in)/v_in)² + (u(G·v_in)/v_in)²

    The voltages' noise floor gives the gain an absolute floor (10 µV / 10 mV = 1e-3),
    so a dead stage's gain of 0.001 is not held to 1e-5. ``relative`` is the
    proportional part both voltages carry (√2 × 1 %), the instrument's share
    :mod:`reconcile.inference.calibration` models as a calibration factor.
    """

    voltage: UncertaintyRule = AC_VOLTAGE_DEFAULT
    input_vrms: float = GAIN_INPUT_VRMS

    def limits(self, value: float) -> float:
        """The standard uncertainty (this rule's divisor is 1)."""
        v_in = self.input_vrms
        u_in = self.voltage.standard(v_in)
        u_out = self.voltage.standard(abs(value) * v_in)
        return math.hypot(abs(value) * u_in / v_in, u_out / v_in) * self.divisor


_GAIN_DEFAULT = RatioRule(
    math.sqrt(2.0) * AC_VOLTAGE_DEFAULT.relative,
    basis="from two AC voltages at 1 % + 10 µV each, v_in 10 mV rms: "
    "√((G·u(v_in))² + u(v_out)²)/v_in, standard uncertainty",
)


# --------------------------------------------------------------------- quantities
@dataclass(frozen=True)
class Quantity:
    """One quantity a reading (or a small-signal result) can be.

    Attributes
    ----------
    name : str
        The readings-file and JSON name (``input_resistance``).
    unit : str
        Its SI unit as the JSON writes it (``V``, ``A``, ``ohm``, ``F``, ``K``, ``deg``,
        ``""`` for a plain ratio).
    value_kind : str
        The kind :func:`reconcile.model.values.parse_value` reads its values as.
    kind : QuantityKind
        DC, small-signal, part or ambient.
    default_uncertainty : UncertaintyRule or None
        The uncertainty a reading gets when its file leaves the column blank; ``None``
        for a quantity that cannot be read from a file.
    label, short : str
        How tables name it (``input resistance``, ``Rin``).
    at : str
        What the ``at`` cell names, as the loader's messages say it.
    places : tuple of str
        The board tables whose refs ``at`` may name (``"nodes"`` for a node); empty
        when ``at`` stays blank.
    non_negative : bool
        Negative readings are refused.
    readable : bool
        Accepted in a readings file.
    predicted : bool
        The measurement model predicts it (a reading of it informs the fit).
    spec_target : bool
        Allowed as a ``[spec]`` target of the board file.
    digits : int
        Significant digits shown in tables.
    value_range : (float, float)
        The documented physical limits of a reading, SI units (docs/formats.md §3.3):
        far beyond any reading of a small discrete board, so that only nonsense (an
        overflowing ``1e308``, a mistyped prefix by many decades) is refused.
    min_uncertainty : float
        The smallest standard uncertainty accepted, SI units, whatever the reading
        (together with :data:`MIN_RELATIVE_UNCERTAINTY` of the reading).
    decibels : bool
        A reading may be written in ``dB`` (20·log10 of the ratio; its uncertainty in
        dB too), converted by :mod:`reconcile.model.decibels`.
    """

    name: str
    unit: str
    value_kind: str
    kind: QuantityKind
    default_uncertainty: UncertaintyRule | None
    label: str
    short: str
    at: str = "nothing (leave at blank)"
    places: tuple[str, ...] = ()
    non_negative: bool = False
    readable: bool = True
    predicted: bool = True
    spec_target: bool = False
    digits: int = 4
    value_range: tuple[float, float] = (-math.inf, math.inf)
    min_uncertainty: float = 0.0
    decibels: bool = False

    @property
    def takes_at(self) -> bool:
        """Whether a reading of it names a place (``at`` not blank)."""
        return bool(self.places)

    @property
    def small_signal(self) -> bool:
        """Whether it is read with the ``[signal]`` set-up."""
        return self.kind is QuantityKind.SMALL_SIGNAL

    def __repr__(self) -> str:
        return f"Quantity({self.name!r}, unit={self.unit!r}, kind={self.kind.value!r})"


def _register(*quantities: Quantity) -> Mapping[str, Quantity]:
    table = {q.name: q for q in quantities}
    return types.MappingProxyType(table)


#: The smallest relative standard uncertainty a reading may claim: 1 part in 10⁹ (no
#: bench instrument comes near it; a smaller one is a typing slip that would make one
#: reading outweigh every other by many decades).
MIN_RELATIVE_UNCERTAINTY = 1e-9

_OHMS_RANGE = (0.0, 1e12)  # up to 1 Tohm
_OHMS_MIN_U = 1e-6  # 1 uohm

_SMALL_SIGNAL_RESISTANCE = UncertaintyRule(0.02, basis="2 % of reading, standard uncertainty")

#: Every quantity, in the order tables list them. Defaults: common practice for a
#: 4½-digit bench DMM and an oscilloscope (the README table).
REGISTRY: Mapping[str, Quantity] = _register(
    Quantity(
        "voltage", "V", "volts", QuantityKind.DC,
        UncertaintyRule(
            0.0005, counts=2, ranges=(0.2, 2.0, 20.0, 200.0, 1000.0), divisor=_RECT,
            basis="DMM DC volts ±(0.05 % of reading + 2 counts), rectangular",
        ),
        "voltage", "V", at="a node or a/b", places=("nodes",),
        value_range=(-1000.0, 1000.0), min_uncertainty=1e-9,
    ),
    Quantity(
        "current", "A", "amps", QuantityKind.DC,
        UncertaintyRule(
            0.002, counts=2, ranges=(200e-6, 2e-3, 20e-3, 200e-3, 2.0, 10.0), divisor=_RECT,
            basis="DMM DC current ±(0.2 % of reading + 2 counts), rectangular",
        ),
        "current", "I", at="a supply or resistor ref", places=("supplies", "resistors"),
        value_range=(-10.0, 10.0), min_uncertainty=1e-12,
    ),
    Quantity(
        "gain", "", "plain", QuantityKind.SMALL_SIGNAL,
        _GAIN_DEFAULT,
        "gain |v_out / v_in|", "gain", non_negative=True, spec_target=True,
        value_range=(0.0, 1e6), min_uncertainty=1e-9, decibels=True,
    ),
    Quantity(
        "gain_phase_deg", "deg", "plain", QuantityKind.SMALL_SIGNAL, None,
        "gain phase", "phase", readable=False, predicted=False,
    ),
    Quantity(
        "source_gain", "", "plain", QuantityKind.SMALL_SIGNAL, None,
        "source gain |v_out / v_gen|", "source gain", non_negative=True, readable=False,
        spec_target=True,
    ),
    Quantity(
        "input_resistance", "ohm", "ohms", QuantityKind.SMALL_SIGNAL,
        _SMALL_SIGNAL_RESISTANCE, "input resistance", "Rin", non_negative=True,
        spec_target=True, value_range=_OHMS_RANGE, min_uncertainty=_OHMS_MIN_U,
    ),
    Quantity(
        "output_resistance", "ohm", "ohms", QuantityKind.SMALL_SIGNAL,
        _SMALL_SIGNAL_RESISTANCE, "output resistance", "Rout", non_negative=True,
        spec_target=True, value_range=_OHMS_RANGE, min_uncertainty=_OHMS_MIN_U,
    ),
    Quantity(
        "resistance", "ohm", "ohms", QuantityKind.PART,
        UncertaintyRule(
            0.001, counts=2, ranges=(200.0, 2e3, 20e3, 200e3, 2e6, 20e6), absolute=0.1,
            divisor=_RECT,
            basis="DMM 2-wire ohms ±(0.1 % of reading + 2 counts + 0.1 ohm leads), "
            "rectangular",
        ),
        "resistance", "R", at="a resistor ref", places=("resistors",), non_negative=True,
        value_range=_OHMS_RANGE, min_uncertainty=_OHMS_MIN_U,
    ),
    Quantity(
        "capacitance", "F", "farads", QuantityKind.PART,
        UncertaintyRule(0.02, divisor=_RECT, basis="DMM capacitance ±2 % of reading, rectangular"),
        "capacitance", "C", at="a capacitor ref", places=("capacitors",), non_negative=True,
        value_range=(0.0, 1.0), min_uncertainty=1e-18,
    ),
    Quantity(
        "temperature", "K", "temperature", QuantityKind.AMBIENT,
        UncertaintyRule(0.0, absolute=1.0, basis="1 K, standard uncertainty"),
        "ambient temperature", "T", predicted=False,
        value_range=(173.15, 573.15), min_uncertainty=1e-3,  # -100 C to 300 C; 1 mK
    ),
)


def quantity(name: str) -> Quantity:
    """The registered quantity called ``name``.

    Raises
    ------
    KeyError
        No quantity has that name.
    """
    return REGISTRY[name]


def names(
    *,
    kind: QuantityKind | None = None,
    readable: bool | None = None,
    predicted: bool | None = None,
    spec_target: bool | None = None,
) -> tuple[str, ...]:
    """Names of the registered quantities that match every given filter, in order."""
    return tuple(q.name for q in _select(kind, readable, predicted, spec_target))


def _select(
    kind: QuantityKind | None,
    readable: bool | None,
    predicted: bool | None,
    spec_target: bool | None,
) -> Iterator[Quantity]:
    for q in REGISTRY.values():
        if kind is not None and q.kind is not kind:
            continue
        if readable is not None and q.readable != readable:
            continue
        if predicted is not None and q.predicted != predicted:
            continue
        if spec_target is not None and q.spec_target != spec_target:
            continue
        yield q
