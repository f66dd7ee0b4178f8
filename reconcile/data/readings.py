"""Bench readings: the readings CSV file (docs/formats.md §3).

One row per reading::

    quantity,at,value,unit,uncertainty,instrument,note[,device][,frequency]

- ``quantity`` is one of :data:`QUANTITIES`; ``at`` says where (see below);
- ``value`` is a value string (:mod:`reconcile.values`: ``0.54m``, ``9.93k``, ``4k7``)
  read together with ``unit`` (``V``, ``A``, ``mA``, ``ohm``, ``kΩ``, ``F``, ``C``,
  ``K`` or blank), which must fit the quantity;
- ``uncertainty`` is one standard uncertainty. A bare number is in the reading's unit
  (``0.01`` with unit ``mA`` is 10 µA); a value string with its own prefix or unit stands
  for itself (``2u`` is 2e-6 in SI); ``1%`` is 1 % of the reading; blank means the
  documented default (:data:`DEFAULT_UNCERTAINTY`, :func:`default_uncertainty`). A
  temperature's uncertainty is in kelvin (the same size as a degree Celsius);
- ``at``: a node, or ``a/b`` for V(a) − V(b) (voltage); a supply ref or a resistor ref
  (current); a resistor ref (resistance, measured out of circuit); a capacitor ref
  (capacitance); blank for gain, input_resistance, output_resistance and temperature.
  Ground is ``gnd``; ``0`` is refused with that hint;
- ``gain`` may have unit ``dB`` (:mod:`reconcile.model.decibels`): its uncertainty is
  then a bare number in dB;
- ``frequency`` (a value string, ``100``, ``1k``, ``10 kHz``) is the test frequency of a
  small-signal reading; blank means the board's ``[signal] frequency``.

Header names are case-insensitive; only ``quantity`` and ``value`` are required.
Lines starting with ``#`` and blank lines are skipped; a UTF-8 byte-order mark is
allowed. Every bad row is reported, with file and line, in one
:class:`reconcile.errors.InputErrors`.
"""

from __future__ import annotations

import csv
import difflib
import io
import math
import os
import re
from collections.abc import Iterable
from dataclasses import dataclass, field

from reconcile.data import csv_dialect, csv_rows
from reconcile.data.validation import check_reading, reading_problems
from reconcile.model.board import GND, Board
from reconcile.errors import InputError, InputErrors
from reconcile.model import decibels
from reconcile.model.text_files import read_text
from reconcile.model.quantities import (
    COUNTS_FULL_SCALE,
    REGISTRY,
    SUPPLY_READBACK_DEFAULT,
    UncertaintyRule,
)
from reconcile.model.values import KINDS, ZERO_CELSIUS_K, parse_value

__all__ = [
    "COLUMNS",
    "COUNTS_FULL_SCALE",
    "DEFAULT_UNCERTAINTY",
    "QUANTITIES",
    "Reading",
    "UncertaintyRule",
    "default_uncertainty",
    "load_readings",
    "readings_from_text",
    "readings_to_csv",
    "standard_uncertainty",
]

#: Columns in the order they are written; ``device`` and ``frequency`` only when a
#: reading has one.
COLUMNS = ("quantity", "at", "value", "unit", "uncertainty", "instrument", "note", "device",
           "frequency")
_OPTIONAL_COLUMNS = ("device", "frequency")
_REQUIRED_COLUMNS = ("quantity", "value")
#: columns that hold numbers (a decimal comma is read in a semicolon export)
_NUMBER_COLUMNS = ("value", "uncertainty", "frequency")

#: quantity -> (value kind for :func:`reconcile.values.parse_value`, what ``at`` names):
#: the readable quantities of the registry (:mod:`reconcile.model.quantities`).
QUANTITIES: dict[str, tuple[str, str]] = {
    q.name: (q.value_kind, q.at) for q in REGISTRY.values() if q.readable
}
_BARE_NUMBER = re.compile(r"\s*[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?\s*$")


@dataclass(frozen=True)
class Reading:
    """One bench reading.

    Parameters
    ----------
    quantity
        One of :data:`QUANTITIES`.
    at
        Where it was read, normalised (``0`` written as ``gnd``, spaces around ``/``
        removed); ``""`` for quantities that take no place.
    value
        The reading in SI units (V, A, ohm, F, a plain ratio, or K for temperature).
    unit
        The unit as written in the file (may be ``""``); used when writing it back.
    uncertainty
        One standard uncertainty in SI units (K for temperature), or ``None`` for the
        default of :func:`default_uncertainty`.
    instrument, note, device
        Free text; ``device`` names the device under test in lot files.
    frequency
        The test frequency of a small-signal reading, Hz; ``None`` for the board's
        ``[signal] frequency`` (and for every other quantity).
    line
        Line in the file the reading came from (not compared).
    raw
        The row's cells as written, in :data:`COLUMNS` order, so that
        :func:`readings_to_csv` can reproduce the file cell by cell (not compared).
    """

    quantity: str
    at: str
    value: float
    unit: str
    uncertainty: float | None
    instrument: str = ""
    note: str = ""
    device: str = ""
    frequency: float | None = None
    line: int | None = field(default=None, compare=False)
    raw: tuple[str, ...] = field(default=(), compare=False)

    @classmethod
    def from_si(
        cls,
        quantity: str,
        at: str,
        value: float,
        uncertainty: float | None = None,
        **fields,
    ) -> Reading:
        """A reading made in code, in SI units: its unit is the registry's
        (:mod:`reconcile.model.quantities`). ``fields``: instrument, note, device,
        frequency."""
        return cls(quantity, at, float(value), REGISTRY[quantity].unit, uncertainty, **fields)


# ------------------------------------------------------------------ uncertainty
#: Default uncertainties per readable quantity, from the registry. Values in SI units.
DEFAULT_UNCERTAINTY: dict[str, UncertaintyRule] = {
    q.name: q.default_uncertainty
    for q in REGISTRY.values()
    if q.readable and q.default_uncertainty is not None
}


def default_uncertainty(reading: Reading, board: Board | None = None) -> float:
    """The default standard uncertainty of a reading, SI units (K for temperature).

    With ``board``, a ``current`` at one of its supplies is the supply's own read-back
    (:data:`reconcile.model.quantities.SUPPLY_READBACK_DEFAULT`); without it, or at a
    resistor, the DMM's.

    The defaults are the registry's (:mod:`reconcile.model.quantities`, listed in the
    README's readings table): a 4½-digit bench DMM (20 000 counts, auto-ranging) for
    voltage, current, resistance and capacitance, common practice for the derived
    quantities.

    A count is the range divided by 20 000 (e.g. 0.1 mV on the 2 V range); the range is
    the smallest that holds the reading. Dividing limits by √3 treats them as a
    rectangular distribution (JCGM 100:2008, GUM 4.3.7). The reading's own
    ``uncertainty`` is ignored here; see :func:`standard_uncertainty`.

    Raises
    ------
    InputError
        The default is zero (a reading of exactly 0 whose default is purely relative):
        the file must give an uncertainty for it.
    """
    rule = REGISTRY[reading.quantity].default_uncertainty
    if reading.quantity == "current" and board is not None and reading.at in board.supplies:
        rule = SUPPLY_READBACK_DEFAULT
    if rule is None:
        raise InputError(
            f"{reading.quantity} has no default uncertainty: give one in the uncertainty "
            "column", line=reading.line,
        )
    u = rule.standard(reading.value)
    if u <= 0.0:
        raise InputError(
            f"{reading.quantity} reading of {reading.value:g} has no default uncertainty "
            "(the default is relative to the reading): give one in the uncertainty column",
            line=reading.line,
        )
    return u


def standard_uncertainty(reading: Reading, board: Board | None = None) -> float:
    """The reading's uncertainty as given, else :func:`default_uncertainty` (on
    ``board``, if given, which tells a supply's read-back from an ammeter's reading).

    Every analysis takes a reading's uncertainty here, so a reading made in code is held
    to the rule of :mod:`reconcile.data.validation` too.

    Raises
    ------
    InputErrors
        The reading breaks that rule (docs/formats.md §3.3).
    """
    check_reading(reading)
    if reading.uncertainty is not None:
        return reading.uncertainty
    return default_uncertainty(reading, board)


# ----------------------------------------------------------------------- parsing
def load_readings(
    path: str | os.PathLike[str], board: Board | None = None, *, notices: list[str] | None = None
) -> list[Reading]:
    """Read a readings CSV file.

    Parameters
    ----------
    path
        The file (UTF-8, a byte-order mark is allowed).
    board
        When given, every ``at`` is checked against it (nodes and refs must exist,
        small-signal readings need its ``[signal]`` table).
    notices
        When given, what the loader noticed about the file is appended here for the
        caller to show (a semicolon, decimal-comma spreadsheet export).

    Returns
    -------
    list of Reading
        In file order.

    Raises
    ------
    InputError
        The file cannot be read.
    InputErrors
        The header or some rows are wrong; every problem is listed with its line.
    """
    name, text = read_text(path, "readings file")
    return readings_from_text(text, path=name, board=board, notices=notices)


def readings_from_text(
    text: str,
    path: str = "<text>",
    board: Board | None = None,
    *,
    notices: list[str] | None = None,
) -> list[Reading]:
    """Parse readings CSV text; see :func:`load_readings`."""
    text = text.removeprefix("\ufeff")
    dialect = _dialect(text, path)
    if notices is not None and dialect.notice:
        notices.append(f"{path}: {dialect.notice}")
    split = csv_rows.read_rows(text, path, delimiter=dialect.delimiter)
    header_line, header_cells = split.header(",".join(COLUMNS[:7]), path)
    index = _header_index(header_cells, header_line, path)
    errors: list[InputError] = list(split.errors)
    readings: list[Reading] = []
    for line, cells in split.body:
        if len(cells) > len(header_cells) and any(c.strip() for c in cells[len(header_cells):]):
            errors.append(InputError(
                f"row has {len(cells)} cells but the header has {len(header_cells)}: "
                "quote a cell that holds a comma", path=path, line=line,
            ))
            continue
        raw = tuple(
            cells[index[c]] if c in index and index[c] < len(cells) else "" for c in COLUMNS
        )
        if dialect.decimal_comma:
            try:
                raw = tuple(
                    dialect.number(cell, path=path, line=line, column=c)
                    if c in _NUMBER_COLUMNS else cell
                    for c, cell in zip(COLUMNS, raw, strict=True)
                )
            except InputError as err:
                errors.append(err)
                continue
        problems: list[str] = []
        reading = _reading_from_cells(raw, line, board, problems)
        errors.extend(InputError(p, path=path, line=line) for p in problems)
        if reading is not None:
            readings.append(reading)
    if errors:
        raise InputErrors(sorted(errors, key=lambda e: e.line or 0))
    return readings


def _dialect(text: str, path: str) -> csv_dialect.Dialect:
    """The separator and decimal mark, decided by the header line."""
    found = csv_rows.first_line(text)
    if found is None:
        return csv_dialect.COMMA
    number, line = found
    return csv_dialect.detect(line, COLUMNS, path=path, line=number)


def _suggest(word: str, choices: Iterable[str]) -> str:
    """`` (did you mean 'x'?)`` or ``""``; case is ignored when matching."""
    by_lower = {c.lower(): c for c in choices}
    close = difflib.get_close_matches(word.lower(), list(by_lower), n=1, cutoff=0.6)
    return f" (did you mean {by_lower[close[0]]!r}?)" if close else ""


def _header_index(cells: list[str], line: int, path: str) -> dict[str, int]:
    names = [c.strip().lower() for c in cells]
    while names and not names[-1]:  # trailing empty columns a spreadsheet adds
        names.pop()
    errors: list[InputError] = []
    if not set(names) & set(COLUMNS):
        raise InputErrors([InputError(
            f"the first line must be the header ({','.join(COLUMNS[:7])}), found "
            f"{','.join(cells)!r}", path=path, line=line,
        )])
    index: dict[str, int] = {}
    for i, name in enumerate(names):
        if name not in COLUMNS:
            errors.append(InputError(
                f"unknown column {cells[i].strip()!r}{_suggest(name, COLUMNS)}; the columns "
                f"are {', '.join(COLUMNS)}", path=path, line=line,
            ))
        elif name in index:
            errors.append(InputError(f"column {name!r} appears twice", path=path, line=line))
        else:
            index[name] = i
    for name in _REQUIRED_COLUMNS:
        if name not in index:
            errors.append(InputError(
                f"missing required column {name!r} in the header", path=path, line=line
            ))
    if errors:
        raise InputErrors(errors)
    return index


def _unit_scale(unit: str, kind: str) -> float:
    """SI value of one ``unit`` of ``kind`` (not for temperature)."""
    return parse_value(f"1 {unit}", kind) if unit else 1.0


def _reading_from_cells(
    raw: tuple[str, ...], line: int | None, board: Board | None, problems: list[str]
) -> Reading | None:
    quantity_cell, at_cell, value_cell, unit_cell, unc_cell, instrument, note, device = raw[:8]
    quantity = quantity_cell.strip().lower()
    if quantity not in QUANTITIES:
        hint = _suggest(quantity, QUANTITIES)
        if quantity == "supply_voltage":
            hint = " (write a voltage at the supply's node instead)"
        problems.append(
            f"unknown quantity {quantity_cell.strip()!r}{hint}; one of {', '.join(QUANTITIES)}"
        )
        return None
    kind = QUANTITIES[quantity][0]
    unit = unit_cell.strip()
    value = _value(quantity, kind, value_cell.strip(), unit, problems)
    uncertainty = _uncertainty(quantity, kind, unc_cell.strip(), unit, value, problems)
    at = _at(quantity, at_cell.strip(), board, problems)
    frequency = _frequency(quantity, raw[8].strip() if len(raw) > 8 else "", problems)
    if problems or value is None or at is None:
        return None
    reading = Reading(
        quantity=quantity, at=at, value=value, unit=unit, uncertainty=uncertainty,
        instrument=instrument.strip(), note=note.strip(), device=device.strip(),
        frequency=frequency, line=line, raw=raw,
    )
    found = reading_problems(reading)  # the rule every way in shares (data/validation.py)
    if found:
        problems.extend(found)
        return None
    return reading


def _frequency(quantity: str, text: str, problems: list[str]) -> float | None:
    """The frequency cell: None when blank (the board's [signal] frequency)."""
    if not text:
        return None
    if not REGISTRY[quantity].small_signal:
        problems.append(f"{quantity} takes no frequency (found {text!r}): only small-signal "
                        "readings do; leave it blank")
        return None
    try:
        f = parse_value(text, "hertz")
    except InputError as err:
        problems.append(f"frequency: {err.message}")
        return None
    if not (math.isfinite(f) and f > 0.0):
        problems.append(f"frequency {text!r} must be a positive finite number of Hz")
        return None
    return f


def _decibel_value(quantity: str, text: str, problems: list[str]) -> float | None:
    if not REGISTRY[quantity].decibels:
        problems.append(f"unit 'dB' does not fit a {quantity} reading (only gain takes dB)")
        return None
    try:
        level = parse_value(text, "plain")
    except InputError as err:
        problems.append(f"{quantity}: {err.message}")
        return None
    if not (math.isfinite(level) and abs(level) <= 200.0):
        problems.append(f"{quantity} level {text!r} dB must be finite, within ±200 dB")
        return None
    return decibels.to_ratio(level)


def _value(
    quantity: str, kind: str, text: str, unit: str, problems: list[str]
) -> float | None:
    if not text:
        problems.append(f"{quantity} reading has no value")
        return None
    if decibels.is_decibels(unit):
        return _decibel_value(quantity, text, problems)
    if unit:
        try:
            parse_value(f"1 {unit}", kind)
        except InputError:
            problems.append(
                f"unit {unit!r} does not fit a {quantity} reading, which takes "
                f"{KINDS[kind][1]}"
            )
            return None
    try:
        value = parse_value(f"{text} {unit}" if unit else text, kind)
    except InputError as err:
        problems.append(f"{quantity}: {err.message}")
        return None
    if not math.isfinite(value):
        problems.append(f"{quantity} value {text!r} must be finite")
        return None
    if REGISTRY[quantity].non_negative and value < 0.0:
        problems.append(f"{quantity} cannot be negative, found {text!r}")
        return None
    return value


def _uncertainty(
    quantity: str, kind: str, text: str, unit: str, value: float | None, problems: list[str]
) -> float | None:
    if not text:
        return None
    if decibels.is_decibels(unit):
        return _decibel_uncertainty(text, value, problems)
    try:
        if text.endswith("%") and kind != "temperature":
            if value is None:
                return None
            u = parse_value(text, "tolerance") * abs(value)
        elif kind == "temperature":
            bare = text.removesuffix("K").removesuffix("°C").removesuffix("C").strip()
            u = parse_value(bare, "plain")
        elif _BARE_NUMBER.match(text):
            u = float(f"{float(text) * _unit_scale(unit, kind):.12g}")
        else:
            u = parse_value(text, kind)
    except InputError as err:
        problems.append(f"uncertainty: {err.message}")
        return None
    if not (u > 0.0 and math.isfinite(u)):
        problems.append(
            f"uncertainty {text!r} must be a positive finite number (one standard "
            "uncertainty), or blank for the default"
        )
        return None
    return u


def _decibel_uncertainty(text: str, ratio: float | None, problems: list[str]) -> float | None:
    """A dB reading's uncertainty cell (a bare number of dB) as a ratio's (GUM)."""
    if not _BARE_NUMBER.match(text):
        problems.append(f"uncertainty {text!r} of a dB reading must be a bare number of dB")
        return None
    u_db = float(text)
    if not (u_db > 0.0 and math.isfinite(u_db)):
        problems.append(f"uncertainty {text!r} must be a positive finite number of dB")
        return None
    return None if ratio is None else decibels.ratio_uncertainty(ratio, u_db)


def _at(quantity: str, text: str, board: Board | None, problems: list[str]) -> str | None:
    if not REGISTRY[quantity].takes_at:
        if text:
            problems.append(f"{quantity} takes no 'at' (found {text!r}): leave it blank")
            return None
        if board is not None and REGISTRY[quantity].small_signal and board.signal.input is None:
            problems.append(
                f"{quantity} is a small-signal reading but the board has no [signal] table"
            )
            return None
        return ""
    if not text:
        problems.append(f"{quantity} needs 'at': {QUANTITIES[quantity][1]}")
        return None
    if quantity == "voltage":
        return _voltage_at(text, board, problems)
    if "/" in text:
        problems.append(f"{quantity} at {text!r}: a/b is for voltage only")
        return None
    if board is not None:
        tables = REGISTRY[quantity].places
        known = [ref for t in tables for ref in getattr(board, t)]
        if text not in known:
            listing = "; ".join(f"{t}: {', '.join(getattr(board, t)) or 'none'}" for t in tables)
            problems.append(
                f"{quantity} at {text!r}: not {QUANTITIES[quantity][1]} on the board"
                f"{_suggest(text, known)}; {listing}"
            )
            return None
    return text


def _voltage_at(text: str, board: Board | None, problems: list[str]) -> str | None:
    ends = [p.strip() for p in text.split("/")]
    if len(ends) > 2 or not all(ends):
        problems.append(f"voltage at {text!r}: write a node, or a/b for V(a) - V(b)")
        return None
    if "0" in ends:
        problems.append(f"voltage at {text!r}: node '0' is not ground here; write gnd")
        return None
    if len(ends) == 2 and ends[0] == ends[1]:
        problems.append(f"voltage at {text!r}: both ends are the same node")
        return None
    if board is not None:
        known = [*board.nodes, GND]
        for end in ends:
            if end in known:
                continue
            hint = _suggest(end, known)
            if end in board.supplies:
                hint = f" ({end} is a supply; its node is {board.supplies[end].node!r})"
            problems.append(
                f"voltage at {text!r}: unknown node {end!r}{hint}; the board's nodes are "
                f"{', '.join(known)}"
            )
            return None
    return "/".join(ends)


# ----------------------------------------------------------------------- writing
def _number(x: float) -> str:
    return repr(float(f"{x:.12g}"))


def _cells(reading: Reading) -> tuple[str, ...]:
    """The row for a reading: its raw cells when they still say the same, else formatted."""
    raw = reading.raw + ("",) * (len(COLUMNS) - len(reading.raw))  # older: no frequency
    if len(raw) == len(COLUMNS):
        problems: list[str] = []
        again = _reading_from_cells(raw, reading.line, None, problems)
        if again == reading:
            return raw
    kind = QUANTITIES[reading.quantity][0]
    unit = reading.unit
    value, u = reading.value, reading.uncertainty
    if decibels.is_decibels(unit):
        value_text = _number(decibels.to_level(value))
        unc_text = "" if u is None else _number(decibels.level_uncertainty(value, u))
    elif kind == "temperature":
        if unit in ("", "K"):
            unit, value_text = "K", repr(value)
        else:
            value_text = _number(value - ZERO_CELSIUS_K)
        unc_text = "" if u is None else repr(u)
    elif unit in ("", REGISTRY[reading.quantity].unit):
        value_text, unc_text = repr(value), "" if u is None else repr(u)
    else:
        scale = _unit_scale(unit, kind)
        value_text = _number(value / scale)
        unc_text = "" if u is None else _number(u / scale)
    frequency = "" if reading.frequency is None else repr(float(reading.frequency))
    return (reading.quantity, reading.at, value_text, unit, unc_text,
            reading.instrument, reading.note, reading.device, frequency)


def readings_to_csv(readings: Iterable[Reading]) -> str:
    """Readings as CSV text, header first.

    The header is ``quantity,at,value,unit,uncertainty,instrument,note``, plus
    ``,device`` when any reading has a device and ``,frequency`` when any has a
    frequency. A reading loaded from a file is written
    with its cells as they were (so a file round-trips cell by cell); any other is
    written in its own unit with ``repr`` floats, so reading the text back gives an
    equal :class:`Reading`.
    """
    readings = list(readings)
    used = {"device": any(r.device for r in readings),
            "frequency": any(r.frequency is not None for r in readings)}
    keep = [i for i, c in enumerate(COLUMNS) if c not in _OPTIONAL_COLUMNS or used[c]]
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow([COLUMNS[i] for i in keep])
    for reading in readings:
        cells = _cells(reading)
        writer.writerow([cells[i] for i in keep])
    return out.getvalue()
