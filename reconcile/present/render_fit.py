"""Rich tables for a fit, its miss budget and the suggested next readings."""

from __future__ import annotations

from rich.console import Console
from rich.table import Table

from reconcile.inference.fitting import FitResult
from reconcile.analysis.miss_budget import GROUPS, MissBudget
from reconcile.analysis.next_reading import Suggestion
from reconcile.model.values import format_si

OK, BAD, WARN, DIM = "green", "bold red", "yellow", "dim"

_UNIT_SYMBOL = {"ohm": "Ω", "F": "F", "V": "V", "A": "A", "K": "K", "": ""}
_READING_UNIT = {
    "voltage": "V",
    "current": "A",
    "gain": "",
    "input_resistance": "Ω",
    "output_resistance": "Ω",
    "resistance": "Ω",
    "capacitance": "F",
}


def _fmt(value: float, unit: str) -> str:
    sym = _UNIT_SYMBOL.get(unit, unit)
    if unit == "K":
        return f"{value - 273.15:.1f} °C"
    if unit == "A" and abs(value) < 1e-9:
        return f"{value:.3g} A"
    if not sym:
        return f"{value:.4g}"
    return format_si(value, sym, digits=4)


def parameters_table(fit: FitResult) -> Table:
    t = Table(title="What was built (fitted parameters)", title_justify="left")
    for col in ("parameter", "nominal", "fitted", "±1σ", "tolerance", "in band", "from"):
        t.add_column(col, justify="left" if col in ("parameter", "status", "from") else "right")
    for key, e in fit.parameters.items():
        if e.unit == "K":
            sd = f"{e.stderr:.2g} K"
        elif e.unit == "A":
            sd = f"{100 * e.stderr / e.value:.0f}%"
        else:
            sd = _fmt(e.stderr, e.unit)
        band = "-"
        if e.tolerance_low is not None and e.tolerance_high is not None and e.nominal:
            lo = 100 * (e.tolerance_low / e.nominal - 1)
            hi = 100 * (e.tolerance_high / e.nominal - 1)
            band = f"±{hi:.3g}%" if abs(lo + hi) < 1e-6 else f"{lo:+.0f}%…{hi:+.0f}%"
        inside = e.in_tolerance
        if e.at_bound:
            status = f"[{BAD}]at bound[/]"
        elif inside is None:
            status = ""
        elif inside:
            status = f"[{OK}]in[/]"
        else:
            status = f"[{BAD}]OUT[/]"
        src = "readings" if e.informed_by == "readings" else f"[{DIM}]prior[/]"
        t.add_row(
            key.replace("temperature", "T junction"),
            _fmt(e.nominal, e.unit),
            _fmt(e.value, e.unit),
            sd,
            band,
            status,
            src,
        )
    return t


def readings_table(fit: FitResult) -> Table:
    t = Table(title="Readings: measured against the fitted board", title_justify="left")
    for col in ("reading", "measured", "predicted", "u", "z"):
        t.add_column(col, justify="left" if col == "reading" else "right")
    for r in fit.readings:
        unit = _READING_UNIT.get(r.quantity, "")
        label = f"{r.quantity} {r.at}".strip()
        z = f"{r.normalized_residual:+.2f}"
        if r.suspect:
            z = f"[{BAD}]{z} suspect[/]"
        elif abs(r.normalized_residual) > 2:
            z = f"[{WARN}]{z}[/]"
        t.add_row(
            label, _fmt(r.measured, unit), _fmt(r.predicted, unit), _fmt(r.uncertainty, unit), z
        )
    return t


def verdict_line(fit: FitResult) -> str:
    style = {"consistent": OK, "doubtful": WARN}.get(fit.verdict, BAD)
    text = {
        "consistent": "the model explains the readings",
        "doubtful": "the model explains the readings only marginally",
        "inconsistent": "the model does NOT explain the readings (a fault? see diagnose)",
        "not-converged": "the fit did not converge",
    }[fit.verdict]
    return (
        f"χ² = {fit.chi_square:.2f} for {fit.dof} degrees of freedom, p = {fit.p_value:.3g}: "
        f"[{style}]{text}[/]"
    )


def budget_table(budget: MissBudget) -> Table:
    t = Table(
        title="Miss budget: where the difference from the spec comes from", title_justify="left"
    )
    for col in ("quantity", "target", "fitted", "miss", "design", *GROUPS):
        t.add_column(col, justify="left" if col == "quantity" else "right")
    for name, q in budget.quantities.items():
        unit = "Ω" if name.endswith("resistance") else ""

        def f(x: float, unit: str = unit) -> str:
            return f"{x:+.3g}{(' ' + unit) if unit else ''}"

        shares = [f"{f(q.shares[g])} ±{q.share_stderr[g]:.2g}" for g in GROUPS]
        t.add_row(name, f"{q.target:.4g}", f"{q.fitted:.4g}", f(q.total), f(q.design), *shares)
    return t


def next_table(suggestions: list[Suggestion]) -> Table:
    t = Table(title="Next most useful readings", title_justify="left")
    for col in ("#", "reading", "expected reduction", "uncertainty after (before)"):
        t.add_column(
            col, justify="left" if col in ("reading", "uncertainty after (before)") else "right"
        )
    for i, s in enumerate(suggestions, 1):
        detail = ", ".join(f"{k}: ±{s.after[k]:.3g} ({s.before[k]:.3g})" for k in list(s.after)[:3])
        t.add_row(str(i), s.label, f"{100 * s.score:.1f}%", detail)
    return t


def print_fit(
    fit: FitResult,
    budget: MissBudget | None,
    suggestions: list[Suggestion],
    console: Console | None = None,
) -> None:
    console = console or Console()
    console.print(parameters_table(fit))
    console.print(readings_table(fit))
    console.print(verdict_line(fit))
    if fit.suspects:
        names = ", ".join(f"{r.quantity} {r.at}".strip() for r in fit.suspects)
        console.print(f"[{BAD}]suspect readings (more than 3σ off):[/] {names}")
    if budget is not None:
        console.print(budget_table(budget))
    if suggestions:
        console.print(next_table(suggestions))
