"""Readings typed by hand at a test frequency outside the named meter's specified band.

A board's ``[bench] instruments`` lists the instrument files of the bench's meters. A
small-signal reading whose ``instrument`` cell names one of them (its ``[instrument]
name``, or the file's name without ``.toml``; case ignored) is held to that meter's
``[accuracy.ac_volts] band_hz`` at its test frequency (its own, or ``[signal]
frequency``). A reading outside the band is kept, since it is the user's data and may
still carry an uncertainty the user has good grounds for, but it is flagged: one input
warning per reading, naming the readings file and line, the frequency, the band and
the instrument file (:func:`reconcile.errors.warn_input`: stderr, and the JSON's
``warnings``). A capture refuses such a frequency outright
(:mod:`reconcile.capture.meter_band`).
"""

from __future__ import annotations

import os
from collections.abc import Sequence

from reconcile.data.frequency_band import FrequencyBand
from reconcile.data.readings import Reading
from reconcile.errors import warn_input
from reconcile.model.board import Board
from reconcile.model.quantities import REGISTRY
from reconcile.model.values import format_si

__all__ = ["flag_readings_outside_bands"]


def _bands_by_name(board: Board, out: list[str]) -> dict[str, tuple[FrequencyBand, str]]:
    """Instrument name (casefolded) -> (its band, its file), for files that give a band;
    a listed file that is missing adds a warning to ``out``.

    Raises
    ------
    InputError
        A listed file that exists but is not a valid instrument file.
    """
    from reconcile.instruments.profile import load_profile

    bands: dict[str, tuple[FrequencyBand, str]] = {}
    for path in board.bench.instruments:
        if not os.path.isfile(path):
            where = board.source_path or "board"
            out.append(f"{where}: [bench.instruments] instrument file {path} not found: "
                       "readings naming it are not checked against its band")
            continue
        profile = load_profile(path)
        if profile.ac_band is None:
            continue
        stem = os.path.splitext(os.path.basename(path))[0]
        for name in (profile.name, stem):
            if name.strip():
                bands.setdefault(name.strip().casefold(), (profile.ac_band, path))
    return bands


def flag_readings_outside_bands(board: Board, readings: Sequence[Reading] | None,
                                source: str | None = None) -> list[str]:
    """Warn about each small-signal reading outside its named meter's band.

    Parameters
    ----------
    board : Board
        The board (its ``[bench] instruments`` and ``[signal] frequency``).
    readings : sequence of Reading or None
        The readings (None: design mode, nothing to check).
    source : str, optional
        Where they came from, for the messages: the readings file, or ``session ID``.

    Returns
    -------
    list of str
        The warnings (a listed file that is missing, then each reading flagged), each
        also noted with :func:`reconcile.errors.warn_input`.
    """
    if not readings or not board.bench.instruments:
        return []
    out: list[str] = []
    bands = _bands_by_name(board, out)
    for reading in readings:
        spec = REGISTRY.get(reading.quantity)
        found = bands.get(reading.instrument.strip().casefold())
        if found is None or spec is None or not spec.small_signal:
            continue
        band, path = found
        f = board.signal.frequency if reading.frequency is None else reading.frequency
        if band.contains(f):
            continue
        line = "" if reading.line is None else f":{reading.line}"
        prefix = f"{source or 'readings'}{line}: "
        message = (
            f"{prefix}{reading.quantity} at {format_si(f, 'Hz', 4)} names instrument "
            f"{reading.instrument.strip()!r}, whose AC accuracy is specified from "
            f"{band.text} only ({path}); the reading is kept, but its uncertainty "
            "has no specification behind it there")
        out.append(message)
    for message in out:
        warn_input(message)
    return out
