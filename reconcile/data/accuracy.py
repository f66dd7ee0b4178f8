"""Instrument accuracy specifications turned into standard uncertainties.

A meter's data sheet gives its accuracy as a limit, ``±(a % of reading + b % of range)``,
often plus a fixed part (a number of counts, or an offset in the unit). With no other
information about how errors spread inside that limit, JCGM 100:2008 (GUM) 4.3.7 takes
the error as uniformly (rectangularly) distributed between the limits, so the standard
uncertainty of a reading is the half-width divided by √3::

    half_width = |reading| · a/100 + range · b/100 + floor
    u = half_width / √3

A :class:`RangeTable` holds one specification per range and, when the range is not
given, picks the one an autoranging meter settles on: the smallest full scale that
holds the reading, allowing the usual over-range of 20 % (``|reading| <= 1.2 ×
full scale``; common practice for bench DMMs, set it per instrument). Pure Python.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from reconcile.errors import InputError

__all__ = [
    "AccuracySpec",
    "RangeTable",
    "standard_uncertainty",
    "DEFAULT_OVER_RANGE",
]

DEFAULT_OVER_RANGE = 1.2
"""How far past full scale a range still reads, as a factor (120 %, common practice)."""

_SQRT3 = math.sqrt(3.0)


def _check_nonnegative(value: float, key: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError) as exc:
        raise InputError(f"expected a number, got {value!r}", key=key) from exc
    if not (math.isfinite(number) and number >= 0):
        raise InputError(f"must be a finite number >= 0, got {value!r}", key=key)
    return number


@dataclass(frozen=True)
class AccuracySpec:
    """``±(percent_of_reading % of reading + percent_of_range % of range + floor)``.

    Parameters
    ----------
    percent_of_reading : float
        Part proportional to the reading, in percent (``0.0035`` means 0.0035 %).
    percent_of_range : float
        Part proportional to the range's full scale, in percent.
    floor : float
        Fixed part in the reading's unit (e.g. counts × resolution), default 0.
    """

    percent_of_reading: float
    percent_of_range: float
    floor: float = 0.0

    def __post_init__(self) -> None:
        for name in ("percent_of_reading", "percent_of_range", "floor"):
            object.__setattr__(self, name, _check_nonnegative(getattr(self, name), name))

    def limit(self, reading: float, range_: float) -> float:
        """Half-width of the accuracy limit for ``reading`` on ``range_``, in the unit.

        Parameters
        ----------
        reading : float
            The reading, in the unit.
        range_ : float
            Full scale of the range in use, in the unit.
        """
        return (
            abs(float(reading)) * self.percent_of_reading / 100.0
            + abs(float(range_)) * self.percent_of_range / 100.0
            + self.floor
        )

    def to_dict(self) -> dict[str, float]:
        """The three numbers by name."""
        return {
            "percent_of_reading": self.percent_of_reading,
            "percent_of_range": self.percent_of_range,
            "floor": self.floor,
        }


def standard_uncertainty(spec: AccuracySpec, reading: float, range_: float) -> float:
    """Standard uncertainty of a reading from its accuracy limit.

    The limit is read as a rectangular distribution, JCGM 100:2008 4.3.7:
    ``u = half_width / √3``.

    Parameters
    ----------
    spec : AccuracySpec
        The instrument's accuracy on this function and range.
    reading : float
        The reading, in the unit.
    range_ : float
        Full scale of the range in use, in the unit.

    Returns
    -------
    float
        One standard uncertainty, in the unit.
    """
    return spec.limit(reading, range_) / _SQRT3


@dataclass(frozen=True)
class RangeTable:
    """Accuracy specifications per range of one measuring function.

    Parameters
    ----------
    ranges : tuple of (float, AccuracySpec)
        ``(full_scale, spec)`` pairs, full scale in the unit; stored sorted.
    over_range : float
        A range reads up to ``over_range × full_scale`` (default 1.2).
    unit : str
        The unit of readings and full scales, for messages.
    """

    ranges: tuple[tuple[float, AccuracySpec], ...]
    over_range: float = DEFAULT_OVER_RANGE
    unit: str = ""

    def __post_init__(self) -> None:
        if not self.ranges:
            raise InputError("an accuracy table needs at least one range", key="ranges")
        pairs = []
        for full_scale, spec in self.ranges:
            number = _check_nonnegative(full_scale, "range")
            if number == 0:
                raise InputError("a range's full scale must be > 0", key="range")
            if not isinstance(spec, AccuracySpec):
                raise InputError(f"expected an AccuracySpec, got {spec!r}", key="range")
            pairs.append((number, spec))
        pairs.sort(key=lambda p: p[0])
        for (a, _), (b, _) in zip(pairs, pairs[1:], strict=False):
            if math.isclose(a, b, rel_tol=1e-9):
                raise InputError(f"range {a:g}{self._unit()} is given twice", key="range")
        object.__setattr__(self, "ranges", tuple(pairs))
        over = _check_nonnegative(self.over_range, "over_range")
        if over < 1:
            raise InputError(f"over_range must be >= 1, got {self.over_range!r}",
                             key="over_range")
        object.__setattr__(self, "over_range", over)

    @property
    def full_scales(self) -> tuple[float, ...]:
        """The ranges' full scales, smallest first."""
        return tuple(fs for fs, _ in self.ranges)

    def _unit(self) -> str:
        return f" {self.unit}" if self.unit else ""

    def select_range(self, reading: float) -> float:
        """The smallest full scale with ``|reading| <= over_range × full_scale``.

        Raises
        ------
        InputError
            The reading is beyond the largest range.
        """
        size = abs(float(reading))
        for full_scale, _ in self.ranges:
            if size <= self.over_range * full_scale:
                return full_scale
        top = self.ranges[-1][0]
        raise InputError(
            f"reading {reading:g}{self._unit()} is beyond the largest range "
            f"({top:g}{self._unit()} × {self.over_range:g})",
            key="reading",
        )

    def spec_for(self, range_: float) -> AccuracySpec:
        """The specification of the range with full scale ``range_``.

        Raises
        ------
        InputError
            No such range in the table.
        """
        for full_scale, spec in self.ranges:
            if math.isclose(full_scale, float(range_), rel_tol=1e-9):
                return spec
        known = ", ".join(f"{fs:g}" for fs in self.full_scales)
        raise InputError(
            f"no accuracy given for range {range_:g}{self._unit()}; ranges are {known}",
            key="range",
        )

    def limit(self, reading: float, range_: float | None = None) -> float:
        """Half-width of the accuracy limit, picking the range when not given."""
        full_scale = self.select_range(reading) if range_ is None else float(range_)
        spec = self.spec_for(full_scale)
        if abs(float(reading)) > self.over_range * full_scale * (1 + 1e-12):
            raise InputError(
                f"reading {reading:g}{self._unit()} is beyond range {full_scale:g}"
                f"{self._unit()} × {self.over_range:g}",
                key="reading",
            )
        return spec.limit(reading, full_scale)

    def standard_uncertainty(self, reading: float, range_: float | None = None) -> float:
        """Standard uncertainty of ``reading`` (JCGM 100:2008 4.3.7, rectangular).

        Parameters
        ----------
        reading : float
            The reading, in the unit.
        range_ : float, optional
            Full scale of the range used; when omitted, :meth:`select_range` picks it.

        Returns
        -------
        float
            One standard uncertainty, in the unit.
        """
        return self.limit(reading, range_) / _SQRT3

    def to_dict(self) -> dict[str, object]:
        """``{"over_range": ..., "ranges": [{"range": ..., ...spec}]}``."""
        return {
            "over_range": self.over_range,
            "ranges": [{"range": fs, **spec.to_dict()} for fs, spec in self.ranges],
        }
