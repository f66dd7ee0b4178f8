"""The default command for every action of every instrument role.

One table, read by the drivers (what to send) and by the instrument-file loader (which
``[commands]`` overrides are allowed and which ``{fields}`` each may use). Defaults are
the common SCPI-1999 / IEEE 488.2 forms, from memory; an instrument that speaks
otherwise gets overrides in its instrument file, e.g.::

    [commands]
    read_dc_volts = "VAL?"

Fields in a template are filled with text: ``{value}`` and ``{range}`` with a number in
SI units formatted by :func:`instruments.scpi.format_number`, ``{channel}`` with a
channel id or a comma-separated list of them.
"""

from __future__ import annotations

import string
from collections.abc import Iterable
from dataclasses import dataclass

__all__ = ["Action", "COMMON_ACTIONS", "ROLE_ACTIONS", "ROLES", "actions_for", "template_problem"]


@dataclass(frozen=True)
class Action:
    """One thing a driver can ask of an instrument.

    Attributes
    ----------
    default : str
        The command template sent unless the instrument file overrides it.
    fields : tuple of str
        The ``{fields}`` the template must use, no others.
    summary : str
        What the action does, for documentation and messages.
    """

    default: str
    fields: tuple[str, ...] = ()
    summary: str = ""


COMMON_ACTIONS: dict[str, Action] = {
    "identify": Action("*IDN?", (), "ask manufacturer, model, serial, firmware"),
    "reset": Action("*RST", (), "reset to defaults"),
    "clear": Action("*CLS", (), "clear status and error queue"),
    "wait_complete": Action("*OPC?", (), "wait for pending operations; answers 1"),
    "read_error": Action("SYST:ERR?", (), "pop one error-queue entry"),
}

ROLE_ACTIONS: dict[str, dict[str, Action]] = {
    "dc_voltmeter": {
        "read_dc_volts": Action("MEAS:VOLT:DC?", (), "one DC voltage reading, autorange, V"),
        "read_dc_volts_range": Action(
            "MEAS:VOLT:DC? {range}", ("range",), "one DC voltage reading on a fixed range, V"
        ),
    },
    "ac_voltmeter": {
        "read_ac_volts": Action("MEAS:VOLT:AC?", (), "one AC rms voltage reading, autorange, V"),
        "read_ac_volts_range": Action(
            "MEAS:VOLT:AC? {range}", ("range",), "one AC rms voltage reading on a fixed range, V"
        ),
    },
    "power_supply": {
        "set_voltage": Action("VOLT {value}", ("value",), "set the output voltage, V"),
        "set_current_limit": Action("CURR {value}", ("value",), "set the current limit, A"),
        "output_on": Action("OUTP ON", (), "switch the output on"),
        "output_off": Action("OUTP OFF", (), "switch the output off"),
        "read_output": Action("OUTP?", (), "is the output on (1/0)"),
        "read_voltage": Action("MEAS:VOLT?", (), "measured output voltage, V"),
        "read_current": Action("MEAS:CURR?", (), "measured output current, A"),
        "read_voltage_setting": Action("VOLT?", (), "voltage set point, V"),
        "read_current_limit": Action("CURR?", (), "current limit set point, A"),
    },
    "function_generator": {
        "set_function_sine": Action("FUNC SIN", (), "sine waveform"),
        "set_frequency": Action("FREQ {value}", ("value",), "set the frequency, Hz"),
        "set_amplitude_unit_vpp": Action("VOLT:UNIT VPP", (), "amplitudes in V peak-to-peak"),
        "set_amplitude_unit_vrms": Action("VOLT:UNIT VRMS", (), "amplitudes in V rms"),
        "set_amplitude": Action("VOLT {value}", ("value",), "set the amplitude, in the set unit"),
        "set_offset": Action("VOLT:OFFS {value}", ("value",), "set the DC offset, V"),
        "output_on": Action("OUTP ON", (), "switch the output on"),
        "output_off": Action("OUTP OFF", (), "switch the output off"),
        "read_output": Action("OUTP?", (), "is the output on (1/0)"),
        "read_frequency": Action("FREQ?", (), "frequency set point, Hz"),
    },
    "scanner": {
        "close_channel": Action("ROUT:CLOS (@{channel})", ("channel",), "close a channel"),
        "open_channel": Action("ROUT:OPEN (@{channel})", ("channel",), "open channels"),
        "read_closed": Action("ROUT:CLOS? (@{channel})", ("channel",), "is a channel closed"),
    },
}

ROLES: tuple[str, ...] = tuple(ROLE_ACTIONS)
"""The instrument roles, as written in an instrument file's ``role`` key."""


def actions_for(roles: Iterable[str]) -> dict[str, Action]:
    """The actions open to an instrument with ``roles`` (common ones included).

    Unknown roles are ignored; the loader reports them.
    """
    actions = dict(COMMON_ACTIONS)
    for role in roles:
        actions.update(ROLE_ACTIONS.get(role, {}))
    return actions


def template_problem(action: Action, template: str) -> str | None:
    """What is wrong with a command template for ``action``, or ``None`` if it is fine."""
    if not template.strip():
        return "the command is empty"
    try:
        parts = list(string.Formatter().parse(template))
    except ValueError as exc:
        return f"bad braces in {template!r} ({exc}); write {{{{ and }}}} for literal braces"
    used: set[str] = set()
    for _text, name, spec, conversion in parts:
        if name is None:
            continue
        if spec or conversion:
            return f"write {{{name}}} plainly in {template!r}, without a format or conversion"
        used.add(name)
    allowed = set(action.fields)
    extra = used - allowed
    if extra:
        fields = ", ".join("{" + f + "}" for f in action.fields) or "no fields"
        return f"unknown field {{{sorted(extra)[0]}}} in {template!r}; this action takes {fields}"
    missing = allowed - used
    if missing:
        return f"{template!r} must contain {{{sorted(missing)[0]}}}"
    return None
