"""The plumbing of the simulated instruments: instrument files, command recognition,
error queues and injected faults.

Each :class:`SimInstrument` owns one :class:`~instruments.fake.FakeTransport`. It
recognises every text its instrument file would make a driver send (the defaults of
:mod:`instruments.commands` or the file's ``[commands]`` overrides), answers the IEEE
488.2 common commands itself (``*IDN?``, ``*CLS``, ``*OPC?``, and ``SYST:ERR?`` from its
own error queue, SCPI-1999 style ``<code>,"<text>"``), queues ``-113,"Undefined header"``
for a text it does not know, and leaves the measuring to the bench it belongs to
(:mod:`instruments.simulated_bench`). Faults (:class:`Fault`) strike here.
"""

from __future__ import annotations

import re
import string
from dataclasses import dataclass
from typing import Any

from reconcile.model.board import GND, Board
from reconcile.errors import InputError, InstrumentError

from reconcile.instruments.commands import actions_for
from reconcile.instruments.fake import GARBAGE_REPLY, FakeTransport
from reconcile.instruments.profile import InstrumentProfile
from reconcile.instruments.transport import timeout_message

__all__ = [
    "CommandMatcher",
    "DRIFT_V_PER_READING",
    "FAULT_KINDS",
    "Fault",
    "INJECTED_ERROR",
    "INSTRUMENTS",
    "NO_ERROR",
    "SimInstrument",
    "sim_profile",
]

FAULT_KINDS = ("timeout", "garbage", "error_queue", "drift")
DRIFT_V_PER_READING = 1e-3
"""How far a ``drift`` fault moves each DC reading from the one before, V."""
INSTRUMENTS = ("dmm", "supply", "generator", "scanner")
NO_ERROR = '+0,"No error"'
INJECTED_ERROR = '-222,"Data out of range"'
_UNDEFINED_HEADER = '-113,"Undefined header"'

# Built-in accuracy of the simulated instruments: invented figures of the size a 6½-digit
# bench DMM and a good bench supply's read-back would have (the DMM's AC volts specified
# from 10 Hz to 300 kHz). The simulated noise follows
# these tables whatever instrument file the capture is given.
_DMM_ACCURACY = {
    "dc_volts": {"over_range": 1.2, "ranges": [
        {"range": 0.1, "percent_of_reading": 0.005, "percent_of_range": 0.0035},
        {"range": 1.0, "percent_of_reading": 0.004, "percent_of_range": 0.0007},
        {"range": 10.0, "percent_of_reading": 0.0035, "percent_of_range": 0.0005},
        {"range": 100.0, "percent_of_reading": 0.0045, "percent_of_range": 0.0006},
    ]},
    "ac_volts": {"band_hz": [10.0, 300e3], "over_range": 1.2, "ranges": [
        {"range": 0.1, "percent_of_reading": 0.06, "percent_of_range": 0.03},
        {"range": 1.0, "percent_of_reading": 0.06, "percent_of_range": 0.03},
        {"range": 10.0, "percent_of_reading": 0.06, "percent_of_range": 0.03},
    ]},
}
_SUPPLY_ACCURACY = {
    "dc_volts": {"ranges": [{"range": 30.0, "percent_of_reading": 0.02,
                             "percent_of_range": 0.0, "floor": 0.002}]},
    "dc_current": {"ranges": [
        {"range": 0.01, "percent_of_reading": 0.05, "percent_of_range": 0.02},
        {"range": 1.0, "percent_of_reading": 0.05, "percent_of_range": 0.01},
    ]},
}


def sim_profile(kind: str, board: Board | None = None) -> InstrumentProfile:
    """The built-in instrument file of a simulated instrument (invented figures).

    Parameters
    ----------
    kind : {"dmm", "supply", "generator", "scanner"}
        Which instrument.
    board : Board, optional
        For the scanner: one channel per node of the board, 101, 102, ... in node order.

    Returns
    -------
    InstrumentProfile
    """
    instrument: dict[str, Any] = {"backend": "@sim", "timeout_s": 2.0}
    data: dict[str, Any] = {}
    if kind == "dmm":
        instrument.update(name="simulated DMM (invented Nullbench SIM-DM1)",
                          role=["dc_voltmeter", "ac_voltmeter"], resource="SIM::DMM")
        data["accuracy"] = _DMM_ACCURACY
    elif kind == "supply":
        instrument.update(name="simulated supply (invented Nullbench SIM-PS1)",
                          role="power_supply", resource="SIM::PSU")
        data["accuracy"] = _SUPPLY_ACCURACY
        data["limits"] = {"max_voltage_v": 30.0, "max_current_a": 1.0}
    elif kind == "generator":
        instrument.update(name="simulated generator (invented Nullbench SIM-FG1)",
                          role="function_generator", resource="SIM::GEN")
        data["limits"] = {"max_amplitude_vpp": 1.0}
    elif kind == "scanner":
        instrument.update(name="simulated scanner (invented Nullbench SIM-SW1)",
                          role="scanner", resource="SIM::SCAN")
        data["scanner"] = {"reference_node": GND, "settle_s": 0.0}
        nodes = board.nodes if board is not None else []
        data["channels"] = {str(101 + i): node for i, node in enumerate(nodes)}
    else:
        raise InputError(f"no simulated instrument {kind!r}; one of {', '.join(INSTRUMENTS)}",
                         key="instrument")
    data["instrument"] = instrument
    return InstrumentProfile.from_dict(data)


@dataclass
class Fault:
    """A fault injected into one simulated instrument.

    Attributes
    ----------
    instrument : str
        One of :data:`INSTRUMENTS`.
    kind : str
        ``timeout`` (the query goes unanswered), ``garbage`` (it answers
        :data:`instruments.fake.GARBAGE_REPLY`), ``error_queue`` (a write pushes
        ``-222,"Data out of range"`` into the error queue), ``drift`` (each DC reading
        is :data:`DRIFT_V_PER_READING` higher than the one before: it never settles).
    after : int
        It strikes on the ``after``-th matching query (write, for ``error_queue``)
        counted from the injection, and on every one after that until :meth:`SimulatedBench.fix`.
    command : str or None
        Only texts starting with this (e.g. ``MEAS:VOLT:DC?``, ``FUNC``); ``None``: any
        (for ``timeout``/``garbage``, any query but ``SYST:ERR?``).
    seen : int
        Matching texts so far.
    """

    instrument: str
    kind: str
    after: int = 1
    command: str | None = None
    seen: int = 0

    def matches(self, text: str) -> bool:
        if self.command is not None:
            return text.startswith(self.command)
        return self.kind == "error_queue" or not text.upper().startswith("SYST:ERR")


class CommandMatcher:
    """Recognises the texts one profile sends, action by action (overrides included)."""

    def __init__(self, profile: InstrumentProfile) -> None:
        self._patterns: list[tuple[str, re.Pattern[str]]] = []
        for action, spec in actions_for(profile.roles).items():
            template = profile.command(action, spec.default)
            self._patterns.append((action, _template_regex(template)))

    def match(self, text: str) -> tuple[str, dict[str, str]] | None:
        for action, pattern in self._patterns:
            found = pattern.fullmatch(text.strip())
            if found is not None:
                return action, found.groupdict()
        return None


def _template_regex(template: str) -> re.Pattern[str]:
    parts = []
    for literal, name, _spec, _conv in string.Formatter().parse(template):
        parts.append(re.escape(literal))
        if name is not None:
            parts.append(f"(?P<{name}>.+?)")
    return re.compile("".join(parts), re.IGNORECASE)


class SimInstrument:
    """One simulated instrument: its link, its command set, its error queue, its faults.

    ``bench`` (a :class:`instruments.simulated_bench.SimulatedBench`) holds the state
    and answers the measuring commands: ``bench.faults``, ``bench._answer(name, action,
    fields)`` for queries and ``bench._apply(name, action, fields)`` for settings.
    """

    def __init__(self, bench: Any, name: str, profile: InstrumentProfile,
                 identity: str, resource: str) -> None:
        self.bench = bench
        self.name = name
        self.profile = profile
        self.identity = identity
        self.commands = CommandMatcher(profile)
        self.errors: list[str] = []
        self.transport = FakeTransport(self._query, resource=resource, on_write=self._write)

    def _faults(self, kind: tuple[str, ...], text: str) -> Fault | None:
        hit = None
        for fault in self.bench.faults:
            if fault.instrument == self.name and fault.kind in kind and fault.matches(text):
                fault.seen += 1
                if fault.seen >= fault.after and hit is None:
                    hit = fault
        return hit

    def _query(self, cmd: str) -> str | None:
        fault = self._faults(("timeout", "garbage", "drift"), cmd)
        if fault is not None and fault.kind == "timeout":
            raise InstrumentError(timeout_message(self.transport.resource, cmd,
                                                  self.transport.timeout_s, 1))
        if fault is not None and fault.kind == "garbage":
            return GARBAGE_REPLY
        found = self.commands.match(cmd)
        if found is None:
            self.errors.append(_UNDEFINED_HEADER)
            return None  # a real instrument stays silent: the query times out
        action, fields = found
        if action == "identify":
            return self.identity
        if action == "read_error":
            return self.errors.pop(0) if self.errors else NO_ERROR
        if action == "wait_complete":
            return "1"
        reply = self.bench._answer(self.name, action, fields)
        if fault is not None and fault.kind == "drift" and reply is not None:
            steps = fault.seen - fault.after + 1
            reply = f"{float(reply) + DRIFT_V_PER_READING * steps:+.9E}"
        return reply

    def _write(self, cmd: str) -> None:
        if self._faults(("error_queue",), cmd) is not None:
            self.errors.append(INJECTED_ERROR)
        found = self.commands.match(cmd)
        if found is None:
            self.errors.append(_UNDEFINED_HEADER)
            return
        action, fields = found
        if action == "clear":
            self.errors.clear()
            return
        if action in ("reset", "identify", "read_error", "wait_complete"):
            return
        problem = self.bench._apply(self.name, action, fields)
        if problem:
            self.errors.append(problem)
