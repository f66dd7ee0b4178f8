"""Board files for tests, built from parts: the one place tests write board TOML.

Each function returns TOML text (``docs/formats.md`` §2); join the pieces and give the
text to ``board_from_text``. A value given as a string is written as a quoted value
string ("4k7", "8f", "inf"); a number as a TOML number; a dict as an inline table
(``{"value": 180, "low": 90}``); a list as an array. Keyword arguments become keys in
the order given, so a caller states exactly the keys its board has.

``divider_stage`` is the topology most tests use: a supply, a base divider R1/R2, RC and
RE (or RE1 + RE2 in series), one transistor and its device table. Every board built
here is invented test data.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

Value = str | int | float | Mapping | Sequence


def toml_value(value: Value) -> str:
    """``value`` as a TOML value (see the module docstring)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, float) and math.isinf(value):
        return '"inf"' if value > 0 else '"-inf"'
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{k} = {toml_value(v)}" for k, v in value.items()) + " }"
    return "[" + ", ".join(toml_value(v) for v in value) + "]"


def table(name: str, **keys: Value | None) -> str:
    """``[name]`` with ``keys`` (those given as None are left out)."""
    body = "".join(f"{k} = {toml_value(v)}\n" for k, v in keys.items() if v is not None)
    return f"[{name}]\n{body}"


def title(text: str) -> str:
    return f"title = {toml_value(text)}\n"


def supply(ref: str, node: str, volts: Value, **keys: Value | None) -> str:
    return table(f"supplies.{ref}", node=node, volts=volts, **keys)


def resistor(ref: str, a: str, b: str, ohms: Value, **keys: Value | None) -> str:
    return table(f"resistors.{ref}", nodes=[a, b], ohms=ohms, **keys)


def capacitor(ref: str, a: str, b: str, farads: Value, **keys: Value | None) -> str:
    return table(f"capacitors.{ref}", nodes=[a, b], farads=farads, **keys)


def transistor(ref: str, c: str, b: str, e: str, device: str, polarity: str = "npn") -> str:
    return table(f"transistors.{ref}", polarity=polarity, c=c, b=b, e=e, device=device)


def device(name: str, **params: Value | None) -> str:
    """A device table: ``IS``, ``beta``, ``VA``, ``n``, ``ft``, ... as given."""
    return table(f"devices.{name}", **params)


def divider_stage(
    *,
    vcc: Value,
    r1: Value,
    r2: Value | None,
    rc: Value,
    re: Value | tuple[Value, Value],
    device_name: str = "dev",
    device_params: Mapping[str, Value] | None = None,
    polarity: str = "npn",
    tolerance: Value | None = None,
    supply_tolerance: Value | None = None,
    swap_ce: bool = False,
) -> str:
    """A divider-biased stage: VCC on ``vcc``, R1 vcc–b, R2 b–gnd (left out when None),
    RC and RE; Q1 with its device table ``device_name``.

    An npn has RC from vcc to c and RE from e to gnd; a pnp RE from vcc to e and RC from
    c to gnd. ``re`` as a pair is RE1 (e–e2) and RE2 (e2–gnd). ``tolerance`` goes on
    every resistor, ``supply_tolerance`` on the supply. ``swap_ce`` fits Q1 with its
    collector and emitter swapped (a reversed part).
    """
    tol = {"tolerance": tolerance}
    parts = supply("VCC", "vcc", vcc, tolerance=supply_tolerance)
    parts += resistor("R1", "vcc", "b", r1, **tol)
    if r2 is not None:
        parts += resistor("R2", "b", "gnd", r2, **tol)
    if polarity == "npn":
        parts += resistor("RC", "vcc", "c", rc, **tol)
    else:
        parts += resistor("RC", "c", "gnd", rc, **tol)
    if isinstance(re, tuple):
        parts += resistor("RE1", "e", "e2", re[0], **tol)
        parts += resistor("RE2", "e2", "gnd", re[1], **tol)
    elif polarity == "npn":
        parts += resistor("RE", "e", "gnd", re, **tol)
    else:
        parts += resistor("RE", "vcc", "e", re, **tol)
    c, e = ("e", "c") if swap_ce else ("c", "e")
    parts += transistor("Q1", c, "b", e, device_name, polarity)
    parts += device(device_name, **dict(device_params or {}))
    return parts
