"""The −3 dB corners' gradients in the fit's coordinates, from the engine's gain rows.

A corner f_c is where the gain falls to the mid-band gain over √2:

    F(x, f_c) = |A(f_c; x)| − |A(f_m; x)| / √2 = 0

with f_m the frequency of the peak. By the implicit function theorem,

    ∂ln f_c/∂x = −(∂|A(f_c)|/∂x − ∂|A(f_m)|/∂x / √2) / (∂|A|/∂ln f at f_c)

and the peak's own shift does not enter to first order (|A| is stationary in f there:
the envelope theorem). Every term is a gain prediction or a gain row of the measurement
model's Jacobian (:meth:`reconcile.inference.measure.MeasurementModel.jacobian`) at f_c,
f_c·(1 + :data:`LOG_F_STEP`) and f_m, where the corners themselves come from the
engine's root-finding (:func:`reconcile.engine.sweep.find_corners`): no second model of
the physics. The next-reading ranking uses them when ``[spec]`` limits a corner.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from reconcile.inference.measure import Observation

__all__ = ["CornerGoal", "LOG_F_STEP", "corner_observations", "corner_gradients"]

LOG_F_STEP = 1e-4
"""Relative frequency step of the gain's slope at a corner (a forward difference)."""


@dataclass(frozen=True)
class CornerGoal:
    """One spec'd corner: its name (``low_corner``/``high_corner``) and frequency, Hz."""

    name: str
    frequency: float


def corner_observations(goals: list[CornerGoal], peak_hz: float) -> list[Observation]:
    """The gain observations :func:`corner_gradients` needs: at each corner, just above
    it, and at the peak (the last one)."""
    out = []
    for goal in goals:
        f = goal.frequency
        out += [Observation("gain", "", 0.0, 1.0, frequency=f),
                Observation("gain", "", 0.0, 1.0, frequency=f * (1.0 + LOG_F_STEP))]
    out.append(Observation("gain", "", 0.0, 1.0, frequency=peak_hz))
    return out


def corner_gradients(goals: list[CornerGoal], pred: np.ndarray,
                     jac: np.ndarray) -> np.ndarray:
    """Each corner's gradient ∂f_c/∂x (Hz per internal unit), (len(goals), P).

    Parameters
    ----------
    goals : list of CornerGoal
    pred, jac : numpy.ndarray
        Predictions and Jacobian rows of :func:`corner_observations` (in that order).
    """
    peak_row = jac[-1]
    out = np.zeros((len(goals), jac.shape[1]))
    for i, goal in enumerate(goals):
        at, above = 2 * i, 2 * i + 1
        slope = (pred[above] - pred[at]) / math.log1p(LOG_F_STEP)  # ∂|A|/∂ln f
        if not (math.isfinite(slope) and slope != 0.0):
            continue
        d_log_f = -(jac[at] - peak_row / math.sqrt(2.0)) / slope
        out[i] = goal.frequency * d_log_f
    return np.where(np.isfinite(out), out, 0.0)
