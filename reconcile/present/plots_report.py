"""Figures for the report that no single command draws: the operating point, the error
budget and the fault probabilities. Each returns PNG bytes (``matplotlib.figure.Figure``,
no global plotting state)."""

from __future__ import annotations

import io

import numpy as np

from reconcile.data.readings import Reading
from reconcile.present.escape import plot_text

COLOUR_DESIGN = "#8a8a8a"
COLOUR_FITTED = "#c4512b"
COLOUR_MEASURED = "#1b6a8a"
COLOUR_GROUPS = {
    "design": "#8a8a8a",
    "parts": "#1b6a8a",
    "devices": "#c4512b",
    "bench": "#d7a233",
}


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.tight_layout()
    fig.savefig(buf, format="png", dpi=100)
    return buf.getvalue()


def operating_point_png(
    design_nodes: dict[str, float | None],
    fitted_nodes: dict[str, float | None] | None,
    readings: list[Reading],
) -> bytes:
    """Node voltages: as designed, as fitted, and as measured (with ±2u)."""
    from matplotlib.figure import Figure

    names = [n for n, v in design_nodes.items() if v is not None]
    x = np.arange(len(names))
    fig = Figure(figsize=(8, 3.8))
    ax = fig.subplots()
    width = 0.38
    ax.bar(
        x - width / 2,
        [design_nodes[n] for n in names],
        width,
        color=COLOUR_DESIGN,
        label="as designed",
    )
    if fitted_nodes is not None:
        ax.bar(
            x + width / 2,
            [fitted_nodes.get(n) or 0.0 for n in names],
            width,
            color=COLOUR_FITTED,
            label="fitted board",
        )
    measured = {r.at: r for r in readings if r.quantity == "voltage" and "/" not in r.at}
    mx = [i for i, n in enumerate(names) if n in measured]
    if mx:
        from reconcile.data.readings import standard_uncertainty

        ax.errorbar(
            [x[i] + width / 2 for i in mx],
            [measured[names[i]].value for i in mx],
            yerr=[2 * standard_uncertainty(measured[names[i]]) for i in mx],
            fmt="D",
            color=COLOUR_MEASURED,
            label="measured ±2u",
            capsize=3,
        )
    ax.set_xticks(x, [plot_text(n) for n in names])
    ax.set_ylabel("DC voltage to gnd [V]")
    ax.set_title("Operating point: node voltages")
    ax.legend(fontsize=8)
    return _png(fig)


def error_budget_png(budget: dict) -> bytes:
    """One horizontal stacked bar per spec quantity: design, parts, devices, bench,
    as a percentage of the target, with the total error marked."""
    from matplotlib.figure import Figure

    names = list(budget)
    fig = Figure(figsize=(8, 1.2 + 1.1 * len(names)))
    ax = fig.subplots()
    for i, name in enumerate(names):
        q = budget[name]
        target = q["target"]
        left_pos = left_neg = 0.0
        for group in ("design", "parts", "devices", "bench"):
            share = 100.0 * q[group] / target
            if share >= 0:
                ax.barh(
                    i,
                    share,
                    left=left_pos,
                    color=COLOUR_GROUPS[group],
                    height=0.5,
                    label=group if i == 0 else None,
                )
                left_pos += share
            else:
                ax.barh(
                    i,
                    share,
                    left=left_neg,
                    color=COLOUR_GROUPS[group],
                    height=0.5,
                    label=group if i == 0 else None,
                )
                left_neg += share
        ax.plot(
            100.0 * q["total"] / target,
            i,
            "k|",
            markersize=24,
            mew=2,
            label="total error" if i == 0 else None,
        )
    ax.axvline(0.0, color="black", lw=0.8)
    ax.set_yticks(range(len(names)), names)
    ax.set_xlabel("share of the error [% of target]")
    ax.set_title("Error budget (Shapley shares add up to the total)")
    ax.legend(fontsize=8, ncol=5, loc="upper center", bbox_to_anchor=(0.5, -0.35))
    return _png(fig)


def hypotheses_png(hypotheses: list[dict], top: int = 8) -> bytes:
    """Posterior probability of the leading fault hypotheses."""
    from matplotlib.figure import Figure

    shown = hypotheses[:top]
    labels = [plot_text(f"{h['ref'] or '-'} {h['fault']}") for h in shown]
    probs = [100.0 * (h["probability"] or 0.0) for h in shown]
    fig = Figure(figsize=(8, 1.0 + 0.45 * len(shown)))
    ax = fig.subplots()
    ax.barh(range(len(shown)), probs, color=COLOUR_FITTED)
    ax.set_yticks(range(len(shown)), labels)
    ax.invert_yaxis()
    ax.set_xlim(0, 100)
    ax.set_xlabel("posterior probability [%]")
    ax.set_title("Which single fault explains the readings")
    return _png(fig)
