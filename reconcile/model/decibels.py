"""Gain ratios written in decibels: 20·log10 of a voltage ratio (stdlib only).

A reading in dB is held as the ratio it stands for. Its standard uncertainty is carried
over by first-order propagation (JCGM 100:2008, GUM 5.1.2): with r = 10^(L/20),
dr/dL = r·ln(10)/20, so u(r) = r·ln(10)/20·u(L), and back u(L) = 20/ln(10)·u(r)/r.
"""

from __future__ import annotations

import math

_PER_NEPER = 20.0 / math.log(10.0)  # dB per unit of ln(ratio)


def is_decibels(unit: str) -> bool:
    """Whether a unit cell says dB (any letter case)."""
    return unit.strip().lower() == "db"


def to_ratio(level_db: float) -> float:
    """The voltage ratio of a level in dB."""
    return 10.0 ** (level_db / 20.0)


def to_level(ratio: float) -> float:
    """The level in dB of a voltage ratio (> 0)."""
    return 20.0 * math.log10(ratio)


def ratio_uncertainty(ratio: float, u_db: float) -> float:
    """Standard uncertainty of the ratio from that of its level in dB (GUM 5.1.2)."""
    return ratio * u_db / _PER_NEPER


def level_uncertainty(ratio: float, u_ratio: float) -> float:
    """Standard uncertainty in dB of a ratio's level (GUM 5.1.2)."""
    return _PER_NEPER * u_ratio / ratio
