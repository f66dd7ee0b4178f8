"""The lot as a picture: beta histogram with its bins, and the sweeps or the IS–beta plane."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from reconcile.lot.characterise import LotResult
from reconcile.present.escape import plot_text

COLOUR_BAR = "#1b6a8a"
COLOUR_OUT = "#c4512b"
COLOUR_SPEC = "#444444"
COLOUR_FLAG = "#d08a1e"
MAX_CURVES = 60


def plot_lot(result: LotResult, path: str | Path) -> Path:
    """Write a two-panel PNG.

    Left: histogram of beta over the given bin edges (automatic bins when none were
    given), outliers marked, spec limits as lines. Right: for sweep data, ln IC against
    VBE for up to :data:`MAX_CURVES` devices (flagged ones first) with each device's
    adopted line; for jig data, fitted log10 IS against beta with ±1σ bars.
    """
    from matplotlib.figure import Figure

    devs = list(result.devices.values())
    beta = np.array([d.beta for d in devs])
    is_out = np.array([d.name in result.outliers for d in devs])
    fig = Figure(figsize=(12, 4.8))
    (ax1, ax2) = fig.subplots(1, 2)
    finite = np.isfinite(beta)
    edges = np.asarray(result.options.bins) if result.options.bins else None
    if edges is None:
        edges = np.histogram_bin_edges(beta[finite], bins="auto") if finite.any() else 10
    else:
        lo, hi = np.nanmin(beta), np.nanmax(beta)
        extra = [e for e in (lo, hi) if e < edges[0] or e > edges[-1]]
        edges = np.unique(np.concatenate([edges, extra]))
    ax1.hist(beta[finite & ~is_out], bins=edges, color=COLOUR_BAR, edgecolor="white",
             label="devices")
    if is_out.any():
        ax1.hist(beta[finite & is_out], bins=edges, color=COLOUR_OUT, edgecolor="white",
                 label="outliers")
    if result.options.bins:
        for e in result.options.bins:
            ax1.axvline(e, color="black", lw=0.6, ls=":")
    for v, name in ((result.options.spec_low, "LSL"), (result.options.spec_high, "USL")):
        if v is not None:
            ax1.axvline(v, color=COLOUR_SPEC, lw=1.5, ls="--", label=name)
    ax1.set_xlabel("beta")
    ax1.set_ylabel("devices")
    ax1.set_title(f"Beta of {len(devs)} devices (dotted: bin edges)")
    ax1.legend(fontsize=8)

    if result.sweeps is not None and result.extraction is not None:
        _sweep_panel(ax2, result)
    else:
        log_is = np.log10([d.is_25c for d in devs])
        err = np.array([d.is_stderr / d.is_25c / np.log(10) for d in devs])
        berr = np.array([d.beta_stderr for d in devs])
        ax2.errorbar(beta[~is_out], log_is[~is_out], xerr=berr[~is_out], yerr=err[~is_out],
                     fmt="o", color=COLOUR_BAR, ms=4, capsize=2, label="devices")
        if is_out.any():
            ax2.errorbar(beta[is_out], log_is[is_out], xerr=berr[is_out], yerr=err[is_out],
                         fmt="s", color=COLOUR_OUT, ms=5, capsize=2, label="outliers")
        ax2.set_xlabel("beta")
        ax2.set_ylabel("log10 IS / A  (25 C)")
        ax2.set_title("Fitted IS against beta (±1σ)")
        ax2.legend(fontsize=8)
    fig.tight_layout()
    out = Path(path)
    fig.savefig(out, dpi=110)
    return out


def _sweep_panel(ax, result: LotResult) -> None:
    sw, ex = result.sweeps, result.extraction
    flagged = np.array([bool(result.devices[n].flags) for n in sw.devices])
    order = np.concatenate([np.flatnonzero(flagged), np.flatnonzero(~flagged)])[:MAX_CURVES]
    for i in order:
        m = sw.mask[i]
        v, y = sw.vbe[i, m], np.log(ex.ic_corrected[i, m])
        colour = COLOUR_FLAG if flagged[i] else COLOUR_BAR
        ax.plot(v, y, "o", ms=3, color=colour, alpha=0.8)
        grid = np.linspace(v.min(), v.max(), 50)
        ax.plot(grid, ex.intercept[i] + ex.slope[i] * grid, "-", lw=0.8, color=colour, alpha=0.6)
        if flagged[i]:
            ax.annotate(plot_text(sw.devices[i]), (v[-1], y[-1]), fontsize=7, color=colour)
    ax.set_xlabel("VBE  [V]")
    ax.set_ylabel("ln(IC / A)  (Early factor removed)")
    shown = len(order)
    ax.set_title(f"ln IC against VBE ({shown} of {sw.n_devices} devices; orange: flagged)")
