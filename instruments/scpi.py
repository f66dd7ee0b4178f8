"""IEEE 488.2 common commands, the SCPI error queue, and SCPI number parsing.

Everything here works on any :class:`~instruments.transport.Transport`. Forms used
(from memory of IEEE 488.2-1992 and SCPI-1999, not checked against the texts):

- ``*IDN?`` answers four comma-separated fields: manufacturer, model, serial, firmware
  (IEEE 488.2 10.14); ``0`` in a field means "not given".
- ``*RST`` resets, ``*CLS`` clears the status and error queue, ``*OPC?`` answers ``1``
  when every pending operation has finished.
- ``SYST:ERR?`` pops one entry of the error queue: ``<code>,"<text>"``; code ``0`` means
  the queue is empty.
- Numeric replies are NR1 (``42``), NR2 (``-0.125``) or NR3 (``+1.234E-03``)
  (IEEE 488.2 8.7). ``+9.9E37`` stands for an overload (SCPI's infinity, ``-9.9E37``
  negative) and ``9.91E37`` for "not a number".
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import NamedTuple

from reconcile.errors import InputError, InstrumentError

from reconcile.instruments.transport import Transport

__all__ = [
    "Identity",
    "ScpiError",
    "identify",
    "reset",
    "clear",
    "wait_complete",
    "read_errors",
    "check_errors",
    "configure",
    "parse_number",
    "parse_numbers",
    "parse_bool",
    "query_number",
    "format_number",
    "OVERLOAD",
    "NOT_A_NUMBER",
    "MAX_ERROR_READS",
]

OVERLOAD = 9.9e37
"""SCPI's stand-in for an infinite (overloaded) reading."""
NOT_A_NUMBER = 9.91e37
"""SCPI's stand-in for "no valid reading"."""
MAX_ERROR_READS = 20
"""How many ``SYST:ERR?`` reads :func:`read_errors` makes at most before giving up."""

_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")
_ERROR_ENTRY = re.compile(r'([+-]?\d+)\s*(?:,\s*(.*))?', re.DOTALL)


@dataclass(frozen=True)
class Identity:
    """What ``*IDN?`` says an instrument is.

    Attributes
    ----------
    manufacturer, model, serial, firmware : str
        The four fields, stripped; ``"0"`` where the instrument gives none.
    """

    manufacturer: str
    model: str
    serial: str
    firmware: str

    def to_dict(self) -> dict[str, str]:
        """The four fields by name."""
        return {
            "manufacturer": self.manufacturer,
            "model": self.model,
            "serial": self.serial,
            "firmware": self.firmware,
        }

    def __str__(self) -> str:
        return f"{self.manufacturer} {self.model} (serial {self.serial}, firmware {self.firmware})"


class ScpiError(NamedTuple):
    """One entry of an instrument's error queue."""

    code: int
    message: str

    def __str__(self) -> str:
        return f'{self.code:+d} "{self.message}"'


def identify(transport: Transport, *, command: str = "*IDN?") -> Identity:
    """Ask the instrument what it is (``*IDN?``).

    Raises
    ------
    InstrumentError
        The reply does not have four comma-separated fields.
    """
    reply = transport.query(command)
    fields = [f.strip() for f in reply.split(",", 3)]
    if len(fields) != 4 or not fields[0]:
        raise InstrumentError(
            f"{transport.resource} answered {command!r} with {reply!r}; expected "
            "'manufacturer,model,serial,firmware'"
        )
    return Identity(*fields)


def reset(transport: Transport, *, command: str = "*RST") -> None:
    """Reset the instrument to its default state (``*RST``)."""
    transport.write(command)


def clear(transport: Transport, *, command: str = "*CLS") -> None:
    """Clear status registers and the error queue (``*CLS``)."""
    transport.write(command)


def wait_complete(transport: Transport, *, command: str = "*OPC?") -> None:
    """Wait until pending operations finish (``*OPC?`` answers ``1``).

    Raises
    ------
    InstrumentError
        Any other answer, or none within the transport's timeout.
    """
    reply = transport.query(command)
    value = parse_number(reply, resource=transport.resource, command=command)
    if value != 1:
        raise InstrumentError(
            f"{transport.resource} answered {command!r} with {reply!r}; expected 1"
        )


def _parse_error_entry(reply: str, resource: str, command: str) -> ScpiError:
    match = _ERROR_ENTRY.fullmatch(reply.strip())
    if match is None:
        raise InstrumentError(
            f"{resource} answered {command!r} with {reply!r}; expected '<code>,\"<text>\"'"
        )
    text = (match.group(2) or "").strip()
    if len(text) >= 2 and text[0] == text[-1] == '"':
        text = text[1:-1]
    return ScpiError(int(match.group(1)), text)


def read_errors(
    transport: Transport, *, command: str = "SYST:ERR?", max_reads: int = MAX_ERROR_READS
) -> list[ScpiError]:
    """Empty the error queue and return its entries, oldest first.

    Reads until code 0, at most ``max_reads`` times.

    Raises
    ------
    InstrumentError
        The queue did not empty within ``max_reads`` reads (the entries read so far are
        listed), or a reply is not an error-queue entry.
    """
    errors: list[ScpiError] = []
    for _ in range(max_reads):
        entry = _parse_error_entry(transport.query(command), transport.resource, command)
        if entry.code == 0:
            return errors
        errors.append(entry)
    listed = "; ".join(str(e) for e in errors)
    raise InstrumentError(
        f"{transport.resource}: error queue still not empty after {max_reads} reads of "
        f"{command!r}: {listed}"
    )


def check_errors(
    transport: Transport,
    *,
    after: Sequence[str] = (),
    command: str = "SYST:ERR?",
    max_reads: int = MAX_ERROR_READS,
) -> None:
    """Raise if the instrument's error queue holds anything.

    Parameters
    ----------
    transport : Transport
        The instrument.
    after : sequence of str
        Commands just sent, named in the message.
    command : str
        The error-queue query.
    max_reads : int
        Cap on reads (see :func:`read_errors`).

    Raises
    ------
    InstrumentError
        Listing every error read.
    """
    errors = read_errors(transport, command=command, max_reads=max_reads)
    if not errors:
        return
    what = f" after {', '.join(repr(c) for c in after)}" if after else ""
    count = f"{len(errors)} error{'s' if len(errors) > 1 else ''}"
    raise InstrumentError(
        f"{transport.resource} reported {count}{what}: " + "; ".join(str(e) for e in errors)
    )


def configure(transport: Transport, *commands: str, error_command: str = "SYST:ERR?") -> None:
    """Write ``commands`` in turn, then check the error queue once.

    Raises
    ------
    InstrumentError
        The instrument reported errors (the message names the commands).
    """
    for cmd in commands:
        transport.write(cmd)
    check_errors(transport, after=commands, command=error_command)


def parse_number(reply: str, *, resource: str = "instrument", command: str = "?") -> float:
    """Parse one SCPI numeric reply (NR1, NR2 or NR3).

    Parameters
    ----------
    reply : str
        The reply text.
    resource, command : str
        Named in error messages.

    Returns
    -------
    float
        The value, in the unit the instrument reports (SI base units for SCPI measures).

    Raises
    ------
    InstrumentError
        The reply is not a number, is the overload marker (``±9.9E37``), or the
        not-a-number marker (``9.91E37``).
    """
    text = reply.strip()
    if _NUMBER.fullmatch(text) is None:
        raise InstrumentError(
            f"{resource} answered {command!r} with {reply!r}, which is not a number"
        )
    value = float(text)
    if math.isclose(abs(value), NOT_A_NUMBER, rel_tol=1e-4):
        raise InstrumentError(
            f"{resource} answered {command!r} with {text} (no valid reading)"
        )
    if abs(value) >= OVERLOAD * (1 - 1e-4):
        sign = "negative " if value < 0 else ""
        raise InstrumentError(
            f"{resource} answered {command!r} with {text}: {sign}overload, the input is beyond "
            "the range (choose a larger range or check the connection)"
        )
    return value


def parse_numbers(reply: str, *, resource: str = "instrument", command: str = "?") -> list[float]:
    """Parse a comma-separated list of SCPI numbers (e.g. several triggered readings)."""
    return [parse_number(part, resource=resource, command=command) for part in reply.split(",")]


def parse_bool(reply: str, *, resource: str = "instrument", command: str = "?") -> bool:
    """Parse a SCPI boolean reply: ``1``/``0`` or ``ON``/``OFF``.

    Raises
    ------
    InstrumentError
        Any other reply.
    """
    text = reply.strip().upper()
    if text in ("1", "+1", "ON"):
        return True
    if text in ("0", "+0", "OFF"):
        return False
    raise InstrumentError(
        f"{resource} answered {command!r} with {reply!r}; expected 1/0 or ON/OFF"
    )


def query_number(transport: Transport, command: str) -> float:
    """Query ``command`` and parse the reply with :func:`parse_number`."""
    return parse_number(transport.query(command), resource=transport.resource, command=command)


def format_number(value: float, *, key: str = "value") -> str:
    """A number as SCPI text: up to 12 significant digits, ``E`` exponent when needed.

    ``1000.0`` -> ``1000``, ``0.001`` -> ``0.001``, ``1.5e-05`` -> ``1.5E-05``.

    Raises
    ------
    InputError
        ``value`` is not a finite number.
    """
    try:
        number = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"expected a number, got {value!r}", key=key) from exc
    if not math.isfinite(number):
        raise InputError(f"expected a finite number, got {value!r}", key=key)
    return f"{number:.12G}"
