"""When a reading has settled: N consecutive values that agree within a band.

After the probe goes on (or a relay closes) a node takes a moment to settle: the
meter's input capacitance charges through the node's resistance, the operator's hand
steadies, a thermal drift dies away. :func:`settle` reads again and again and takes the
reading when the last ``count`` values agree::

    spread = max(window) − min(window)
    band   = max(band_abs, band_rel · |mean(window)|)
    settled when spread <= band

and gives up with :class:`SettleError` after ``max_samples`` values. The reading is the
mean of the settled window; its Type A standard uncertainty is the experimental standard
deviation of that mean, ``s/√count`` (JCGM 100:2008, GUM 4.2.3). The band rule is common
practice for bench data logging (an absolute floor for readings near zero, a relative
part for large ones); the defaults are in :mod:`instruments.capture`.
"""

from __future__ import annotations

import math
import statistics
from collections.abc import Callable
from dataclasses import dataclass

from reconcile.errors import InputError, InstrumentError
from reconcile.model.values import format_si

__all__ = ["SettleRule", "Settled", "SettleError", "settle"]


class SettleError(InstrumentError):
    """A reading did not settle within the allowed number of samples."""


@dataclass(frozen=True)
class SettleRule:
    """How many values must agree, how closely, and how long to try.

    Parameters
    ----------
    count : int
        Consecutive values that must agree (>= 2).
    band_abs : float
        Absolute part of the band, in the reading's unit (V, A); > 0.
    band_rel : float
        Relative part of the band (``1e-4`` = 100 ppm of the reading); >= 0.
    max_samples : int
        Values read at most before giving up (>= ``count``).
    """

    count: int = 3
    band_abs: float = 1e-4
    band_rel: float = 1e-4
    max_samples: int = 50

    def __post_init__(self) -> None:
        if isinstance(self.count, bool) or not isinstance(self.count, int) or self.count < 2:
            raise InputError(
                f"the settle count must be a whole number >= 2 (values that must agree), "
                f"got {self.count!r}", key="settle_count")
        if not (isinstance(self.max_samples, int) and self.max_samples >= self.count):
            raise InputError(
                f"max_samples must be a whole number >= the settle count {self.count}, "
                f"got {self.max_samples!r}", key="max_samples")
        if not (math.isfinite(self.band_abs) and self.band_abs > 0):
            raise InputError(f"the settle band must be a finite number > 0, got "
                             f"{self.band_abs!r}", key="settle_band")
        if not (math.isfinite(self.band_rel) and self.band_rel >= 0):
            raise InputError(f"the relative settle band must be a finite number >= 0, got "
                             f"{self.band_rel!r}", key="settle_relative")

    def band(self, center: float) -> float:
        """``max(band_abs, band_rel·|center|)``, in the reading's unit."""
        return max(self.band_abs, self.band_rel * abs(center))


@dataclass(frozen=True)
class Settled:
    """A settled reading.

    Attributes
    ----------
    value : float
        Mean of the settled window.
    window : tuple of float
        The ``count`` values that agreed.
    samples : int
        Values read in all (including those before settling).
    spread : float
        ``max(window) − min(window)``.
    band : float
        The band they agreed within.
    """

    value: float
    window: tuple[float, ...]
    samples: int
    spread: float
    band: float

    @property
    def type_a(self) -> float:
        """Standard deviation of the mean of the window, ``s/√n`` (GUM 4.2.3)."""
        return statistics.stdev(self.window) / math.sqrt(len(self.window))


Sample = Callable[[float, int, bool, float | None, float], None]
"""``on_sample(value, sample_number, settled, spread, band)``."""


def settle(
    read: Callable[[], float],
    rule: SettleRule,
    *,
    what: str,
    unit: str,
    resource: str,
    command: str,
    on_sample: Sample | None = None,
    sleep: Callable[[float], None] | None = None,
    interval_s: float = 0.0,
) -> Settled:
    """Read until the last ``rule.count`` values agree within the band.

    Parameters
    ----------
    read : callable
        Returns one value (V, A) per call; its :class:`InstrumentError` passes through.
    rule : SettleRule
        Count, band and sample limit.
    what, unit, resource, command : str
        For messages: ``voltage at b``, ``V``, the instrument's address, the command.
    on_sample : callable, optional
        Told of every value: ``(value, n, settled, spread or None, band)``.
    sleep : callable, optional
        Waits ``interval_s`` between values (``time.sleep`` in use, none in tests).
    interval_s : float
        Time between values, s.

    Returns
    -------
    Settled

    Raises
    ------
    SettleError
        No ``count`` consecutive values agreed within ``max_samples`` values; the message
        names the resource, the command, the spread and the band.
    """
    values: list[float] = []
    spread: float | None = None
    band = rule.band_abs
    for n in range(1, rule.max_samples + 1):
        if n > 1 and sleep is not None and interval_s > 0:
            sleep(interval_s)
        value = float(read())
        values.append(value)
        spread = None
        band = rule.band(value)
        if len(values) >= rule.count:
            window = values[-rule.count:]
            center = statistics.fmean(window)
            spread = max(window) - min(window)
            band = rule.band(center)
            if spread <= band:
                if on_sample is not None:
                    on_sample(value, n, True, spread, band)
                return Settled(center, tuple(window), n, spread, band)
        if on_sample is not None:
            on_sample(value, n, False, spread, band)
    raise SettleError(
        f"{resource}: {what} did not settle: after {rule.max_samples} readings of "
        f"{command!r} the last {rule.count} still spread {format_si(spread or 0.0, unit, 3)}, "
        f"more than the band {format_si(band, unit, 3)} (last value "
        f"{format_si(values[-1], unit, 6)}); check the probe contact and the board's "
        "supply, or widen the settle band"
    )
