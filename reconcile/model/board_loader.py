"""Read a board file (TOML, docs/formats.md §2) into a frozen :class:`Board`.

The loader checks the whole file and reports every problem at once, as
:class:`reconcile.errors.InputErrors`: each problem names the file, the key
(``resistors.R1.ohms``) and, where it can be found in the text, the line.

Rules beyond the value strings of :mod:`reconcile.values`:

- refs (``R1``, ``C1``, ``VCC``, ``Q1``) are unique across the whole board and contain
  no ``.`` or ``/``; node names are strings (an integer is taken as its decimal text),
  ``"0"`` is refused with the hint to write ``gnd`` (contract version 2, §6.1), and a
  node name contains no ``/`` (readings use ``a/b``);
- every part joins two different nodes; a transistor's base or collector may not sit on
  its emitter node (collector on base, a diode-connected transistor, is fine);
- a node needs a DC path to gnd: resistors, supplies (node to gnd) and the terminals of
  a transistor conduct at DC, capacitors do not. Exception: ``signal.input`` and
  ``signal.output`` may connect through capacitors only (the generator and load exist
  only in small signal); such a node has no DC voltage;
- at least one supply; no supply on gnd; at most one supply per node;
- ``[signal]`` is optional, but when present names both ``input`` and ``output``, two
  different nodes that are neither gnd nor a supply node; small-signal ``[spec]``
  targets need it.
"""

from __future__ import annotations

import difflib
import math
import os
from collections.abc import Iterable
from typing import Any

from reconcile.model.board import (
    GND,
    Bench,
    Board,
    Capacitor,
    Device,
    DeviceParam,
    Resistor,
    Signal,
    Spec,
    SpecTarget,
    Supply,
    Transistor,
)
from reconcile.errors import InputError, InputErrors, warn_input
from reconcile.model.quantities import REGISTRY
from reconcile.model.text_files import read_text
from reconcile.model.toml_lines import Key, TomlLines, parse_toml
from reconcile.model.values import parse_value

__all__ = ["board_from_text", "load_board"]

_PART_TABLES = ("supplies", "resistors", "capacitors", "transistors")
_TOP_KEYS = ("title", "conditions", *_PART_TABLES, "devices", "signal", "bench", "spec")
_PART_NOUN = {
    "supplies": "a supply",
    "resistors": "a resistor",
    "capacitors": "a capacitor",
    "transistors": "a transistor",
    "devices": "a device",
}
_PART_KEYS: dict[str, tuple[str, ...]] = {
    "supplies": ("node", "volts", "tolerance"),
    "resistors": ("nodes", "ohms", "tolerance", "rating", "trim"),
    "capacitors": ("nodes", "farads", "tolerance", "trim"),
    "transistors": ("polarity", "c", "b", "e", "device"),
    "devices": ("IS", "beta", "beta_r", "VA", "n", "is_temp_exponent", "bandgap", "ft", "c_mu"),
}
_REQUIRED: dict[str, tuple[str, ...]] = {
    "supplies": ("node", "volts"),
    "resistors": ("nodes", "ohms"),
    "capacitors": ("nodes", "farads"),
    "transistors": ("polarity", "c", "b", "e", "device"),
    "devices": ("IS", "beta"),
}
# device parameter -> (value kind, what it is, may it be infinite)
_DEVICE_PARAMS: dict[str, tuple[str, str, bool]] = {
    "IS": ("amps", "the saturation current", False),
    "beta": ("plain", "the forward current gain", False),
    "beta_r": ("plain", "the reverse current gain", False),
    "VA": ("volts", "the Early voltage", True),
    "n": ("plain", "the emission coefficient", False),
    "ft": ("hertz", "the transition frequency", True),
    "c_mu": ("farads", "the base-collector capacitance", False),
}
#: [spec] target -> value kind, from the quantity registry
_SPEC_TARGETS = {q.name: q.value_kind for q in REGISTRY.values() if q.spec_target}
_SPEC_CORNERS = {"low_corner": "max", "high_corner": "min"}
_SPEC_KEYS = (*_SPEC_TARGETS, "min_vce", *_SPEC_CORNERS)
_SIGNAL_KEYS = ("input", "output", "source_ohms", "load_ohms", "frequency")
_DEFAULT_TOLERANCE = {"supplies": 0.0, "resistors": 0.05, "capacitors": 0.20}
_SPEC_DEFAULT_TOLERANCE = 0.05


# ------------------------------------------------------------------------- helpers
def _suggest(word: str, choices: Iterable[str]) -> str:
    """`` (did you mean 'x'?)`` or ``""``."""
    choices = list(choices)
    by_lower = {c.lower(): c for c in choices}
    if word.lower() in by_lower:
        return f" (did you mean {by_lower[word.lower()]!r}?)"
    close = difflib.get_close_matches(word.lower(), list(by_lower), n=1, cutoff=0.6)
    return f" (did you mean {by_lower[close[0]]!r}?)" if close else ""


def _listing(names: Iterable[str]) -> str:
    names = list(names)
    return ", ".join(names) if names else "none"


#: Magnitudes a finite, nonzero board value may have, by value kind, SI units
#: (docs/formats.md §2.4): far outside any discrete board, so that only nonsense (an
#: overflowing 1e308, a prefix slip by many decades) is refused before the engine sees it.
BOARD_LIMITS: dict[str, tuple[float, float]] = {
    "ohms": (1e-6, 1e15),
    "farads": (1e-18, 1e3),
    "volts": (1e-12, 1e5),
    "amps": (1e-30, 1e3),
    "watts": (1e-9, 1e6),
    "hertz": (1e-6, 1e12),
    "seconds": (1e-12, 1e6),
    "temperature": (1.0, 2000.0),
    "plain": (1e-30, 1e60),  # wide: a many-stage cascade's gain spec is a plain number
}


class _Checker:
    """Collects problems, each located by key path and line."""

    def __init__(self, path: str, text: str) -> None:
        self.path = path
        self.lines = TomlLines(text)
        self.errors: list[InputError] = []
        self.warnings: list[str] = []

    def error(self, key: Key, message: str) -> None:
        self.errors.append(
            InputError(message, path=self.path, key=".".join(key), line=self.lines.find(key))
        )

    def warn(self, key: Key, message: str) -> None:
        """A problem that is not an error: located like one, kept on ``Board.warnings``."""
        where = InputError(message, path=self.path, key=".".join(key), line=self.lines.find(key))
        self.warnings.append(str(where))

    def value(self, key: Key, raw: Any, kind: str) -> float | None:
        try:
            number = parse_value(raw, kind)
        except InputError as err:
            self.errors.append(
                err.located(path=self.path, key=".".join(key), line=self.lines.find(key))
            )
            return None
        low, high = BOARD_LIMITS.get(kind, (0.0, math.inf))
        if math.isfinite(number) and number != 0.0 and not low <= abs(number) <= high:
            self.error(key, f"{'.'.join(key)} = {raw!r} is beyond the physical limits of a "
                       f"board file ({low:g} to {high:g} in SI; docs/formats.md §2.4)")
            return None
        return number

    def table(self, key: Key, raw: Any, what: str) -> dict[str, Any] | None:
        if isinstance(raw, dict):
            return raw
        self.error(key, f"{'.'.join(key)} must be a table ({what}), found {raw!r}")
        return None

    def keys(self, key: Key, table: dict[str, Any], allowed: Iterable[str], noun: str) -> None:
        allowed = tuple(allowed)
        for name in table:
            if name not in allowed:
                self.error(
                    key + (name,),
                    f"unknown key {name!r}{_suggest(name, allowed)}; {noun} takes "
                    f"{', '.join(allowed)}",
                )

    def required(self, key: Key, table: dict[str, Any], names: Iterable[str], noun: str) -> bool:
        ok = True
        for name in names:
            if name not in table:
                self.error(key + (name,), f"missing key {name!r}: {noun} needs {name} = ...")
                ok = False
        return ok

    def positive(
        self, key: Key, raw: Any, kind: str, what: str, *, allow_inf: bool = False
    ) -> float | None:
        number = self.value(key, raw, kind)
        if number is None:
            return None
        if number <= 0.0:
            self.error(key, f"{what} must be greater than zero, found {raw!r}")
            return None
        if math.isinf(number) and not allow_inf:
            self.error(key, f"{what} must be finite, found {raw!r}")
            return None
        return number

    def tolerance(self, key: Key, table: dict[str, Any], default: float) -> float | None:
        if "tolerance" not in table:
            return default
        raw = table["tolerance"]
        number = self.value(key + ("tolerance",), raw, "tolerance")
        if number is None:
            return None
        if not 0.0 <= number < 1.0:
            self.error(
                key + ("tolerance",),
                f"tolerance {raw!r} is out of range: give 0 <= tolerance < 100% "
                "(a bare number is a fraction: 0.05 is 5%)",
            )
            return None
        return number

    def node(self, key: Key, raw: Any) -> str | None:
        if isinstance(raw, int) and not isinstance(raw, bool):
            raw = str(raw)
        if not isinstance(raw, str) or not raw.strip():
            self.error(key, f"a node name is a string such as \"b\" or \"gnd\", found {raw!r}")
            return None
        name = raw.strip()
        if "/" in name:
            self.error(key, f"node name {name!r} contains '/', which readings use for a/b")
            return None
        if name == "0":
            self.error(key, "node \"0\" is not ground here: write \"gnd\" for the 0 V reference")
            return None
        return name


# ------------------------------------------------------------------------- loader
def load_board(path: str | os.PathLike[str]) -> Board:
    """Read and check a board file.

    Parameters
    ----------
    path
        The board file (TOML, UTF-8; a byte-order mark is allowed).

    Returns
    -------
    Board
        Every value in SI units, defaults filled in, ``source_path`` and
        ``source_text`` set.

    Raises
    ------
    InputError
        The file cannot be read.
    InputErrors
        The file has one or more problems; all of them are listed.
    """
    name, text = read_text(path, "board file")
    return board_from_text(text, path=name)


def board_from_text(text: str, path: str = "<text>") -> Board:
    """Check a board file's text and build the :class:`Board`.

    Parameters
    ----------
    text
        The TOML text.
    path
        Shown in messages and stored as ``source_path``.

    Returns
    -------
    Board
        The board, in SI units (``temperature`` in kelvin).

    Raises
    ------
    InputErrors
        Every problem found, in file order: a TOML syntax error alone (with its line
        and column), or all the checks that failed.
    """
    text = text.removeprefix("\ufeff")
    try:
        data = parse_toml(text, path, syntax="TOML syntax error")
    except InputError as err:
        raise InputErrors([err]) from err
    check = _Checker(path, text)
    board = _build(data, check, path, text)
    if check.errors:
        order = sorted(
            range(len(check.errors)),
            key=lambda i: (check.errors[i].line is None, check.errors[i].line or 0, i),
        )
        raise InputErrors([check.errors[i] for i in order])
    for message in check.warnings:
        warn_input(message)
    return board


def _build(data: dict[str, Any], check: _Checker, path: str, text: str) -> Board:
    for name in data:
        if name not in _TOP_KEYS:
            check.error(
                (name,),
                f"unknown top-level key {name!r}{_suggest(name, _TOP_KEYS)}; a board file "
                f"takes {', '.join(_TOP_KEYS)}",
            )
    title = data.get("title", "")
    if not isinstance(title, str):
        check.error(("title",), f"title must be a string, found {title!r}")
        title = ""

    temperature = _conditions(data, check)
    topology: list[tuple[str, str, tuple[str, ...]]] = []  # (table, ref, nodes) for DC checks
    parts: dict[str, dict[str, Any]] = {t: {} for t in _PART_TABLES}
    refs: dict[str, str] = {}
    for table in _PART_TABLES:
        raw_table = data.get(table, {})
        if check.table((table,), raw_table, f"of parts, like [{table}.REF]") is None:
            continue
        for ref, raw in raw_table.items():
            key = (table, ref)
            if not _check_ref(check, key, ref, refs, table):
                continue
            body = check.table(key, raw, f"write [{table}.{ref}] with its keys under it")
            if body is None:
                continue
            check.keys(key, body, _PART_KEYS[table], _PART_NOUN[table])
            complete = check.required(key, body, _REQUIRED[table], _PART_NOUN[table])
            part = _PART_BUILDERS[table](check, key, ref, body, topology, complete)
            if part is not None:
                parts[table][ref] = part

    devices, declared = _devices(data, check)
    raw_transistors = data.get("transistors")
    for ref, body in raw_transistors.items() if isinstance(raw_transistors, dict) else ():
        device = body.get("device") if isinstance(body, dict) else None
        if isinstance(device, str) and device.strip() and device.strip() not in declared:
            check.error(
                ("transistors", ref, "device"),
                f"unknown device {device!r}{_suggest(device, declared)}; add a "
                f"[devices.{device}] table or use one of: {_listing(declared)}",
            )
    supply_nodes = _check_supplies(check, topology, bool(data.get("supplies")))
    signal = _signal(data, check, topology, supply_nodes)
    _check_dc_paths(check, topology, signal)
    bench = _bench(data, check, path)
    spec = _spec(data, check)
    if not check.errors:
        _warn_connections(check, topology, signal)
        _warn_implausible(check, data, parts, devices, temperature)
    return Board(
        title=title,
        temperature=temperature,
        supplies=parts["supplies"],
        resistors=parts["resistors"],
        capacitors=parts["capacitors"],
        transistors=parts["transistors"],
        devices=devices,
        signal=signal,
        bench=bench,
        spec=spec,
        source_path=path,
        source_text=text,
        warnings=tuple(check.warnings),
    )


def _check_ref(check: _Checker, key: Key, ref: str, refs: dict[str, str], table: str) -> bool:
    if "." in ref or "/" in ref or not ref.strip() or ref != ref.strip():
        check.error(key, f"ref {ref!r} must be a plain name such as R1 (no '.', '/' or spaces)")
        return False
    if ref in refs:
        check.error(
            key,
            f"{ref} is used in both [{refs[ref]}] and [{table}]: refs are unique across "
            "the whole board; rename one",
        )
        return False
    refs[ref] = table
    return True


def _conditions(data: dict[str, Any], check: _Checker) -> float:
    default = parse_value("25 C", "temperature")
    if "conditions" not in data:
        return default
    table = check.table(("conditions",), data["conditions"], "with temperature = ...")
    if table is None:
        return default
    check.keys(("conditions",), table, ("temperature",), "[conditions]")
    if "temperature" not in table:
        return default
    value = check.value(("conditions", "temperature"), table["temperature"], "temperature")
    return default if value is None else value


def _two_nodes(
    check: _Checker, key: Key, body: dict[str, Any], ref: str
) -> tuple[str, str] | None:
    raw = body.get("nodes")
    if not isinstance(raw, list) or len(raw) != 2:
        check.error(
            key + ("nodes",),
            f"nodes must be a list of two node names, like nodes = [\"vcc\", \"b\"], "
            f"found {raw!r}",
        )
        return None
    first = check.node(key + ("nodes",), raw[0])
    second = check.node(key + ("nodes",), raw[1])
    if first is None or second is None:
        return None
    if first == second:
        check.error(
            key + ("nodes",),
            f"{ref} is a part on one node only ({first!r} twice): a part joins two "
            "different nodes",
        )
        return None
    return first, second


def _trim(check: _Checker, key: Key, body: dict[str, Any]) -> bool | None:
    raw = body.get("trim", True)
    if not isinstance(raw, bool):
        check.error(key + ("trim",), f"trim is true or false, found {raw!r}")
        return None
    return raw


def _resistor(
    check: _Checker, key: Key, ref: str, body: dict[str, Any], topology: list, complete: bool
) -> Resistor | None:
    nodes = _two_nodes(check, key, body, ref) if "nodes" in body else None
    if nodes:
        topology.append(("resistors", ref, nodes))
    ohms = None
    if "ohms" in body:
        ohms = check.value(key + ("ohms",), body["ohms"], "ohms")
        if ohms is not None and ohms <= 0.0:
            check.error(
                key + ("ohms",),
                f"zero ohms is not a resistor: use a wire (give both ends one node name "
                f"and drop {ref})" if ohms == 0.0 else f"negative resistance {body['ohms']!r}",
            )
            ohms = None
        elif ohms is not None and math.isinf(ohms):
            check.error(
                key + ("ohms",), f"infinite resistance: leave {ref} out of the board instead"
            )
            ohms = None
    tolerance = check.tolerance(key, body, _DEFAULT_TOLERANCE["resistors"])
    rating = None
    if "rating" in body:
        rating = check.positive(key + ("rating",), body["rating"], "watts", "a power rating")
        if rating is None:
            complete = False
    trim = _trim(check, key, body)
    if not complete or None in (nodes, ohms, tolerance, trim):
        return None
    return Resistor(ref, nodes, ohms, tolerance, rating, trim)


def _capacitor(
    check: _Checker, key: Key, ref: str, body: dict[str, Any], topology: list, complete: bool
) -> Capacitor | None:
    nodes = _two_nodes(check, key, body, ref) if "nodes" in body else None
    if nodes:
        topology.append(("capacitors", ref, nodes))
    farads = None
    if "farads" in body:
        farads = check.positive(key + ("farads",), body["farads"], "farads", "capacitance")
    tolerance = check.tolerance(key, body, _DEFAULT_TOLERANCE["capacitors"])
    trim = _trim(check, key, body)
    if not complete or None in (nodes, farads, tolerance, trim):
        return None
    return Capacitor(ref, nodes, farads, tolerance, trim)


def _supply(
    check: _Checker, key: Key, ref: str, body: dict[str, Any], topology: list, complete: bool
) -> Supply | None:
    node = check.node(key + ("node",), body["node"]) if "node" in body else None
    if node == GND:
        check.error(
            key + ("node",),
            f"supply {ref} sits on gnd: a supply runs from gnd to its node; name another node",
        )
        node = None
    if node:
        topology.append(("supplies", ref, (node, GND)))
    volts = None
    if "volts" in body:
        volts = check.value(key + ("volts",), body["volts"], "volts")
        if volts is not None and not math.isfinite(volts):
            check.error(key + ("volts",), f"supply volts must be finite, found {body['volts']!r}")
            volts = None
    tolerance = check.tolerance(key, body, _DEFAULT_TOLERANCE["supplies"])
    if not complete or None in (node, volts, tolerance):
        return None
    return Supply(ref, node, volts, tolerance)


def _transistor(
    check: _Checker, key: Key, ref: str, body: dict[str, Any], topology: list, complete: bool
) -> Transistor | None:
    polarity = body.get("polarity")
    if "polarity" in body:
        if isinstance(polarity, str) and polarity.strip().lower() in ("npn", "pnp"):
            polarity = polarity.strip().lower()
        else:
            check.error(key + ("polarity",), f"polarity is \"npn\" or \"pnp\", found {polarity!r}")
            polarity = None
    terminals = {t: check.node(key + (t,), body[t]) if t in body else None for t in "cbe"}
    c, b, e = terminals["c"], terminals["b"], terminals["e"]
    if e is not None and b == e:
        check.error(key + ("b",), f"{ref} has base and emitter on the same node {e!r}")
    if e is not None and c == e:
        check.error(key + ("c",), f"{ref} has collector and emitter on the same node {e!r}")
    if None in (c, b, e):
        complete = False
    else:
        topology.append(("transistors", ref, (c, b, e)))
        complete = complete and b != e and c != e
    device = body.get("device")
    if "device" in body and (not isinstance(device, str) or not device.strip()):
        check.error(key + ("device",), f"device names a [devices.NAME] table, found {device!r}")
        device = None
    if not complete or None in (polarity, device):
        return None
    return Transistor(ref, polarity, c, b, e, device.strip())


_PART_BUILDERS = {
    "supplies": _supply,
    "resistors": _resistor,
    "capacitors": _capacitor,
    "transistors": _transistor,
}


def _device_param(check: _Checker, key: Key, raw: Any, name: str) -> DeviceParam | None:
    kind, what, allow_inf = _DEVICE_PARAMS[name]
    if isinstance(raw, dict):
        check.keys(key, raw, ("value", "low", "high"), f"device parameter {name}")
        if "value" not in raw:
            check.error(key + ("value",), f"{name} needs a value: {name} = {{ value = ..., ... }}")
            return None
        fields = {f: raw[f] for f in ("value", "low", "high") if f in raw}
    else:
        fields = {"value": raw}
    numbers: dict[str, float] = {}
    for field_name, field_raw in fields.items():
        field_key = key + (field_name,) if isinstance(raw, dict) else key
        number = check.positive(field_key, field_raw, kind, f"{name} ({what})", allow_inf=allow_inf)
        if number is None:
            return None
        numbers[field_name] = number
    value, low, high = numbers["value"], numbers.get("low"), numbers.get("high")
    if low is not None and low > value:
        check.error(
            key + ("low",), f"{name}: low {fields['low']!r} is above value {fields['value']!r}"
        )
        return None
    if high is not None and value > high:
        check.error(
            key + ("high",), f"{name}: value {fields['value']!r} is above high {fields['high']!r}"
        )
        return None
    return DeviceParam(value, low, high)


def _devices(data: dict[str, Any], check: _Checker) -> tuple[dict[str, Device], list[str]]:
    devices: dict[str, Device] = {}
    raw_devices = data.get("devices", {})
    if check.table(("devices",), raw_devices, "of device types, like [devices.NAME]") is None:
        return devices, []
    declared = list(raw_devices)
    for name, raw in raw_devices.items():
        key = ("devices", name)
        body = check.table(key, raw, f"write [devices.{name}] with IS, beta ... under it")
        if body is None:
            continue
        check.keys(key, body, _PART_KEYS["devices"], "a device")
        complete = check.required(key, body, _REQUIRED["devices"], "a device")
        params: dict[str, Any] = {}
        for param in _DEVICE_PARAMS:
            if param in body:
                params[param] = _device_param(check, key + (param,), body[param], param)
                complete = complete and params[param] is not None
        if "is_temp_exponent" in body:
            params["is_temp_exponent"] = check.value(
                key + ("is_temp_exponent",), body["is_temp_exponent"], "plain"
            )
            if params["is_temp_exponent"] is not None and not math.isfinite(
                params["is_temp_exponent"]
            ):
                check.error(key + ("is_temp_exponent",), "is_temp_exponent must be finite")
                params["is_temp_exponent"] = None
            complete = complete and params["is_temp_exponent"] is not None
        if "bandgap" in body:
            raw_gap = body["bandgap"]
            if isinstance(raw_gap, str) and raw_gap.rstrip().endswith("eV"):
                raw_gap = raw_gap.rstrip()[:-2]
            params["bandgap"] = check.positive(
                key + ("bandgap",), raw_gap, "plain", "bandgap (eV)"
            )
            complete = complete and params["bandgap"] is not None
        if complete:
            devices[name] = Device(name=name, **params)
    return devices, declared


def _check_supplies(check: _Checker, topology: list, declared: bool) -> dict[str, str]:
    """Report a board with no supply, or two supplies on one node; node -> supply ref."""
    if not declared:
        check.error(
            ("supplies",),
            "the board has no supply: add one, e.g. [supplies.VCC] with node = \"vcc\" "
            "and volts = \"5\"",
        )
    on_node: dict[str, str] = {}
    for table, ref, (node, _) in (t for t in topology if t[0] == "supplies"):
        if node in on_node:
            check.error(
                (table, ref, "node"),
                f"supplies {on_node[node]} and {ref} both drive node {node!r}: "
                "one supply per node",
            )
        else:
            on_node[node] = ref
    return on_node


def _signal(
    data: dict[str, Any], check: _Checker, topology: list, supply_nodes: dict[str, str]
) -> Signal:
    if "signal" not in data:
        return Signal()
    table = check.table(("signal",), data["signal"], "with input, output ...")
    if table is None:
        return Signal()
    check.keys(("signal",), table, _SIGNAL_KEYS, "[signal]")
    check.required(("signal",), table, ("input", "output"), "[signal]")
    known = {n for _, _, nodes in topology for n in nodes} - {GND}
    ends: dict[str, str | None] = {}
    for end in ("input", "output"):
        node = check.node(("signal", end), table[end]) if end in table else None
        if node is None:
            ends[end] = None
        elif node == GND:
            check.error(("signal", end), f"signal.{end} is gnd: name the node the probe is on")
            ends[end] = None
        elif node in supply_nodes:
            check.error(
                ("signal", end),
                f"signal.{end} is {node!r}, the node of supply {supply_nodes[node]} "
                "(an AC ground): name a signal node",
            )
            ends[end] = None
        elif node not in known:
            check.error(
                ("signal", end),
                f"signal.{end} names unknown node {node!r}{_suggest(node, known)}; the "
                f"board's nodes are {_listing(sorted(known))}",
            )
            ends[end] = None
        else:
            ends[end] = node
    if ends["input"] is not None and ends["input"] == ends["output"]:
        check.error(("signal", "output"), "signal.input and signal.output are the same node")
    values = {}
    for name, default, allow_inf in (
        ("source_ohms", 50.0, False),
        ("load_ohms", math.inf, True),
        ("frequency", 1e3, False),
    ):
        kind = "hertz" if name == "frequency" else "ohms"
        values[name] = default
        if name in table:
            number = check.positive(("signal", name), table[name], kind, name, allow_inf=allow_inf)
            values[name] = default if number is None else number
    return Signal(input=ends["input"], output=ends["output"], **values)


def _check_dc_paths(check: _Checker, topology: list, signal: Signal) -> None:
    """Every node needs a DC path to gnd (resistors, supplies, transistors conduct)."""
    parent: dict[str, str] = {}

    def root(node: str) -> str:
        parent.setdefault(node, node)
        while parent[node] != node:
            parent[node] = parent[parent[node]]
            node = parent[node]
        return node

    order: dict[str, None] = {}
    capacitors_at: dict[str, list[str]] = {}
    dc_parts: list[tuple[str, str, tuple[str, ...]]] = []
    for table, ref, nodes in topology:
        for node in nodes:
            order.setdefault(node, None)
        if table == "capacitors":
            for node in nodes:
                capacitors_at.setdefault(node, []).append(ref)
            continue
        dc_parts.append((table, ref, nodes))
        for node in nodes[1:]:
            parent[root(node)] = root(nodes[0])
    exempt = {signal.input, signal.output}
    groups: dict[str, list[str]] = {}
    for node in order:
        if node == GND:
            continue
        if node not in parent:
            if node not in exempt:
                caps = capacitors_at.get(node, [])
                check.error(
                    ("capacitors", caps[0], "nodes"),
                    f"node {node!r} has no DC path: it connects only through capacitors "
                    f"{', '.join(caps)}; add a bias resistor to it",
                )
            continue
        groups.setdefault(root(node), []).append(node)
    ground = root(GND) if GND in parent else None
    for group_root, nodes in groups.items():
        if group_root == ground:
            continue
        members = [(t, r) for t, r, n in dc_parts if root(n[0]) == group_root]
        hint = ""
        if any(n.lower() in ("ground", "gnd", "0v") for n in nodes):
            hint = _GND_HINT
        plural = len(nodes) > 1
        check.error(
            members[0],
            f"node{'s' if plural else ''} {', '.join(repr(n) for n in nodes)} "
            f"{'have' if plural else 'has'} no DC path to gnd or a supply: through "
            f"{', '.join(r for _, r in members)} {'they reach' if plural else 'it reaches'} "
            f"neither (capacitors do not conduct at DC){hint}",
        )


# ------------------------------------------------------------------------- warnings
_GND_HINT = "; the reference node is spelled 'gnd'"
_GROUND_LOOKALIKES = ("ground", "gnd", "grnd", "gound", "groud", "0v", "earth", "agnd", "gnd0")
_TERMINAL = {"c": "the collector of", "b": "the base of", "e": "the emitter of"}


def _looks_like_ground(node: str) -> bool:
    word = node.strip().lower().replace("_", "").replace("-", "").replace(" ", "")
    if node == GND:
        return False
    return word in _GROUND_LOOKALIKES or bool(
        difflib.get_close_matches(word, ["ground"], n=1, cutoff=0.8))


def _warn_connections(check: _Checker, topology: list, signal: Signal) -> None:
    """A node that only one part touches (a mistyped node name, a part to nowhere, a
    floating collector), and a node whose name looks like a misspelled gnd."""
    touches: dict[str, list[tuple[str, str, str]]] = {}  # node -> (table, ref, terminal)
    for table, ref, nodes in topology:
        if table == "supplies":
            ends = [("node", nodes[0])]
        elif table == "transistors":
            ends = list(zip("cbe", nodes, strict=True))
        else:
            ends = [("nodes", node) for node in nodes]
        for terminal, node in ends:
            if node != GND:
                touches.setdefault(node, []).append((table, ref, terminal))
    probed = {signal.input, signal.output}  # the generator and the load connect there
    for node, found in touches.items():
        table, ref, terminal = found[0]
        if _looks_like_ground(node):
            check.warn(
                (table, ref, terminal),
                f"node {node!r} looks like ground, but as written it is an ordinary node"
                f"{_GND_HINT}")
        if len({r for _, r, _ in found}) == 1 and node not in probed:
            what = ", ".join(
                f"{_TERMINAL[t]} {r}" if tb == "transistors"
                else (f"supply {r}" if tb == "supplies" else f"one end of {r}")
                for tb, r, t in found)
            check.warn(
                (table, ref, terminal),
                f"node {node!r} connects only to {what}: a mistyped node name, or a part "
                "left unconnected?")


# (low, high) of what a discrete small-signal board uses, in SI units (common practice)
PLAUSIBLE = {
    "ohms": (0.1, 100e6),
    "farads": (1e-12, 0.1),
    "volts": (0.1, 100.0),
    "temperature": (200.0, 450.0),
    "IS": (1e-18, 1e-9),
    "beta": (5.0, 2000.0),
}


def _warn_implausible(
    check: _Checker, data: dict[str, Any], parts: dict[str, dict[str, Any]],
    devices: dict[str, Device], temperature: float,
) -> None:
    """Values that parse but lie far outside what a discrete board uses."""

    def warn(key: Key, raw: Any, value: float, kind: str, noun: str, unit: str) -> None:
        low, high = PLAUSIBLE[kind]
        if low <= abs(value) <= high:
            return
        hint = ""
        text = str(raw).strip()
        if kind == "ohms" and abs(value) < low and text.endswith("m"):
            hint = f"; 'm' is milli: for megohms write {text[:-1] + 'M'!r}"
        elif kind == "temperature" and value < low and text.upper().endswith("K"):
            hint = f"; for Celsius write {text[:-1].strip() + ' C'!r}"
        check.warn(key, f"{noun} {text!r} ({value:g} {unit}) is far outside what a "
                        f"discrete board uses ({low:g} to {high:g} {unit}){hint}")

    def raw_of(*key: str) -> Any:
        node: Any = data
        for part in key:
            node = node[part]
        return node

    for ref, r in parts["resistors"].items():
        key = ("resistors", ref, "ohms")
        warn(key, raw_of(*key), r.ohms, "ohms", f"resistance of {ref}", "ohm")
    for ref, c in parts["capacitors"].items():
        key = ("capacitors", ref, "farads")
        warn(key, raw_of(*key), c.farads, "farads", f"capacitance of {ref}", "F")
    for ref, v in parts["supplies"].items():
        key = ("supplies", ref, "volts")
        warn(key, raw_of(*key), v.volts, "volts", f"supply {ref}", "V")
    conditions = data.get("conditions")
    if isinstance(conditions, dict) and "temperature" in conditions:
        key = ("conditions", "temperature")
        warn(key, conditions["temperature"], temperature, "temperature", "temperature", "K")
    for name, device in devices.items():
        for param, unit in (("IS", "A"), ("beta", "")):
            raw = raw_of("devices", name, param)
            if isinstance(raw, dict):
                raw = raw.get("value", raw)
            warn(("devices", name, param), raw, getattr(device, param).value, param,
                 f"{param} of device {name}", unit)


def _bench(data: dict[str, Any], check: _Checker, path: str) -> Bench:
    if "bench" not in data:
        return Bench()
    table = check.table(("bench",), data["bench"], "with voltmeter_ohms = ...")
    if table is None:
        return Bench()
    check.keys(("bench",), table, ("voltmeter_ohms", "ammeter_ohms", "probe", "instruments"),
               "[bench]")
    fields: dict[str, Any] = {}
    if "instruments" in table:
        fields["instruments"] = _instrument_files(check, table["instruments"], path)
    if "voltmeter_ohms" in table:
        number = check.positive(
            ("bench", "voltmeter_ohms"), table["voltmeter_ohms"], "ohms", "voltmeter_ohms",
            allow_inf=True,
        )
        if number is not None:
            fields["voltmeter_ohms"] = number
    if "ammeter_ohms" in table:
        number = check.value(("bench", "ammeter_ohms"), table["ammeter_ohms"], "ohms")
        if number is not None and not 0.0 <= number < math.inf:
            check.error(("bench", "ammeter_ohms"),
                        f"ammeter_ohms must be 0 (an ideal ammeter) or a finite burden in "
                        f"ohms, found {table['ammeter_ohms']!r}")
        elif number is not None:
            fields["ammeter_ohms"] = number
    if "probe" in table:
        fields.update(_probe(check, table["probe"]))
    return Bench(**fields)


def _instrument_files(check: _Checker, raw: Any, path: str) -> tuple[str, ...]:
    """``instruments = ["dmm.toml", ...]`` (docs/formats.md §6.5): relative paths are
    taken against the board file's folder (a board not read from a file: as written)."""
    key = ("bench", "instruments")
    items = [raw] if isinstance(raw, str) else raw
    if not isinstance(items, list) or not all(
            isinstance(i, str) and i.strip() and i.isprintable() for i in items):
        check.error(key, 'bench.instruments is a list of instrument file paths, like '
                         '["instruments/bench-dmm.toml"]')
        return ()
    folder = os.path.dirname(os.path.abspath(path)) if os.path.isfile(path) else ""
    return tuple(os.path.normpath(os.path.join(folder, i.strip())) if folder else i.strip()
                 for i in items)


def _probe(check: _Checker, raw: Any) -> dict[str, float]:
    """``probe = { ohms = "10M", farads = "12p" }`` (docs/formats.md §6.3)."""
    key = ("bench", "probe")
    probe = check.table(key, raw, 'like { ohms = "10M", farads = "12p" }')
    if probe is None:
        return {}
    check.keys(key, probe, ("ohms", "farads"), "bench.probe")
    if not probe:
        check.error(key, 'bench.probe needs ohms and/or farads, like { ohms = "10M", farads = "12p" }')
    out: dict[str, float] = {}
    if "ohms" in probe:
        number = check.positive(key + ("ohms",), probe["ohms"], "ohms", "bench.probe.ohms",
                                allow_inf=True)
        if number is not None:
            out["probe_ohms"] = number
    if "farads" in probe:
        number = check.value(key + ("farads",), probe["farads"], "farads")
        if number is not None and not 0.0 <= number < math.inf:
            check.error(key + ("farads",),
                        f"bench.probe.farads must be >= 0 and finite, found {probe['farads']!r}")
        elif number is not None:
            out["probe_farads"] = number
    return out


def _spec_corners(data: dict[str, Any], table: dict[str, Any], check: _Checker) -> dict:
    """``low_corner = { max = "20" }``, ``high_corner = { min = "100k" }`` (Hz, §6.3)."""
    out: dict[str, float] = {}
    for name, bound in _SPEC_CORNERS.items():
        if name not in table:
            continue
        key = ("spec", name)
        if "signal" not in data:
            check.error(key, f"spec.{name} is a small-signal target and needs a [signal] table")
        raw = table[name]
        if not isinstance(raw, dict) or set(raw) != {bound}:
            check.error(key, f'spec.{name} is written {name} = {{ {bound} = "..." }} (Hz), '
                             f"found {raw!r}")
            continue
        value = check.positive(key + (bound,), raw[bound], "hertz", f"spec.{name}.{bound}")
        if value is not None:
            out[f"{name}_{bound}"] = value
    return out


def _spec(data: dict[str, Any], check: _Checker) -> Spec:
    if "spec" not in data:
        return Spec()
    table = check.table(("spec",), data["spec"], "of targets")
    if table is None:
        return Spec()
    check.keys(("spec",), table, _SPEC_KEYS, "[spec]")
    targets: dict[str, SpecTarget] = {}
    for name, kind in _SPEC_TARGETS.items():
        if name not in table:
            continue
        key = ("spec", name)
        if "signal" not in data:
            check.error(key, f"spec.{name} is a small-signal target and needs a [signal] table")
        raw = table[name]
        if isinstance(raw, dict):
            check.keys(key, raw, ("value", "tolerance"), f"spec.{name}")
            if "value" not in raw:
                check.error(key + ("value",), f"spec.{name} needs value = ...")
                continue
            value_key, raw_value = key + ("value",), raw["value"]
            tolerance = check.tolerance(key, raw, _SPEC_DEFAULT_TOLERANCE)
        else:
            value_key, raw_value, tolerance = key, raw, _SPEC_DEFAULT_TOLERANCE
        value = check.positive(value_key, raw_value, kind, f"spec.{name}")
        if value is not None and tolerance is not None:
            targets[name] = SpecTarget(value, tolerance)
    min_vce = None
    if "min_vce" in table:
        min_vce = check.value(("spec", "min_vce"), table["min_vce"], "volts")
        if min_vce is not None and not (0.0 <= min_vce < math.inf):
            check.error(
                ("spec", "min_vce"),
                f"min_vce is a headroom magnitude in volts (also for pnp), >= 0 and finite; "
                f"found {table['min_vce']!r}",
            )
            min_vce = None
    return Spec(targets=targets, min_vce=min_vce, **_spec_corners(data, table, check))
