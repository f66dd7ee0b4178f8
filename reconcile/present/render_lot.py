"""Rich tables for a characterised lot: devices, summary, bins, matched sets, device table."""

from __future__ import annotations

import math

from rich.console import Console
from rich.table import Table

from reconcile.lot.characterise import LotResult
from reconcile.present.console import make_console
from reconcile.present.escape import markup
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


def devices_table(result: LotResult, limit: int = MAX_DEVICE_ROWS, *,
                  wide: bool = False) -> Table:
    """One row per device (flagged devices first when the lot is longer than ``limit``).

    Compact (the default, for 80 columns): value and standard error in one cell, each
    flag as a number that :func:`flag_lines` spells out below the table. ``wide``: a
    column each, the flags written in full.
    """
    items = _shown_devices(result, limit)
    t = Table(title=f"Devices ({len(result.devices)}; IS at 25 C, VBE at "
                    f"{numbers.si(result.options.current_a, 'A')})", title_justify="left")
    heads = (("device", "beta", "±1σ", "IS", "±1σ", "n", "VBE", "bin", "flags") if wide
             else ("device", "beta ±1σ", "IS ±1σ", "n", "VBE", "bin", "flags"))
    for col in heads:
        t.add_column(col, justify="left" if col in ("device", "bin", "flags") else "right",
                     no_wrap=not wide and col != "device", overflow="fold")
    notes = _flag_numbers(items)
    for d in items:
        style = BAD if "outlier" in d.flags or "not-converged" in d.flags else WARN
        if wide:
            flags = ", ".join(d.flags)
            cells = [f"{d.beta:.1f}", f"{d.beta_stderr:.2g}", _fmt(d.is_25c, "A", 3),
                     _rel(d.is_stderr, d.is_25c)]
        else:
            flags = " ".join(f"({notes[f]})" for f in d.flags)
            cells = [f"{d.beta:.1f} ±{d.beta_stderr:.2g}",
                     f"{_fmt(d.is_25c, 'A', 3)} ±{_rel(d.is_stderr, d.is_25c)}"]
        t.add_row(
            markup(d.name), *cells, f"{d.n:.4f}", _fmt(d.vbe_v, "V", 5), markup(d.bin or ""),
            f"[{style}]{markup(flags)}[/]" if flags else f"[{OK}]ok[/]",
        )
    if len(result.devices) > limit:
        t.caption = f"{len(result.devices) - limit} more devices not shown (all in --json)"
    return t


def _shown_devices(result: LotResult, limit: int) -> list:
    items = list(result.devices.values())
    if len(items) > limit:
        items = sorted(items, key=lambda d: not d.flags)[:limit]
    return items


def _flag_numbers(items) -> dict[str, int]:
    """Each distinct flag of the shown devices, numbered in order of first appearance."""
    numbered: dict[str, int] = {}
    for d in items:
        for flag in d.flags:
            numbered.setdefault(flag, len(numbered) + 1)
    return numbered


def flag_lines(result: LotResult, limit: int = MAX_DEVICE_ROWS) -> list[str]:
    """The compact table's flag numbers spelled out, one line each."""
    return [f"({k}) {markup(flag)}" for flag, k in _flag_numbers(_shown_devices(result, limit)).items()]


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
        t.add_row(markup(b.label), str(len(b.devices)), markup(names))
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
        t.add_row(markup(" + ".join(p.devices)), _fmt(p.delta_vbe_v, "V", 3),
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


def print_lot(result: LotResult, console: Console | None = None, *,
              wide: bool = False) -> None:
    """Print the lot: devices, summary, outliers, bins, matched sets, Cpk, device table."""
    console = console or make_console()
    console.print(devices_table(result, wide=wide))
    if not wide:
        for line in flag_lines(result):
            console.print(line)
    console.print(summary_table(result))
    if result.outliers:
        rule = f"modified z-score > {result.options.outlier_z:g}"
        console.print(f"[{BAD}]outliers ({rule}):[/] {markup(', '.join(result.outliers))}")
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
