"""The board: what the designer drew, as frozen values in SI units.

A :class:`Board` is produced by :func:`reconcile.board_loader.load_board` from a board
file (TOML, see the contract in the README) and never changes afterwards; variants of a
board (a fault, a rework option) are new boards made with :meth:`Board.replace_part` or
:func:`dataclasses.replace`.

Node names are strings; ``"gnd"`` is the 0 V reference (the loader refuses ``"0"``).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

from reconcile.model.kinds import Polarity

GND = "gnd"

__all__ = [
    "GND", "Bench", "Board", "Capacitor", "Device", "DeviceParam", "Polarity", "Resistor",
    "Signal", "Spec", "SpecTarget", "Supply", "Transistor",
]


def _read_only(value: Mapping[str, Any] | None) -> Mapping[str, Any]:
    """A read-only copy of a table (a later change to the caller's dict cannot reach it)."""
    return MappingProxyType(dict(value or {}))


def _set(obj: object, name: str, value: Any) -> None:
    object.__setattr__(obj, name, value)  # frozen dataclasses: only in __post_init__


@dataclass(frozen=True)
class Supply:
    """A DC source from gnd to ``node``; ``volts`` may be negative (a negative rail)."""

    ref: str
    node: str
    volts: float
    tolerance: float = 0.0


@dataclass(frozen=True)
class Resistor:
    """A resistor; its current is counted from ``nodes[0]`` to ``nodes[1]``."""

    ref: str
    nodes: tuple[str, str]
    ohms: float
    tolerance: float = 0.05
    rating_w: float | None = None
    trim: bool = True

    def __post_init__(self) -> None:
        _set(self, "nodes", tuple(self.nodes))


@dataclass(frozen=True)
class Capacitor:
    """A capacitor: open at DC, admittance j*2*pi*f*C in small signal."""

    ref: str
    nodes: tuple[str, str]
    farads: float
    tolerance: float = 0.20
    trim: bool = True
    leak_siemens: float = 0.0
    """DC conductance across the part: 0 for a good capacitor; a shorted one on a board
    as built under a fault hypothesis (:func:`reconcile.diagnosis.faults.as_built`).
    Not a board-file key."""

    def __post_init__(self) -> None:
        _set(self, "nodes", tuple(self.nodes))


@dataclass(frozen=True)
class DeviceParam:
    """A device parameter: a typical value and, where given, the range a part may have."""

    value: float
    low: float | None = None
    high: float | None = None

    @property
    def has_range(self) -> bool:
        return self.low is not None and self.high is not None and self.high > self.low


@dataclass(frozen=True)
class Device:
    """A transistor type (values at 25 C).

    ``IS`` in A, ``VA`` in V (``inf`` for no Early effect), ``bandgap`` in eV.
    """

    name: str
    IS: DeviceParam
    beta: DeviceParam
    beta_r: DeviceParam = field(default_factory=lambda: DeviceParam(1.0))
    VA: DeviceParam = field(default_factory=lambda: DeviceParam(float("inf")))
    n: DeviceParam = field(default_factory=lambda: DeviceParam(1.0))
    is_temp_exponent: float = 3.0
    bandgap: float = 1.11
    ft: DeviceParam = field(default_factory=lambda: DeviceParam(float("inf")))
    c_mu: DeviceParam = field(default_factory=lambda: DeviceParam(0.0))

    # ft (Hz) and c_mu (F) are the optional hybrid-π capacitances (docs/formats.md
    # §6.3): ft = inf and c_mu = 0 mean no device capacitance (contract version 1).


@dataclass(frozen=True)
class Transistor:
    """A bipolar transistor placed on the board, terminals named by node."""

    ref: str
    polarity: Polarity
    c: str
    b: str
    e: str
    device: str


@dataclass(frozen=True)
class Signal:
    """The small-signal test set-up (see the contract for how each quantity is defined)."""

    input: str | None = None
    output: str | None = None
    source_ohms: float = 50.0
    load_ohms: float = float("inf")
    frequency: float = 1e3


DEFAULT_AMMETER_OHMS = 10.0
"""The series burden of the ammeter a resistor's current is read with, ohms, when the
board file does not say: a bench DMM on its milliampere ranges puts a few ohms to tens of
ohms in series (its burden voltage at full scale over the range; common practice). Give
your meter's own figure as ``[bench] ammeter_ohms``."""


@dataclass(frozen=True)
class Bench:
    """How the bench reads the board.

    ``voltmeter_ohms`` is the DC voltmeter's input resistance; ``ammeter_ohms`` the
    series burden of the meter a ``current`` through a resistor is read with
    (:data:`DEFAULT_AMMETER_OHMS`; 0: an ideal ammeter); ``probe_ohms`` and
    ``probe_farads`` the probe (or AC meter input) on the signal's input and output
    nodes during small-signal readings (``inf`` and 0: no probe). ``instruments`` are
    the instrument files of the bench's meters, which a reading's ``instrument`` cell
    may name (paths, relative ones resolved against the board file's folder).
    """

    voltmeter_ohms: float = 10e6
    ammeter_ohms: float = DEFAULT_AMMETER_OHMS
    probe_ohms: float = float("inf")
    probe_farads: float = 0.0
    instruments: tuple[str, ...] = ()


@dataclass(frozen=True)
class SpecTarget:
    """A target with a relative tolerance (``value`` in SI units)."""

    value: float
    tolerance: float

    @property
    def low(self) -> float:
        return self.value * (1.0 - self.tolerance)

    @property
    def high(self) -> float:
        return self.value * (1.0 + self.tolerance)


@dataclass(frozen=True)
class Spec:
    """What the board must meet. ``targets`` is keyed by small-signal quantity name
    (``gain``, ``input_resistance``, ``output_resistance``, ``source_gain``)."""

    targets: Mapping[str, SpecTarget] = field(default_factory=dict)
    min_vce: float | None = None
    low_corner_max: float | None = None  # Hz, the low −3 dB corner may be at most this
    high_corner_min: float | None = None  # Hz, the high −3 dB corner must be at least this

    def __post_init__(self) -> None:
        _set(self, "targets", _read_only(self.targets))


_TABLES = ("supplies", "resistors", "capacitors", "transistors", "devices")


@dataclass(frozen=True)
class Board:
    """A whole board as drawn. ``temperature`` is the ambient, in kelvin.

    Read-only all the way down: every part is a frozen dataclass, every table (and
    ``spec.targets``) a read-only mapping, every node pair a tuple. Make variants with
    :meth:`replace_part` or :func:`dataclasses.replace`.
    """

    title: str = ""
    temperature: float = 298.15
    supplies: Mapping[str, Supply] = field(default_factory=dict)
    resistors: Mapping[str, Resistor] = field(default_factory=dict)
    capacitors: Mapping[str, Capacitor] = field(default_factory=dict)
    transistors: Mapping[str, Transistor] = field(default_factory=dict)
    devices: Mapping[str, Device] = field(default_factory=dict)
    signal: Signal = field(default_factory=Signal)
    bench: Bench = field(default_factory=Bench)
    spec: Spec = field(default_factory=Spec)
    source_path: str | None = None
    source_text: str | None = None
    warnings: tuple[str, ...] = ()
    """What the loader found suspicious but not wrong (a node only one part touches, a
    misspelled gnd, an implausible value), each ``path:line: [key] message``."""

    def __post_init__(self) -> None:
        for name in _TABLES:
            _set(self, name, _read_only(getattr(self, name)))

    def __repr__(self) -> str:
        parts = ", ".join(
            f"{len(getattr(self, name))} {name}" for name in _TABLES[:4] if getattr(self, name)
        )
        spec = ", ".join(self.spec.targets)
        return f"Board({self.title or self.source_path or ''!r}, {parts}" + (
            f", spec: {spec})" if spec else ")")

    def to_dict(self) -> dict[str, Any]:
        """Plain dictionaries and lists of every field but the source (JSON-ready apart
        from infinities)."""

        def plain(obj: Any) -> Any:
            if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
                return {f.name: plain(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
            if isinstance(obj, Mapping):
                return {str(k): plain(v) for k, v in obj.items()}
            if isinstance(obj, list | tuple):
                return [plain(v) for v in obj]
            return obj

        out = plain(self)
        for private in ("source_path", "source_text", "warnings"):
            out.pop(private, None)
        return out

    # ------------------------------------------------------------------ views
    @property
    def nodes(self) -> list[str]:
        """Every node name except gnd, in order of first appearance."""
        seen: dict[str, None] = {}
        for s in self.supplies.values():
            seen.setdefault(s.node, None)
        for r in self.resistors.values():
            for n in r.nodes:
                seen.setdefault(n, None)
        for c in self.capacitors.values():
            for n in c.nodes:
                seen.setdefault(n, None)
        for q in self.transistors.values():
            for n in (q.c, q.b, q.e):
                seen.setdefault(n, None)
        for n in (self.signal.input, self.signal.output):
            if n:
                seen.setdefault(n, None)
        seen.pop(GND, None)
        return list(seen)

    def device_of(self, transistor_ref: str) -> Device:
        return self.devices[self.transistors[transistor_ref].device]

    # -------------------------------------------------------------- variants
    def replace_part(self, part: Supply | Resistor | Capacitor | Transistor) -> Board:
        """A new board with one part replaced (matched by ref and kind)."""
        table = {
            Supply: "supplies",
            Resistor: "resistors",
            Capacitor: "capacitors",
            Transistor: "transistors",
        }[type(part)]
        parts = dict(getattr(self, table))
        parts[part.ref] = part
        return dataclasses.replace(self, **{table: parts})

    def with_resistor_ohms(self, ref: str, ohms: float) -> Board:
        return self.replace_part(dataclasses.replace(self.resistors[ref], ohms=float(ohms)))
