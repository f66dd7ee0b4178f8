"""Rework as a picture: gain and input resistance before and after the best option."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from reconcile.errors import ReconcileError
from reconcile.trim.rework import TrimResult
from reconcile.present.escape import plot_text
from reconcile.model.quantities import REGISTRY
from reconcile.present import numbers

COLOUR_BEFORE = "#9a8f86"
COLOUR_AFTER = "#2a7f62"
COLOUR_LIMIT = "#b23a48"
#: what the figure shows: (quantity, axis label, unit symbol), labels from the registry
QUANTITIES = tuple(
    (name, REGISTRY[name].label, numbers.quantity_symbol(name))
    for name in ("gain", "input_resistance")
)


def plot_trim(result: TrimResult, path: str | Path, *, bins: int = 60) -> Path:
    """Write a PNG: for gain and input resistance, the Monte Carlo distribution of the
    board as it is and after the best option, with the spec limits.

    Raises
    ------
    ReconcileError
        When the result holds no Monte Carlo draws (``samples = 0``) or no option.
    """
    from matplotlib.figure import Figure

    best = result.best
    if best is None or result.baseline.draws is None or best.draws is None:
        raise ReconcileError("no Monte Carlo draws to plot: run trim with samples > 0")
    shown = [q for q in QUANTITIES if q[0] in result.baseline.draws]
    fig = Figure(figsize=(5.5 * len(shown), 4.2))
    axes = fig.subplots(1, len(shown), squeeze=False)
    label_after = "after: " + plot_text("; ".join(
        f"{c.ref} {'→' if c.action == 'replace' else '∥'} {numbers.si(c.value, c.unit, 3)}"
        for c in best.changes
    ))
    for ax, (name, label, unit) in zip(axes[0], shown, strict=True):
        before = result.baseline.draws[name]
        after = best.draws[name]
        both = np.concatenate([before[np.isfinite(before)], after[np.isfinite(after)]])
        edges = np.histogram_bin_edges(both, bins=bins)
        ax.hist(
            before[np.isfinite(before)],
            bins=edges,
            color=COLOUR_BEFORE,
            alpha=0.6,
            label=f"as it is (yield {_pct(result.baseline.yield_)})",
        )
        ax.hist(
            after[np.isfinite(after)],
            bins=edges,
            color=COLOUR_AFTER,
            alpha=0.7,
            label=f"{label_after} (yield {_pct(best.yield_)})",
        )
        if name in result.spec:
            for key in ("low", "high"):
                ax.axvline(result.spec[name][key], color=COLOUR_LIMIT, ls="--", lw=1.2)
        ax.set_xlabel(f"{label} [{unit}]" if unit else f"{label} [V/V]")
        ax.set_ylabel(f"Monte Carlo draws (of {after.size})")
        ax.legend(fontsize=7, loc="upper left")
    fig.suptitle("Before and after the best rework (dashed: spec limits)")
    fig.tight_layout()
    out = Path(path)
    fig.savefig(out, dpi=120)
    return out


def _pct(x: float | None) -> str:
    return "-" if x is None else f"{100 * x:.1f} %"
