"""The fit as a picture: readings against the fitted board, parameters against tolerance."""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from reconcile.inference.fitting import FitResult
from reconcile.present.escape import plot_text

COLOUR_MEASURED = "#1b6a8a"
COLOUR_BAND = "#d9e8cf"
COLOUR_FIT = "#c4512b"
COLOUR_PRIOR = "#8a8a8a"


def draw_readings(ax, fit: FitResult) -> None:
    """Each reading's relative difference from the fitted board, with ±u error bars."""
    readings = fit.readings
    labels = [plot_text(f"{r.quantity} {r.at}".strip()) for r in readings]
    y = np.arange(len(readings))
    rel = [
        (r.measured - r.predicted) / abs(r.predicted) * 100 if r.predicted else 0.0
        for r in readings
    ]
    err = [r.uncertainty / abs(r.predicted) * 100 if r.predicted else 0.0 for r in readings]
    ax.axvline(0.0, color=COLOUR_FIT, lw=1.5, label="fitted board")
    ax.errorbar(rel, y, xerr=err, fmt="o", color=COLOUR_MEASURED, capsize=3, label="measured ± u")
    ax.set_yticks(y, labels)
    ax.invert_yaxis()
    ax.set_xlabel("(measured − predicted) / predicted  [%]")
    ax.set_title("Readings against the fitted board")
    ax.legend(loc="lower right", fontsize=8)


def draw_parameters(ax, fit: FitResult) -> None:
    """Each parameter's fitted value (±2σ) relative to nominal, over its tolerance band."""
    params = list(fit.parameters.values())
    keys = [plot_text(p.key) for p in params]
    y = np.arange(len(params))
    for i, p in enumerate(params):
        if p.tolerance_low is not None and p.tolerance_high is not None and p.nominal:
            lo = (p.tolerance_low / p.nominal - 1) * 100
            hi = (p.tolerance_high / p.nominal - 1) * 100
            ax.barh(i, hi - lo, left=lo, color=COLOUR_BAND, height=0.6)
    vals = [(p.value / p.nominal - 1) * 100 if p.nominal else 0.0 for p in params]
    errs = [2 * p.stderr / abs(p.nominal) * 100 if p.nominal else 0.0 for p in params]
    for i, p in enumerate(params):
        colour = COLOUR_FIT if p.informed_by == "readings" else COLOUR_PRIOR
        ax.errorbar(vals[i], i, xerr=errs[i], fmt="s", color=colour, capsize=3)
    ax.axvline(0.0, color="black", lw=0.8)
    ax.set_yticks(y, keys)
    ax.invert_yaxis()
    ax.set_xlabel("fitted / nominal − 1  [%]  (bar: tolerance band; whisker: ±2σ)")
    ax.set_title("Parameters against their tolerance (grey: prior only)")
    peak = float(np.nanmax(np.abs(vals) + np.abs(errs))) * 1.1 if vals else 5.0
    lim = max(5.0, min(200.0, peak))
    ax.set_xlim(-lim, lim)


def _height(n: int) -> float:
    return max(4.0, 0.38 * n + 1.5)


def plot_fit(fit: FitResult, path: str | Path) -> Path:
    """Write a two-panel PNG: readings (left) and parameters (right)."""
    from matplotlib.figure import Figure

    n = max(len(fit.readings), len(fit.parameters))
    fig = Figure(figsize=(12, _height(n)))
    (ax1, ax2) = fig.subplots(1, 2)
    draw_readings(ax1, fit)
    draw_parameters(ax2, fit)
    fig.tight_layout()
    out = Path(path)
    fig.savefig(out, dpi=110)
    return out


def panel_png(fit: FitResult, which: str) -> bytes:
    """One panel (``readings`` or ``parameters``) as PNG bytes."""
    from matplotlib.figure import Figure

    n = len(fit.readings) if which == "readings" else len(fit.parameters)
    fig = Figure(figsize=(7, _height(n)))
    ax = fig.subplots()
    (draw_readings if which == "readings" else draw_parameters)(ax, fit)
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    return buf.getvalue()
