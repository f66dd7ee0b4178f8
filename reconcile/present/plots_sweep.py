"""The Bode plot of ``solve --sweep --plot`` and the report: |gain| in dB and phase
against frequency, the −3 dB corners marked, and gain readings with their ±u when given.

Figures are built as :class:`matplotlib.figure.Figure` objects (no pyplot, no process-wide
backend), so a notebook's own backend is left alone."""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np

from reconcile.engine.sweep import BoardSweep
from reconcile.present.escape import plot_text

COLOUR_MODEL = "#c4512b"
COLOUR_READING = "#1b6a8a"
COLOUR_CORNER = "#8a8a8a"


def bode_figure(sw: BoardSweep, readings: list[tuple[float, float, float]] = (), title: str = ""):
    """Magnitude (dB) over phase (degrees) against log frequency. ``readings`` holds
    (frequency Hz, |gain|, standard uncertainty of |gain|) to draw with ±u bars."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(8, 6), layout="constrained")
    ax_m, ax_p = fig.subplots(2, 1, sharex=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        db = 20.0 * np.log10(sw.gain)
    ax_m.semilogx(sw.frequency, db, color=COLOUR_MODEL, lw=1.6, label="model")
    ax_p.semilogx(sw.frequency, sw.gain_phase_deg, color=COLOUR_MODEL, lw=1.6)
    if math.isfinite(sw.midband_gain):
        ax_m.axhline(20 * math.log10(sw.midband_gain) - 3.0103, color=COLOUR_CORNER, lw=0.8,
                     ls=":", label="mid-band − 3 dB")
    for name, corner in (("low corner", sw.low_corner), ("high corner", sw.high_corner)):
        if math.isfinite(corner) and sw.frequency[0] <= corner <= sw.frequency[-1]:
            for ax in (ax_m, ax_p):
                ax.axvline(corner, color=COLOUR_CORNER, lw=0.8, ls="--")
            ax_m.annotate(f"{name}\n{corner:.4g} Hz", (corner, ax_m.get_ylim()[0]),
                          xytext=(4, 6), textcoords="offset points", fontsize=8)
    if readings:
        f, g, u = (np.asarray(x, dtype=float) for x in zip(*readings, strict=True))
        with np.errstate(divide="ignore", invalid="ignore"):
            y = 20 * np.log10(g)
            lo = y - 20 * np.log10(np.maximum(g - u, g * 1e-6))
            hi = 20 * np.log10(g + u) - y
        ax_m.errorbar(f, y, yerr=[lo, hi], fmt="o", color=COLOUR_READING, capsize=3,
                      label="readings ± u")
    ax_m.set_ylabel("|gain|  [dB]")
    ax_p.set_ylabel("phase  [°]")
    ax_p.set_xlabel("frequency  [Hz]")
    ax_m.grid(True, which="both", alpha=0.3)
    ax_p.grid(True, which="both", alpha=0.3)
    ax_m.legend(loc="lower center", fontsize=8)
    ax_m.set_title(plot_text(title) if title else "Frequency response")
    return fig


def plot_bode(sw: BoardSweep, path: str | Path, readings=(), title: str = "") -> Path:
    """Write the Bode plot to ``path`` (its extension picks the format)."""
    out = Path(path)
    bode_figure(sw, readings, title).savefig(out, dpi=110)
    return out


def bode_png(sw: BoardSweep, readings=(), title: str = "") -> bytes:
    buf = io.BytesIO()
    bode_figure(sw, readings, title).savefig(buf, format="png", dpi=100)
    return buf.getvalue()


def report_range(sw_corners) -> tuple[float, float]:
    """Sweep limits for the report: 1 Hz to 10 MHz, widened to a decade and a half
    beyond either corner."""
    lo, hi = 1.0, 1e7
    low, high = float(sw_corners.low_corner[0]), float(sw_corners.high_corner[0])
    if math.isfinite(low):
        lo = min(lo, low / 30.0)
    if math.isfinite(high):
        hi = max(hi, high * 30.0)
    return lo, hi


def fitted_response_png(fit) -> bytes | None:
    """The fitted board's Bode plot with the gain readings (±u) at the board's signal
    frequency, for the report; None for a board with no signal path or no capacitance."""
    sol = fit.predicted_solution()
    board = fit.board
    if sol.batch.linear is None or not board.capacitors:
        return None
    lo, hi = report_range(sol.corners)
    sw = sol.sweep(np.logspace(math.log10(lo), math.log10(hi), 200))
    f0 = board.signal.frequency
    readings = [(f0, r.measured, r.uncertainty) for r in fit.readings if r.quantity == "gain"]
    return bode_png(sw, readings, title="Frequency response of the fitted board")
