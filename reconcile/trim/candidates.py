"""What a rework may change: standard-value candidates for every trimmable resistor,
and for the capacitors a corner limit calls for.

Two kinds of change are offered for a resistor whose ``trim`` flag is true:

* ``replace``: desolder it and fit a standard value of its series;
* ``parallel``: tack a standard-value part across it (no desoldering). Two resistances
  in parallel combine as R_a·R_b/(R_a + R_b), the product over the sum (common practice,
  from Ohm's and Kirchhoff's laws).

The series of a part follows from its tolerance (:func:`reconcile.eseries.series_for_tolerance`,
a 1 % part takes E96) unless the caller names one; the new part has the tolerance of the
part it replaces or joins (same stock, same footprint, same rating).

Which values are worth trying (:class:`CandidateWindow`):

* a replacement anywhere from ``1/replace_span`` of the lower to ``replace_span`` times
  the higher of the drawn and the built value (default 2: a rework that needs more than
  a factor of two is a redesign, and the window always holds the drawn value, which is
  the fix for a wrong part loaded);
* a parallel part that brings the built value down to between ``parallel_min_ratio``
  (default 0.5: the added part no larger than the one already there would be a
  replacement in all but name) and ``1 - parallel_min_trim`` (default 0.98: a trim under
  2 % is below what the built value and the new part's tolerance let one aim at);
* parallel parts whose combined value lies within ``parallel_resolution`` times the
  part's tolerance (default 0.5: 0.5 % for a 1 % part) of the last one kept, going up
  from the largest trim, are skipped: they are the same rework to within what the
  built part is known to without a measurement (for large added values neighbouring
  E-series steps move the combination by a small fraction of a percent).

Capacitors (only those :func:`reconcile.trim.rework.trim` names: the ones a missed
``[spec]`` corner limit calls for) get the same two kinds of change, from E12 for a part
of ±10 % or tighter and E6 otherwise (IEC 60063; the values capacitors are stocked in);
the new part has the tolerance of the part it replaces or joins (the board's own,
``tolerance`` under ``[capacitors.X]``, default ±20 %):

* ``replace``: any value from ``1/capacitor_span`` to ``capacitor_span`` times the built
  value (default 10: a corner moves about as 1/C, so a decade either way);
* ``parallel``: a part tacked across it, capacitances in parallel adding (C_a + C_b,
  basic circuit theory), the total from 1.1 to ``capacitor_span`` times the built value,
  thinned as for resistors.

These windows are our own engineering choices; :class:`CandidateWindow` makes them
configurable.
"""

from __future__ import annotations

import typing

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass

import numpy as np

from reconcile.model.board import Board, Capacitor, Resistor
from reconcile.errors import InputError
from reconcile.model.eseries import series_for_tolerance, values_in_range
from reconcile.model.kinds import ReworkAction

ACTIONS = typing.get_args(ReworkAction)
REPLACE, PARALLEL = 0, 1

SeriesChoice = Mapping[str, str] | Callable[[Resistor], str] | None


def parallel_ohms(r_a: np.ndarray | float, r_b: np.ndarray | float) -> np.ndarray:
    """Two resistances in parallel, R_a·R_b/(R_a + R_b), in ohms.

    Written as 1/(1/R_a + 1/R_b) so that an infinite resistance (an open) leaves the
    other one unchanged.
    """
    a = np.asarray(r_a, dtype=float)
    b = np.asarray(r_b, dtype=float)
    with np.errstate(divide="ignore"):
        return 1.0 / (1.0 / a + 1.0 / b)


@dataclass(frozen=True)
class CandidateWindow:
    """Which standard values are tried (see the module docstring for the defaults)."""

    replace_span: float = 2.0
    parallel_min_ratio: float = 0.5
    parallel_min_trim: float = 0.02
    parallel_resolution: float = 0.5
    capacitor_span: float = 10.0

    def __post_init__(self) -> None:
        if not (math.isfinite(self.capacitor_span) and self.capacitor_span > 1.1):
            raise InputError(
                f"capacitor_span must be a number above 1.1, got {self.capacitor_span!r}")
        if not (math.isfinite(self.parallel_resolution) and self.parallel_resolution >= 0.0):
            raise InputError(
                f"parallel_resolution must be a number >= 0, got {self.parallel_resolution!r}"
            )
        if not (math.isfinite(self.replace_span) and self.replace_span > 1.0):
            raise InputError(f"replace_span must be a number above 1, got {self.replace_span!r}")
        if not 0.0 < self.parallel_min_ratio < 1.0 - self.parallel_min_trim < 1.0:
            raise InputError(
                "parallel window needs 0 < parallel_min_ratio < 1 - parallel_min_trim < 1, got "
                f"{self.parallel_min_ratio!r} and {self.parallel_min_trim!r}"
            )


@dataclass(frozen=True)
class Singles:
    """Every single change, flat: row k changes part column ``column[k]``.

    Part columns are the resistors in engine order, then the capacitors
    (``n_resistors`` onwards). ``new_value`` is the new part's value (ohms or farads);
    ``combined_value`` the position's value after the change with the built part in
    place (the new value for a replacement, the parallel combination otherwise).
    """

    column: np.ndarray  # (K,) part column
    action: np.ndarray  # (K,) REPLACE | PARALLEL
    new_value: np.ndarray  # (K,)
    combined_value: np.ndarray  # (K,)
    tolerance: np.ndarray  # (K,) of the new part, fraction
    series: tuple[str, ...]  # per part column ('' when the part is not changed)
    refs: tuple[str, ...]  # per part column
    n_resistors: int = -1  # -1: every column is a resistor

    @property
    def size(self) -> int:
        return int(self.column.shape[0])

    @property
    def resistor_count(self) -> int:
        return len(self.refs) if self.n_resistors < 0 else self.n_resistors

    def is_capacitor(self, index: np.ndarray) -> np.ndarray:
        """Whether single change(s) ``index`` change a capacitor."""
        return self.column[index] >= self.resistor_count

    def count_per_column(self) -> np.ndarray:
        return np.bincount(self.column, minlength=len(self.refs))


def _thin(values: np.ndarray, combined: np.ndarray, resolution: float) -> np.ndarray:
    """Keep values whose (ascending) combination is at least ``resolution`` (relative)
    above the last one kept."""
    if resolution <= 0.0 or values.size == 0:
        return values
    keep = [0]
    for i in range(1, values.size):
        if combined[i] >= combined[keep[-1]] * (1.0 + resolution):
            keep.append(i)
    return values[keep]


def resolve_series(part: Resistor, series_for: SeriesChoice) -> str:
    """The E-series a part's replacement or parallel value comes from."""
    if series_for is None:
        return series_for_tolerance(part.tolerance)
    if callable(series_for):
        name = series_for(part)
    else:
        name = series_for.get(part.ref) or series_for_tolerance(part.tolerance)
    values_in_range(name, 1.0, 1.0)  # raises InputError for an unknown series
    return name


def capacitor_series(part: Capacitor) -> str:
    """E12 for a capacitor of ±10 % or tighter, E6 otherwise (see the module docstring)."""
    return "E12" if part.tolerance <= 0.10 + 1e-12 else "E6"


def _capacitor_values(part: Capacitor, name: str, c_b: float,
                      window: CandidateWindow) -> tuple[np.ndarray, np.ndarray]:
    """(replacement values, parallel values) for a capacitor built as ``c_b`` farads."""
    span = window.capacitor_span
    rep = values_in_range(name, c_b / span, c_b * span)
    par = values_in_range(name, 0.1 * c_b, (span - 1.0) * c_b)
    par = _thin(par, c_b + par, window.parallel_resolution * part.tolerance)
    return rep, par


def single_candidates(
    board: Board,
    resistor_refs: tuple[str, ...],
    built_ohms: np.ndarray,
    *,
    series_for: SeriesChoice = None,
    window: CandidateWindow | None = None,
    capacitor_refs: tuple[str, ...] = (),
    built_farads: np.ndarray | None = None,
    capacitors_to_try: frozenset[str] = frozenset(),
) -> Singles:
    """Every standard-value replacement and parallel part for each trimmable resistor,
    and for each trimmable capacitor in ``capacitors_to_try``.

    Parameters
    ----------
    board
        The board as drawn (tolerances, ``trim`` flags, drawn values).
    resistor_refs
        Resistor refs in engine column order.
    built_ohms
        The built value of each resistor (fitted, or drawn in design mode), ohms.
    series_for
        A mapping ref -> series name, or a function of the part; default by tolerance.
    window
        Which values to try; default :class:`CandidateWindow`.
    capacitor_refs, built_farads
        Capacitor refs in engine column order and their built values, farads.
    capacitors_to_try
        The capacitors that may be changed (see :func:`reconcile.trim.rework.trim`).
    """
    if isinstance(series_for, Mapping):
        unknown = sorted(set(series_for) - set(resistor_refs))
        if unknown:
            raise InputError(f"series given for unknown resistor(s): {', '.join(unknown)}")
    window = window or CandidateWindow()
    cols, acts, new, comb, tols = [], [], [], [], []
    series_names: list[str] = []
    for col, ref in enumerate(resistor_refs):
        part = board.resistors[ref]
        if not part.trim:
            series_names.append("")
            continue
        name = resolve_series(part, series_for)
        series_names.append(name)
        r_b = float(built_ohms[col])
        lo = min(part.ohms, r_b) / window.replace_span
        hi = max(part.ohms, r_b) * window.replace_span
        rep = values_in_range(name, lo, hi)
        k_lo, k_hi = window.parallel_min_ratio, 1.0 - window.parallel_min_trim
        par = values_in_range(name, r_b * k_lo / (1.0 - k_lo), r_b * k_hi / (1.0 - k_hi))
        par = _thin(par, parallel_ohms(r_b, par), window.parallel_resolution * part.tolerance)
        for action, values, combined in (
            (REPLACE, rep, rep),
            (PARALLEL, par, parallel_ohms(r_b, par)),
        ):
            cols.append(np.full(values.shape, col, dtype=np.intp))
            acts.append(np.full(values.shape, action, dtype=np.int8))
            new.append(values)
            comb.append(np.asarray(combined, dtype=float))
            tols.append(np.full(values.shape, part.tolerance))
    n_r = len(resistor_refs)
    for k, ref in enumerate(capacitor_refs):
        part = board.capacitors[ref]
        c_b = math.nan if built_farads is None else float(built_farads[k])
        if ref not in capacitors_to_try or not part.trim or not c_b > 0.0:
            series_names.append("")
            continue
        name = capacitor_series(part)
        series_names.append(name)
        rep, par = _capacitor_values(part, name, c_b, window)
        for action, values, combined in ((REPLACE, rep, rep), (PARALLEL, par, c_b + par)):
            cols.append(np.full(values.shape, n_r + k, dtype=np.intp))
            acts.append(np.full(values.shape, action, dtype=np.int8))
            new.append(values)
            comb.append(np.asarray(combined, dtype=float))
            tols.append(np.full(values.shape, part.tolerance))
    if not cols:
        raise InputError("no part may be changed: every part is marked trim = false")
    return Singles(
        column=np.concatenate(cols),
        action=np.concatenate(acts),
        new_value=np.concatenate(new),
        combined_value=np.concatenate(comb),
        tolerance=np.concatenate(tols),
        series=tuple(series_names),
        refs=tuple(resistor_refs) + tuple(capacitor_refs),
        n_resistors=n_r,
    )
