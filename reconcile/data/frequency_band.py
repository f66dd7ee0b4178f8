"""The frequency band over which an AC meter's accuracy is specified.

An AC voltmeter's data sheet gives its accuracy for a band of test frequencies (a bench
DMM's AC volts typically a few tens of Hz to some tens or hundreds of kHz); outside it
the reading carries no specified accuracy at all, so an uncertainty worked out from the
accuracy table would be unfounded there. An instrument file gives the band as
``band_hz = [low, high]`` in its ``[accuracy.ac_volts]`` table; a capture refuses a
test frequency outside it before it touches the bench, and a hand-typed reading at such
a frequency is flagged. Pure Python.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from reconcile.errors import InputError
from reconcile.model.values import format_si

__all__ = ["FrequencyBand", "BAND_KEY"]

BAND_KEY = "band_hz"
"""The key of the band in an instrument file's ``[accuracy.ac_volts]`` table."""


@dataclass(frozen=True)
class FrequencyBand:
    """Test frequencies from ``low_hz`` to ``high_hz`` (both included), Hz.

    Raises
    ------
    InputError
        A bound that is not a finite number > 0, or ``low_hz`` above ``high_hz``.
    """

    low_hz: float
    high_hz: float

    def __post_init__(self) -> None:
        for name in ("low_hz", "high_hz"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int | float) or not (
                    math.isfinite(value) and value > 0):
                raise InputError(f"a band edge must be a finite number of Hz > 0, got "
                                 f"{value!r}", key=BAND_KEY)
            object.__setattr__(self, name, float(value))
        if self.low_hz > self.high_hz:
            raise InputError(f"the band's low edge {self.low_hz:g} Hz is above its high "
                             f"edge {self.high_hz:g} Hz", key=BAND_KEY)

    @classmethod
    def from_value(cls, value: object) -> FrequencyBand:
        """``[low, high]`` as read from TOML.

        Raises
        ------
        InputError
            Not a list of two numbers, or a bad edge.
        """
        if not isinstance(value, list | tuple) or len(value) != 2:
            raise InputError(f"expected [low, high] in Hz (e.g. [20.0, 100e3]), got {value!r}",
                             key=BAND_KEY)
        return cls(value[0], value[1])

    def contains(self, frequency_hz: float) -> bool:
        """Whether a test frequency lies in the band (edges included, to 1 ppm)."""
        f = float(frequency_hz)
        return self.low_hz * (1 - 1e-6) <= f <= self.high_hz * (1 + 1e-6)

    @property
    def text(self) -> str:
        """``20 Hz to 100 kHz``."""
        return f"{format_si(self.low_hz, 'Hz', 4)} to {format_si(self.high_hz, 'Hz', 4)}"

    def to_list(self) -> list[float]:
        """``[low_hz, high_hz]`` (the shape of the file)."""
        return [self.low_hz, self.high_hz]
