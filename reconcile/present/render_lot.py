"""Rich tables for a characterised lot: devices, summary, bins, matched sets, device table."""

from __future__ import annotations

import math

from rich.console import Console
from rich.table import Table

from reconcile.lot.characterise import LotResult
from reconcile.present.console import make_console
from reconcile.present import numbers

OK, BAD, WARN, DIM = "green", "bold red", "yellow", "dim"
MAX_DEVICE_ROWS = 60
MAX_PAIR_ROWS = 40


def _fmt(x: float | None, unit: str = "", digits: int = 4) -> str:
    if x is None or not math.isfinite(x):
        return "-"
    return numbers.si(x, unit, digits)


def _rel(stderr: float, value: float) -> str:
    if not value or not math.isfinite(stderr):
        return "-"
    return f"{100 * stderr / abs(value):.2g}%"


def devices_table(result: LotResult, limit: int = MAX_DEVICE_ROWS) -> Table:
    """One row per device (flagged devices first when the lot is longer than ``limit``)."""
    items = list(result.devices.values())
    if len(items) > limit:
        items = sorted(items, key=lambda d: not d.flags)[:limit]
    t = Table(title=f"Devices ({len(result.devices)}; IS at 25 C, VBE at "
                    f"{numbers.si(result.options.current_a, 'A')})", title_justify="left")
    for col in ("device", "beta", "±1σ", "IS", "±1σ", "n", "VBE", "bin", "flags"):
        t.add_column(col, justify="left" if col in ("device", "bin", "flags") else "right")
    for d in items:
        flags = ", ".join(d.flags)
        style = BAD if "outlier" in d.flags or "not-converged" in d.flags else WARN
        t.add_row(
            d.name, f"{d.beta:.1f}", f"{d.beta_stderr:.2g}", _fmt(d.is_25c, "A", 3),
            _rel(d.is_stderr, d.is_25c), f"{d.n:.4f}", _fmt(d.vbe_v, "V", 5), d.bin or "",
            f"[{style}]{flags}[/]" if flags else f"[{OK}]ok[/]",
        )
    if len(result.devices) > limit:
        t.caption = f"{len(result.devices) - limit} more devices not shown (all in --json)"
    return t


def summary_table(result: LotResult) -> Table:
    s = result.summary
    t = Table(title=f"Lot summary ({s.used} of {s.count} devices used)", title_justify="left")
    for col in ("quantity", "mean", "sd", "p05", "p50", "p95"):
        t.add_column(col, justify="left" if col == "quantity" else "right")
    p = s.beta_percentiles
    t.add_row("beta", f"{s.beta_mean:.1f} ±{s.beta_mean_stderr:.2g}", _fmt(s.beta_sd),
              _fmt(p["p05"]), _fmt(p["p50"]), _fmt(p["p95"]))
    q = s.is_percentiles
    t.add_row("IS (geometric)", _fmt(s.is_geo_mean, "A", 3), f"{s.log10_is_sd:.3g} dec",
              _fmt(q["p05"], "A", 3), _fmt(q["p50"], "A", 3), _fmt(q["p95"], "A", 3))
    t.add_row("n", f"{s.n_mean:.4f}", f"{s.n_sd:.2g}" if s.n_fitted else f"[{DIM}]fixed[/]",
              "", "", "")
    return t


def bins_table(result: LotResult) -> Table:
    t = Table(title="Beta bins", title_justify="left")
    for col in ("bin", "count", "devices"):
        t.add_column(col, justify="right" if col == "count" else "left")
    for b in result.bins:
        names = ", ".join(b.devices[:12]) + (" ..." if len(b.devices) > 12 else "")
        t.add_row(b.label, str(len(b.devices)), names)
    return t


def pairs_table(result: LotResult, limit: int = MAX_PAIR_ROWS) -> Table:
    o = result.options
    t = Table(
        title=f"Matched sets (|ΔVBE| ≤ {numbers.si(o.vbe_limit_v, 'V')} at "
              f"{numbers.si(o.current_a, 'A')}, beta ratio ≤ {o.beta_ratio:g})",
        title_justify="left",
    )
    for col in ("devices", "ΔVBE", "±1σ", "beta ratio"):
        t.add_column(col, justify="left" if col == "devices" else "right")
    for p in result.pairs[:limit]:
        t.add_row(" + ".join(p.devices), _fmt(p.delta_vbe_v, "V", 3),
                  _fmt(p.delta_vbe_stderr_v, "V", 3), f"{p.beta_ratio:.3f}")
    if len(result.pairs) > limit:
        t.caption = f"{len(result.pairs) - limit} more sets not shown"
    return t


def cpk_line(result: LotResult) -> str | None:
    c = result.cpk
    if c is None:
        return None
    limits = ", ".join(f"{name} {v:g}" for name, v in (("LSL", c.low), ("USL", c.high))
                       if v is not None)
    style = OK if c.cpk >= 1.33 else WARN if c.cpk >= 1.0 else BAD
    cp = f"Cp = {c.cp:.2f}, " if c.cp is not None else ""
    return (f"beta against {limits}: {cp}[{style}]Cpk = {c.cpk:.2f}[/], "
            f"{100 * c.fraction_out:.1f}% of the devices used outside")


def print_lot(result: LotResult, console: Console | None = None) -> None:
    """Print the lot: devices, summary, outliers, bins, matched sets, Cpk, device table."""
    console = console or make_console()
    console.print(devices_table(result))
    console.print(summary_table(result))
    if result.outliers:
        rule = f"modified z-score > {result.options.outlier_z:g}"
        console.print(f"[{BAD}]outliers ({rule}):[/] {', '.join(result.outliers)}")
    else:
        console.print(f"[{OK}]no outliers[/] (modified z-score > {result.options.outlier_z:g})")
    if result.bins:
        console.print(bins_table(result))
    if result.pairs:
        console.print(pairs_table(result))
    else:
        console.print("no matched sets within the limits")
    line = cpk_line(result)
    if line:
        console.print(line)
    console.print("Device table for a board file (its [devices] section):", style="bold",
                  markup=False)
    console.print(result.device_table, markup=False, highlight=False)
