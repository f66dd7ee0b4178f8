"""The fit as a picture: readings against the fitted board, parameters against tolerance."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .fitting import FitResult

COLOUR_MEASURED = "#1b6a8a"
COLOUR_BAND = "#d9e8cf"
COLOUR_FIT = "#c4512b"
COLOUR_PRIOR = "#8a8a8a"


def plot_fit(fit: FitResult, path: str | Path) -> Path:
    """Write a two-panel PNG: normalised residual of each reading with ±1 error bars,
    and each parameter's fitted value (±2σ) relative to nominal, over its tolerance band."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    readings = fit.readings
    params = list(fit.parameters.values())
    fig, (ax1, ax2) = plt.subplots(
        1, 2, figsize=(12, max(4.0, 0.38 * max(len(readings), len(params)) + 1.5))
    )
    labels = [f"{r.quantity} {r.at}".strip() for r in readings]
    y = np.arange(len(readings))
    rel = [
        (r.measured - r.predicted) / abs(r.predicted) * 100 if r.predicted else 0.0
        for r in readings
    ]
    err = [r.uncertainty / abs(r.predicted) * 100 if r.predicted else 0.0 for r in readings]
    ax1.axvline(0.0, color=COLOUR_FIT, lw=1.5, label="fitted board")
    ax1.errorbar(rel, y, xerr=err, fmt="o", color=COLOUR_MEASURED, capsize=3, label="measured ± u")
    ax1.set_yticks(y, labels)
    ax1.invert_yaxis()
    ax1.set_xlabel("(measured − predicted) / predicted  [%]")
    ax1.set_title("Readings against the fitted board")
    ax1.legend(loc="lower right", fontsize=8)

    keys = [p.key for p in params]
    y2 = np.arange(len(params))
    for i, p in enumerate(params):
        if p.tolerance_low is not None and p.tolerance_high is not None and p.nominal:
            lo = (p.tolerance_low / p.nominal - 1) * 100
            hi = (p.tolerance_high / p.nominal - 1) * 100
            ax2.barh(i, hi - lo, left=lo, color=COLOUR_BAND, height=0.6)
    vals = [(p.value / p.nominal - 1) * 100 if p.nominal else 0.0 for p in params]
    errs = [2 * p.stderr / abs(p.nominal) * 100 if p.nominal else 0.0 for p in params]
    colours = [COLOUR_FIT if p.informed_by == "readings" else COLOUR_PRIOR for p in params]
    for i in range(len(params)):
        ax2.errorbar(vals[i], i, xerr=errs[i], fmt="s", color=colours[i], capsize=3)
    ax2.axvline(0.0, color="black", lw=0.8)
    ax2.set_yticks(y2, keys)
    ax2.invert_yaxis()
    ax2.set_xlabel("fitted / nominal − 1  [%]  (bar: tolerance band; whisker: ±2σ)")
    ax2.set_title("Parameters against their tolerance (grey: prior only)")
    lim = max(5.0, min(200.0, float(np.nanmax(np.abs(vals) + np.abs(errs))) * 1.1 if vals else 5.0))
    ax2.set_xlim(-lim, lim)
    fig.tight_layout()
    out = Path(path)
    fig.savefig(out, dpi=110)
    plt.close(fig)
    return out
