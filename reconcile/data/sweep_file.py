"""The sweep file: transistor sweeps from a curve tracer or source-measure unit.

The sweep file (CSV)
--------------------
One row per point of a curve tracer's or source-measure unit's sweep, any number of
devices in one file::

    # Forward sweeps of a transistor lot; VCE held at 5 V, SMU accuracy in u_*.
    device,vbe,ic,ib,u_vbe,u_ic,u_ib,vce,temperature,note
    D001,0.5823,10.2u,61.9n,0.1m,0.02u,0.5n,5,25 C,
    D001,0.6421,101.5u,0.622u,0.1m,0.1u,1n,5,25 C,

- required columns ``device``, ``vbe``, ``ic``, ``ib``: the base-emitter voltage (V),
  collector current and base current (A) of one point, as measured (a pnp's are
  negative; a device is taken as pnp when all three are negative at every point);
- optional ``u_vbe``, ``u_ic``, ``u_ib``: one standard uncertainty of each, in the
  column's unit (a bare number is V or A, a value string such as ``20n`` stands for
  itself, ``0.1%`` is relative to the reading); blank means the bench-meter default
  of :data:`reconcile.readings.DEFAULT_UNCERTAINTY` (``voltage`` and ``current``);
- optional ``vce`` (V): the collector-emitter voltage of the point; when given, the
  Early factor is divided out (see below) and points that are not forward-active are
  flagged;
- optional ``temperature`` (``25 C``, ``298.15 K``; default 25 C) and ``note``.

Values are value strings (:mod:`reconcile.values`): ``0.652``, ``1.2m``, ``10u``,
``61.9n``. Header names are case-insensitive; ``#`` lines and blank lines are skipped.
Every bad row is reported, with file and line, in one :class:`~reconcile.errors.InputErrors`.
The format is its own file rather than rows of the readings file because a point is
three simultaneous values that belong together, and a readings ``quantity`` names a
board reading, not a device sweep.

The extraction
--------------

Only the file format lives here; the extraction of IS, n and beta from a sweep set is
:mod:`reconcile.lot.extraction`, invented sweeps :mod:`reconcile.lot.sweep_simulator`.
"""

from __future__ import annotations

import csv
import difflib
import math
import os
from dataclasses import dataclass

import numpy as np

from reconcile.data import csv_rows
from reconcile.data.readings import COUNTS_FULL_SCALE, DEFAULT_UNCERTAINTY, UncertaintyRule
from reconcile.errors import InputError, InputErrors
from reconcile.model.quantities import MIN_RELATIVE_UNCERTAINTY
from reconcile.model.text_files import read_text
from reconcile.model.values import ZERO_CELSIUS_K, parse_tolerance, parse_value

__all__ = [
    "SWEEP_COLUMNS",
    "SweepSet",
    "is_sweep_text",
    "load_sweeps",
    "sweeps_from_text",
    "sweeps_to_csv",
]

SWEEP_COLUMNS = ("device", "vbe", "ic", "ib", "u_vbe", "u_ic", "u_ib", "vce", "temperature", "note")
_REQUIRED = ("device", "vbe", "ic", "ib")
_KIND = {"vbe": "volts", "ic": "amps", "ib": "amps", "u_vbe": "volts", "u_ic": "amps",
         "u_ib": "amps", "vce": "volts"}

#: Magnitudes a nonzero sweep value may have, V or A (docs/formats.md §3.1): a forward
#: biased silicon junction reads well under 2 V; no source-measure unit resolves a femtoamp
#: point into a fit, and a small-signal lot sweep stays far below 10 A.
SWEEP_LIMITS = {"vbe": (1e-6, 2.0), "ic": (1e-15, 10.0), "ib": (1e-15, 10.0),
                "vce": (0.0, 1000.0)}

DEFAULT_TEMPERATURE_K = ZERO_CELSIUS_K + 25.0
"""Temperature of rows with no ``temperature`` cell: 25 C."""


@dataclass(frozen=True)
class SweepSet:
    """Sweeps of D devices, K points at most, in the npn frame (magnitudes).

    Arrays are (D, K), padded with NaN where a device has fewer points (``mask`` is
    False there). Units: V and A; ``temperature_k`` is (D,) in kelvin, ``polarity``
    (D,) +1 for npn, −1 for pnp. ``vce`` is NaN where the file gave none.
    """

    devices: tuple[str, ...]
    vbe: np.ndarray
    ic: np.ndarray
    ib: np.ndarray
    u_vbe: np.ndarray
    u_ic: np.ndarray
    u_ib: np.ndarray
    vce: np.ndarray
    mask: np.ndarray
    temperature_k: np.ndarray
    polarity: np.ndarray
    path: str = "<text>"

    @property
    def n_devices(self) -> int:
        return len(self.devices)

    @property
    def points(self) -> np.ndarray:
        """Number of points of each device, (D,)."""
        return self.mask.sum(axis=1)

    def take(self, index: np.ndarray | slice) -> SweepSet:
        """The sweeps of a subset of devices."""
        idx = np.arange(self.n_devices)[index]
        return SweepSet(
            devices=tuple(self.devices[i] for i in idx),
            vbe=self.vbe[idx], ic=self.ic[idx], ib=self.ib[idx], u_vbe=self.u_vbe[idx],
            u_ic=self.u_ic[idx], u_ib=self.u_ib[idx], vce=self.vce[idx], mask=self.mask[idx],
            temperature_k=self.temperature_k[idx], polarity=self.polarity[idx], path=self.path,
        )


# ------------------------------------------------------------------------ loading
def is_sweep_text(text: str) -> bool:
    """True when the first non-comment line is a sweep header (has vbe, ic and ib)."""
    found = csv_rows.first_line(text)
    if found is None:
        return False
    names = {c.strip().strip('"').lower() for c in found[1].split(",")}
    return {"vbe", "ic", "ib"} <= names


def load_sweeps(path: str | os.PathLike[str], *, temperature_k: float | None = None) -> SweepSet:
    """Read a sweep file (see the module docstring).

    Parameters
    ----------
    path
        The CSV file (UTF-8, a byte-order mark is allowed).
    temperature_k
        Temperature of rows with a blank ``temperature`` cell (default 25 C).

    Raises
    ------
    InputError
        The file cannot be read.
    InputErrors
        The header or some rows are wrong; every problem is listed with its line.
    """
    name, text = read_text(path, "sweep file")
    return sweeps_from_text(text, path=name, temperature_k=temperature_k)


def _number(cell: str, kind: str) -> float:
    try:
        return float(cell)
    except ValueError:
        return parse_value(cell, kind)


def _uncertainty_cell(cell: str, kind: str, value: float) -> float:
    if cell.endswith("%"):
        return parse_tolerance(cell) * abs(value)
    return abs(_number(cell, kind))


def _default_u(rule: UncertaintyRule, value: np.ndarray) -> np.ndarray:
    """``rule.standard`` over an array (the same rule, vectorised)."""
    mag = np.abs(value)
    limits = rule.relative * mag + rule.absolute
    if rule.ranges:
        ranges = np.asarray(rule.ranges)
        i = np.minimum(np.searchsorted(ranges, mag, side="right"), len(ranges) - 1)
        limits = limits + rule.counts * ranges[i] / COUNTS_FULL_SCALE
    return limits / rule.divisor


def _header_index(header: list[str], header_line: int, path: str) -> dict[str, int]:
    """Column name → position; every bad or missing column raised together."""
    errors: list[InputError] = []
    index: dict[str, int] = {}
    for i, name in enumerate(header):
        if name not in SWEEP_COLUMNS:
            close = difflib.get_close_matches(name, SWEEP_COLUMNS, n=1, cutoff=0.6)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            errors.append(InputError(
                f"unknown column {name!r}{hint}; the columns are {', '.join(SWEEP_COLUMNS)}",
                path=path, line=header_line,
            ))
        elif name in index:
            errors.append(InputError(f"column {name!r} appears twice", path=path, line=header_line))
        else:
            index[name] = i
    for name in _REQUIRED:
        if name not in index:
            errors.append(InputError(f"missing required column {name!r} in the header",
                                     path=path, line=header_line))
    if errors:
        raise InputErrors(errors)
    return index


def _parse_row(
    cells: list[str], index: dict[str, int], t_default: float
) -> tuple[str, dict[str, float], float, list[str]]:
    """One point: its device, values (NaN where blank), temperature, and its problems."""

    def cell(name: str) -> str:
        i = index.get(name)
        return cells[i] if i is not None and i < len(cells) else ""

    device = cell("device")
    problems: list[str] = []
    if not device:
        problems.append("the device column is blank")
    values: dict[str, float] = {}
    for name in ("vbe", "ic", "ib", "vce"):
        text_cell = cell(name)
        if not text_cell:
            if name != "vce":
                problems.append(f"{name} has no value")
            values[name] = math.nan
            continue
        try:
            values[name] = _number(text_cell, _KIND[name])
        except InputError as err:
            problems.append(f"{name}: {err.message}")
            continue
        if not math.isfinite(values[name]):
            problems.append(f"{name} value {text_cell!r} must be finite")
            continue
        low, high = SWEEP_LIMITS[name]
        if values[name] != 0.0 and not low <= abs(values[name]) <= high:
            unit = "V" if _KIND[name] == "volts" else "A"
            problems.append(f"{name} {text_cell!r} is beyond what a transistor sweep reads "
                            f"(|{name}| from {low:g} {unit} to {high:g} {unit}; "
                            "docs/formats.md §3.1)")
    for name, of in (("u_vbe", "vbe"), ("u_ic", "ic"), ("u_ib", "ib")):
        text_cell = cell(name)
        if not text_cell:
            values[name] = math.nan
            continue
        try:
            u = _uncertainty_cell(text_cell, _KIND[name], values.get(of, math.nan))
        except InputError as err:
            problems.append(f"{name}: {err.message}")
            continue
        if not (u > 0.0 and math.isfinite(u)):
            problems.append(f"{name} {text_cell!r} must be a positive standard uncertainty, "
                            "or blank for the default")
        elif u < max(1e-18, MIN_RELATIVE_UNCERTAINTY * abs(values.get(of, 0.0))):
            problems.append(f"{name} {text_cell!r} is below 1e-9 of the reading (and 1e-18); "
                            "no instrument resolves that (docs/formats.md §3.3)")
        values[name] = u
    t_cell = cell("temperature")
    t = t_default
    if t_cell:
        try:
            t = parse_value(t_cell, "temperature")
        except InputError as err:
            problems.append(f"temperature: {err.message}")
    return device, values, t, problems


def sweeps_from_text(
    text: str, path: str = "<text>", *, temperature_k: float | None = None
) -> SweepSet:
    """Parse sweep CSV text; see :func:`load_sweeps`."""
    t_default = DEFAULT_TEMPERATURE_K if temperature_k is None else float(temperature_k)
    split = csv_rows.read_rows(text, path)
    header_line, header_cells = split.header(",".join(SWEEP_COLUMNS[:4]), path)
    header = [c.strip().lower() for c in header_cells]
    index = _header_index(header, header_line, path)

    errors: list[InputError] = list(split.errors)
    names: list[str] = []
    cols = {c: [] for c in ("vbe", "ic", "ib", "u_vbe", "u_ic", "u_ib", "vce", "t")}
    line_of: list[int] = []
    for line, row in split.body:
        cells = [c.strip() for c in row]
        device, values, t, problems = _parse_row(cells, index, t_default)
        if problems:
            errors.extend(InputError(p, path=path, line=line) for p in problems)
            continue
        names.append(device)
        line_of.append(line)
        for name in ("vbe", "ic", "ib", "u_vbe", "u_ic", "u_ib", "vce"):
            cols[name].append(values[name])
        cols["t"].append(t)
    if errors:
        raise InputErrors(sorted(errors, key=lambda e: e.line or 0))
    if not names:
        raise InputErrors([InputError("the sweep file has no points", path=path)])
    return _assemble(names, {k: np.asarray(v, dtype=float) for k, v in cols.items()},
                     np.asarray(line_of), path)


def _assemble(
    names: list[str], cols: dict[str, np.ndarray], lines: np.ndarray, path: str
) -> SweepSet:
    """Pad rows into (D, K) arrays, check signs and point counts, fill default u."""
    order_names, first = np.unique(np.asarray(names, dtype=object), return_index=True)
    by_first = np.argsort(first)
    device_names = [str(order_names[i]) for i in by_first]
    code_of = {d: i for i, d in enumerate(device_names)}
    dev = np.fromiter((code_of[n] for n in names), dtype=np.intp, count=len(names))
    d_count = len(device_names)
    order = np.argsort(dev, kind="stable")
    counts = np.bincount(dev, minlength=d_count)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    pos = np.arange(len(names)) - np.repeat(starts, counts)
    rows_d, rows_k = dev[order], pos
    k_max = int(counts.max())

    def pad(values: np.ndarray) -> np.ndarray:
        out = np.full((d_count, k_max), np.nan)
        out[rows_d, rows_k] = values[order]
        return out

    mask = np.zeros((d_count, k_max), dtype=bool)
    mask[rows_d, rows_k] = True
    vbe, ic, ib, vce = pad(cols["vbe"]), pad(cols["ic"]), pad(cols["ib"]), pad(cols["vce"])
    line = np.zeros((d_count, k_max), dtype=np.intp)
    line[rows_d, rows_k] = lines[order]
    errors: list[InputError] = []
    neg = np.where(mask, (vbe < 0) & (ic < 0) & (ib < 0), True).all(axis=1)
    pos_ok = np.where(mask, (vbe > 0) & (ic > 0) & (ib > 0), True).all(axis=1)
    polarity = np.where(neg, -1.0, 1.0)
    for d in np.flatnonzero(~(neg | pos_ok)):
        bad = np.flatnonzero(mask[d] & ~((vbe[d] > 0) & (ic[d] > 0) & (ib[d] > 0)))
        errors.append(InputError(
            f"device {device_names[d]!r}: vbe, ic and ib must all be positive (npn) or all "
            "negative (pnp) at every point, with ic and ib nonzero",
            path=path, line=int(line[d, bad[0]]),
        ))
    for d in np.flatnonzero(counts < 2):
        errors.append(InputError(
            f"device {device_names[d]!r} has {counts[d]} point; the extraction needs at least two",
            path=path, line=int(line[d, 0]),
        ))
    flip = polarity[:, None]
    vbe, ic, ib, vce = vbe * flip, ic * flip, ib * flip, vce * flip
    masked = np.where(mask, vbe, np.nan)
    spread = np.nanmax(masked, axis=1) - np.nanmin(masked, axis=1)
    for d in np.flatnonzero((counts >= 2) & ~(spread > 0)):
        errors.append(InputError(
            f"device {device_names[d]!r}: every point has the same vbe; the sweep needs at "
            "least two different values", path=path, line=int(line[d, 0]),
        ))
    if errors:
        raise InputErrors(errors)
    u_vbe, u_ic, u_ib = pad(cols["u_vbe"]), pad(cols["u_ic"]), pad(cols["u_ib"])
    u_vbe = np.where(np.isnan(u_vbe), _default_u(DEFAULT_UNCERTAINTY["voltage"], vbe), u_vbe)
    u_ic = np.where(np.isnan(u_ic), _default_u(DEFAULT_UNCERTAINTY["current"], ic), u_ic)
    u_ib = np.where(np.isnan(u_ib), _default_u(DEFAULT_UNCERTAINTY["current"], ib), u_ib)
    t = np.bincount(dev, weights=cols["t"], minlength=d_count) / counts
    return SweepSet(
        tuple(device_names), vbe, ic, ib, u_vbe, u_ic, u_ib, vce, mask, t, polarity, path
    )


def sweeps_to_csv(sweeps: SweepSet) -> str:
    """A sweep set as sweep-file text (as measured: a pnp's values negative)."""
    import io

    out = io.StringIO()
    has_vce = bool(np.any(np.isfinite(sweeps.vce[sweeps.mask])))
    cols = ["device", "vbe", "ic", "ib", "u_vbe", "u_ic", "u_ib"] + (["vce"] if has_vce else [])
    cols.append("temperature")
    w = csv.writer(out, lineterminator="\n")
    w.writerow(cols)
    for d, name in enumerate(sweeps.devices):
        s = sweeps.polarity[d]
        for k in np.flatnonzero(sweeps.mask[d]):
            row = [name, f"{s * sweeps.vbe[d, k]:.7g}", f"{s * sweeps.ic[d, k]:.6g}",
                   f"{s * sweeps.ib[d, k]:.6g}", f"{sweeps.u_vbe[d, k]:.3g}",
                   f"{sweeps.u_ic[d, k]:.3g}", f"{sweeps.u_ib[d, k]:.3g}"]
            if has_vce:
                v = sweeps.vce[d, k]
                row.append(f"{s * v:.6g}" if math.isfinite(v) else "")
            row.append(f"{sweeps.temperature_k[d]:.6g} K")
            w.writerow(row)
    return out.getvalue()

