"""Instrument files (TOML): where an instrument is, what it does, how it speaks, how good it is.

An instrument file describes one instrument. Every key is ours; numbers are plain SI
numbers (V, A, s), the unit in the key name where it is not obvious::

    [instrument]
    name = "bench DMM"                       # free text, shown beside readings
    role = ["dc_voltmeter", "ac_voltmeter"]  # one role or a list (see ROLES)
    resource = "TCPIP0::192.168.0.20::INSTR" # VISA resource string
    backend = "@py"                          # @py | @ivi | @sim | bench.yaml@sim | library path
    timeout_s = 2.0                          # per read/write (default 2)
    retries = 1                              # extra tries of a query after a timeout (default 1)
    read_termination = "\\n"                  # default "\\n"
    write_termination = "\\n"                 # default "\\n"

    [commands]                               # optional overrides of the default SCPI forms
    read_dc_volts = "VAL?"

    [accuracy.dc_volts]                      # per function: dc_volts, ac_volts, dc_current
    over_range = 1.2                         # a range reads up to 1.2 × full scale (default)
    ranges = [
      { range = 1.0, percent_of_reading = 0.004, percent_of_range = 0.0007 },
      { range = 10.0, percent_of_reading = 0.0035, percent_of_range = 0.0005, floor = 0.0 },
    ]

    [accuracy.ac_volts]
    band_hz = [20.0, 100e3]                  # the band the AC accuracy is specified for, Hz
    ranges = [{ range = 1.0, percent_of_reading = 0.06, percent_of_range = 0.03 }]

    [limits]                                 # refuse set points above these (optional)
    max_voltage_v = 12.0                     # power_supply
    max_current_a = 0.1                      # power_supply
    max_amplitude_vpp = 2.0                  # function_generator

    [scanner]                                # scanner only
    reference_node = "gnd"                   # node the common LO (black) lead is on
    settle_s = 0.02                          # wait after closing a relay, s

    [channels]                               # scanner only: channel -> node
    101 = "b"                                # V(b) − V(reference_node)
    104 = "c/e"                              # a channel wired across two nodes: V(c) − V(e)

``band_hz`` (``ac_volts`` only; optional) is the band of test frequencies the AC
accuracy is specified for (:class:`reconcile.data.frequency_band.FrequencyBand`): a
capture refuses a test frequency outside it; ``ranges`` may then be left out.
A ``backend`` of the form ``file.yaml@sim`` is taken relative to the instrument file.
Loading reports every problem found, each with the file and the key.
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from reconcile.data.accuracy import DEFAULT_OVER_RANGE, AccuracySpec, RangeTable
from reconcile.data.frequency_band import BAND_KEY, FrequencyBand
from reconcile.errors import InputError, InputErrors
from reconcile.model.text_files import read_text
from reconcile.model.toml_lines import parse_toml

from reconcile.instruments.commands import ROLES, actions_for, template_problem

__all__ = [
    "InstrumentProfile",
    "load_profile",
    "ACCURACY_FUNCTIONS",
    "LIMIT_KEYS",
]

ACCURACY_FUNCTIONS: dict[str, tuple[str, tuple[str, ...]]] = {
    "dc_volts": ("V", ("dc_voltmeter", "power_supply")),
    "ac_volts": ("V", ("ac_voltmeter",)),
    "dc_current": ("A", ("power_supply",)),
}
"""Function -> (unit, roles that measure it)."""

LIMIT_KEYS: dict[str, str] = {
    "max_voltage_v": "power_supply",
    "max_current_a": "power_supply",
    "max_amplitude_vpp": "function_generator",
}
"""Limit key -> the role it applies to."""

_INSTRUMENT_KEYS = (
    "name", "role", "resource", "backend", "timeout_s", "retries",
    "read_termination", "write_termination",
)
_TOP_KEYS = ("instrument", "commands", "accuracy", "limits", "scanner", "channels")
_SPEC_KEYS = ("range", "percent_of_reading", "percent_of_range", "floor")
_CHANNEL_ID = re.compile(r"[A-Za-z0-9!._-]+")
_NODE = re.compile(r"[^\s/,]+")


@dataclass(frozen=True)
class InstrumentProfile:
    """One instrument, as its instrument file describes it.

    Attributes
    ----------
    resource : str
        VISA resource string.
    roles : tuple of str
        What the instrument is used as (values of :data:`instruments.commands.ROLES`).
    name : str
        Free text for people and for the readings' ``instrument`` column.
    backend : str
        pyvisa backend (see :mod:`instruments.transport`).
    timeout_s : float
        Time allowed per read or write, s.
    retries : int
        Extra tries of a query after a timeout.
    read_termination, write_termination : str
        End-of-message characters.
    commands : dict
        Action -> command template overriding the default.
    accuracy : dict
        Function (``dc_volts``, ``ac_volts``, ``dc_current``) -> :class:`RangeTable`.
    ac_band : FrequencyBand or None
        The band the AC accuracy is specified for (``[accuracy.ac_volts] band_hz``).
    limits : dict
        :data:`LIMIT_KEYS` -> largest value a set point may take.
    channels : dict
        Scanner channel id -> what it reads (``"b"`` or ``"c/e"``).
    reference_node : str
        Node of the scanner's common LO lead (default ``gnd``).
    settle_s : float
        Wait after closing a scanner relay, s.
    path : str or None
        The file it came from.
    """

    resource: str
    roles: tuple[str, ...]
    name: str = ""
    backend: str = "@py"
    timeout_s: float = 2.0
    retries: int = 1
    read_termination: str = "\n"
    write_termination: str = "\n"
    commands: dict[str, str] = field(default_factory=dict)
    accuracy: dict[str, RangeTable] = field(default_factory=dict)
    ac_band: FrequencyBand | None = None
    limits: dict[str, float] = field(default_factory=dict)
    channels: dict[str, str] = field(default_factory=dict)
    reference_node: str = "gnd"
    settle_s: float = 0.0
    path: str | None = None

    @classmethod
    def from_file(cls, path: str | os.PathLike[str]) -> InstrumentProfile:
        """Load and check an instrument file.

        Raises
        ------
        InputError
            The file is missing, is not TOML, or has problems (all reported together).
        """
        name = os.fspath(path)
        if not os.path.exists(name):
            raise InputError("instrument file not found", path=name)
        name, text = read_text(name, "instrument file")
        return cls.from_dict(parse_toml(text, name), path=name)

    @classmethod
    def from_dict(cls, data: Mapping[str, Any], path: str | None = None) -> InstrumentProfile:
        """Build from parsed TOML (``path`` only for messages and relative backends).

        Raises
        ------
        InputError
            Every problem found, together (:class:`reconcile.errors.InputErrors`).
        """
        return _Loader(path).load(data)

    def command(self, action: str, default: str) -> str:
        """The template for ``action``: the file's override, else ``default``."""
        return self.commands.get(action, default)

    def accuracy_for(self, function: str) -> RangeTable | None:
        """The accuracy table for ``function``, or ``None`` if the file gives none."""
        return self.accuracy.get(function)

    def channel_for(self, at: str) -> str:
        """The scanner channel that reads ``at`` (a node, or ``a/b``).

        A plain node also matches a channel written ``node/reference_node``.

        Raises
        ------
        InputError
            No channel reads it.
        """
        wanted = {at}
        if "/" not in at:
            wanted.add(f"{at}/{self.reference_node}")
        elif at.endswith(f"/{self.reference_node}"):
            wanted.add(at.split("/", 1)[0])
        for channel, where in self.channels.items():
            if where in wanted:
                return channel
        known = ", ".join(f"{c} = {w}" for c, w in self.channels.items()) or "none"
        raise InputError(f"no scanner channel reads {at!r} (channels: {known})",
                         path=self.path, key="channels")

    def open(self) -> Any:
        """Open the instrument through pyvisa with this file's settings.

        Returns
        -------
        instruments.transport.VisaTransport
        """
        from reconcile.instruments.transport import open_transport

        return open_transport(
            self.resource,
            backend=self.backend,
            timeout_s=self.timeout_s,
            retries=self.retries,
            read_termination=self.read_termination,
            write_termination=self.write_termination,
        )

    def to_dict(self) -> dict[str, Any]:
        """The profile as plain data (the shape of the file)."""
        out: dict[str, Any] = {
            "instrument": {
                "name": self.name,
                "role": list(self.roles),
                "resource": self.resource,
                "backend": self.backend,
                "timeout_s": self.timeout_s,
                "retries": self.retries,
                "read_termination": self.read_termination,
                "write_termination": self.write_termination,
            },
            "commands": dict(self.commands),
            "accuracy": {k: v.to_dict() for k, v in self.accuracy.items()},
            "limits": dict(self.limits),
        }
        if self.ac_band is not None:
            out["accuracy"].setdefault("ac_volts", {})[BAND_KEY] = self.ac_band.to_list()
        if "scanner" in self.roles:
            out["scanner"] = {"reference_node": self.reference_node, "settle_s": self.settle_s}
            out["channels"] = dict(self.channels)
        return out


def load_profile(path: str | os.PathLike[str]) -> InstrumentProfile:
    """Load an instrument file; see :meth:`InstrumentProfile.from_file`."""
    return InstrumentProfile.from_file(path)


class _Loader:
    """Checks one parsed instrument file, collecting every problem."""

    def __init__(self, path: str | None) -> None:
        self.path = path
        self.problems: list[InputError] = []
        self.ac_band: FrequencyBand | None = None

    def problem(self, key: str, message: str) -> None:
        self.problems.append(InputError(message, path=self.path, key=key))

    def table(self, data: Mapping[str, Any], key: str) -> dict[str, Any]:
        value = data.get(key, {})
        if not isinstance(value, Mapping):
            self.problem(key, f"expected a table [{key}], got {type(value).__name__}")
            return {}
        return dict(value)

    def unknown_keys(self, table: Mapping[str, Any], allowed: tuple[str, ...], where: str) -> None:
        for key in table:
            if key not in allowed:
                self.problem(f"{where}.{key}" if where else key,
                             f"unknown key; expected one of {', '.join(allowed)}")

    def string(self, table: Mapping[str, Any], key: str, where: str, default: str | None) -> str:
        value = table.get(key, default)
        if value is None:
            self.problem(f"{where}.{key}", "missing (required)")
            return ""
        if not isinstance(value, str):
            self.problem(f"{where}.{key}", f"expected a string, got {value!r}")
            return default or ""
        return value

    def number(self, table: Mapping[str, Any], key: str, where: str, default: float | None,
               *, positive: bool = False) -> float:
        value = table.get(key, default)
        full = f"{where}.{key}" if where else key
        if value is None:
            self.problem(full, "missing (required)")
            return math.nan
        if isinstance(value, bool) or not isinstance(value, int | float):
            self.problem(full, f"expected a number, got {value!r}")
            return math.nan
        number = float(value)
        if not math.isfinite(number) or number < 0 or (positive and number == 0):
            need = "> 0" if positive else ">= 0"
            self.problem(full, f"must be a finite number {need}, got {value!r}")
            return math.nan
        return number

    def load(self, data: Mapping[str, Any]) -> InstrumentProfile:
        self.unknown_keys(data, _TOP_KEYS, "")
        inst = self.table(data, "instrument")
        if "instrument" not in data:
            self.problem("instrument", "missing table [instrument]")
        self.unknown_keys(inst, _INSTRUMENT_KEYS, "instrument")

        roles = self.roles(inst)
        resource = self.string(inst, "resource", "instrument", None)
        if resource is not None and resource != "" and resource.strip() != resource:
            self.problem("instrument.resource", f"stray spaces in {resource!r}")
        backend = self.backend(self.string(inst, "backend", "instrument", "@py"))
        timeout_s = self.number(inst, "timeout_s", "instrument", 2.0, positive=True)
        retries = inst.get("retries", 1)
        if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
            self.problem("instrument.retries", f"expected a whole number >= 0, got {retries!r}")
            retries = 1

        commands = self.commands(self.table(data, "commands"), roles)
        accuracy = self.accuracy(self.table(data, "accuracy"), roles)
        limits = self.limits(self.table(data, "limits"), roles)
        scanner = self.table(data, "scanner")
        channels_table = self.table(data, "channels")
        if "scanner" not in roles:
            for key in ("scanner", "channels"):
                if key in data:
                    self.problem(key, f"[{key}] is only for an instrument with role 'scanner'")
        self.unknown_keys(scanner, ("reference_node", "settle_s"), "scanner")
        reference = self.string(scanner, "reference_node", "scanner", "gnd")
        if reference and _NODE.fullmatch(reference) is None:
            self.problem("scanner.reference_node", f"not a node name: {reference!r}")
        settle_s = self.number(scanner, "settle_s", "scanner", 0.0)
        channels = self.channels(channels_table)
        name = self.string(inst, "name", "instrument", "")
        read_termination = self.string(inst, "read_termination", "instrument", "\n")
        write_termination = self.string(inst, "write_termination", "instrument", "\n")

        if self.problems:
            if len(self.problems) == 1:
                raise self.problems[0]
            raise InputErrors(self.problems)
        return InstrumentProfile(
            resource=resource,
            roles=roles,
            name=name,
            backend=backend,
            timeout_s=timeout_s,
            retries=retries,
            read_termination=read_termination,
            write_termination=write_termination,
            commands=commands,
            accuracy=accuracy,
            ac_band=self.ac_band,
            limits=limits,
            channels=channels,
            reference_node=reference,
            settle_s=settle_s,
            path=self.path,
        )

    def roles(self, inst: Mapping[str, Any]) -> tuple[str, ...]:
        value = inst.get("role")
        if value is None:
            self.problem("instrument.role", f"missing (required): one of {', '.join(ROLES)}")
            return ()
        items = [value] if isinstance(value, str) else value
        if not isinstance(items, list) or not items:
            self.problem("instrument.role", f"expected a role or a list of roles, got {value!r}")
            return ()
        roles: list[str] = []
        for item in items:
            if item not in ROLES:
                self.problem("instrument.role",
                             f"unknown role {item!r}; expected one of {', '.join(ROLES)}")
            elif item not in roles:
                roles.append(item)
        return tuple(roles)

    def backend(self, backend: str) -> str:
        if backend.endswith("@sim") and backend != "@sim":
            sim_path = backend[: -len("@sim")]
            if self.path and not os.path.isabs(sim_path):
                sim_path = os.path.join(os.path.dirname(os.path.abspath(self.path)), sim_path)
            return f"{sim_path}@sim"
        allowed = backend in ("@py", "@ivi", "@sim", "")
        if not allowed and not backend.lower().endswith((".so", ".dll", ".dylib")):
            self.problem(
                "instrument.backend",
                f"unknown backend {backend!r}; expected @py, @ivi, @sim, "
                "bench.yaml@sim or the path of a VISA library",
            )
        return backend

    def commands(self, table: Mapping[str, Any], roles: tuple[str, ...]) -> dict[str, str]:
        actions = actions_for(roles)
        out: dict[str, str] = {}
        for action, template in table.items():
            key = f"commands.{action}"
            if action not in actions:
                known = ", ".join(sorted(actions))
                self.problem(key, f"no such action for roles {', '.join(roles) or '?'}; "
                                  f"expected one of {known}")
                continue
            if not isinstance(template, str):
                self.problem(key, f"expected a command string, got {template!r}")
                continue
            trouble = template_problem(actions[action], template)
            if trouble:
                self.problem(key, trouble)
                continue
            out[action] = template
        return out

    def accuracy(self, table: Mapping[str, Any], roles: tuple[str, ...]) -> dict[str, RangeTable]:
        out: dict[str, RangeTable] = {}
        for function, body in table.items():
            where = f"accuracy.{function}"
            if function not in ACCURACY_FUNCTIONS:
                self.problem(where, f"unknown function; expected one of "
                                    f"{', '.join(ACCURACY_FUNCTIONS)}")
                continue
            unit, for_roles = ACCURACY_FUNCTIONS[function]
            if roles and not set(for_roles) & set(roles):
                self.problem(where, f"an instrument with roles {', '.join(roles)} does not "
                                    f"measure {function}")
                continue
            if not isinstance(body, Mapping):
                self.problem(where, "expected a table with 'ranges'")
                continue
            allowed = ("over_range", "ranges") + ((BAND_KEY,) if function == "ac_volts" else ())
            self.unknown_keys(body, allowed, where)
            if BAND_KEY in body and function == "ac_volts":
                self.band(body[BAND_KEY], f"{where}.{BAND_KEY}")
                if "ranges" not in body:
                    continue
            over = self.number(body, "over_range", where, DEFAULT_OVER_RANGE, positive=True)
            if over < 1:
                self.problem(f"{where}.over_range", f"must be >= 1, got {over:g}")
            rows = body.get("ranges")
            if not isinstance(rows, list) or not rows:
                self.problem(f"{where}.ranges", "expected a list of {range = ..., "
                                                "percent_of_reading = ..., percent_of_range = ...}")
                continue
            pairs = []
            before = len(self.problems)
            for i, row in enumerate(rows):
                rkey = f"{where}.ranges[{i}]"
                if not isinstance(row, Mapping):
                    self.problem(rkey, f"expected an inline table, got {row!r}")
                    continue
                self.unknown_keys(row, _SPEC_KEYS, rkey)
                full_scale = self.number(row, "range", rkey, None, positive=True)
                p_reading = self.number(row, "percent_of_reading", rkey, None)
                p_range = self.number(row, "percent_of_range", rkey, 0.0)
                floor = self.number(row, "floor", rkey, 0.0)
                if len(self.problems) == before:
                    pairs.append((full_scale, AccuracySpec(p_reading, p_range, floor)))
            if len(self.problems) > before or over < 1:
                continue
            try:
                out[function] = RangeTable(tuple(pairs), over_range=over, unit=unit)
            except InputError as exc:
                self.problem(f"{where}.ranges", exc.message)
        return out

    def band(self, value: object, key: str) -> None:
        try:
            self.ac_band = FrequencyBand.from_value(value)
        except InputError as exc:
            self.problem(key, exc.message)

    def limits(self, table: Mapping[str, Any], roles: tuple[str, ...]) -> dict[str, float]:
        out: dict[str, float] = {}
        for key in table:
            if key not in LIMIT_KEYS:
                self.problem(f"limits.{key}",
                             f"unknown limit; expected one of {', '.join(LIMIT_KEYS)}")
            elif roles and LIMIT_KEYS[key] not in roles:
                self.problem(f"limits.{key}", f"applies to role {LIMIT_KEYS[key]!r} only")
            else:
                value = self.number(table, key, "limits", None, positive=True)
                if not math.isnan(value):
                    out[key] = value
        return out

    def channels(self, table: Mapping[str, Any]) -> dict[str, str]:
        out: dict[str, str] = {}
        seen: dict[str, str] = {}
        for channel, where in table.items():
            key = f"channels.{channel}"
            if _CHANNEL_ID.fullmatch(channel) is None:
                self.problem(key, "a channel id is letters, digits and ! . _ - (e.g. 101)")
                continue
            if not isinstance(where, str):
                self.problem(key, f"expected a node name such as \"b\" or \"c/e\", got {where!r}")
                continue
            nodes = where.split("/")
            if len(nodes) > 2 or not all(_NODE.fullmatch(n) for n in nodes):
                self.problem(key, f"expected a node name such as \"b\" or \"c/e\", got {where!r}")
                continue
            if where in seen:
                self.problem(key, f"{where!r} is already read by channel {seen[where]}")
                continue
            seen[where] = channel
            out[channel] = where
        return out
