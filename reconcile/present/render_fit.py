"""Rich tables for a fit, its error budget and the suggested next readings."""

from __future__ import annotations

from rich.console import Console
from rich.table import Table

from reconcile.inference.fitting import FitResult
from reconcile.analysis.error_budget import GROUPS, ErrorBudget
from reconcile.analysis.next_reading import Suggestion
from reconcile.present.escape import markup
from reconcile.present.console import make_console
from reconcile.present import numbers

OK, BAD, WARN, DIM = "green", "bold red", "yellow", "dim"



def _fmt(value: float, unit: str) -> str:
    if unit == "K":
        return numbers.temperature(value)
    return numbers.si(value, numbers.symbol(unit))


def _fmt_u(value: float, u: float, unit: str) -> str:
    if unit == "K":
        return numbers.temperature(value, u)
    return numbers.with_u(value, u, numbers.symbol(unit))


def parameters_table(fit: FitResult) -> Table:
    t = Table(title="What was built (fitted parameters)", title_justify="left")
    for col in ("parameter", "nominal", "fitted ± 1σ", "tolerance", "in band", "from"):
        t.add_column(col, justify="left" if col in ("parameter", "status", "from") else "right")
    for key, e in fit.parameters.items():
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
            markup(key.replace("temperature", "T junction")),
            _fmt(e.nominal, e.unit),
            _fmt_u(e.value, e.stderr, e.unit),
            band,
            status,
            src,
        )
    return t


def calibration_table(fit: FitResult) -> Table:
    """One row per instrument range's fitted calibration factor (1 = no error); the
    instrument is the readings file's cell, escaped."""
    t = Table(title="Instrument calibration (shared by its readings)", title_justify="left")
    for col in ("instrument", "reading, range", "factor ± 1σ", "from"):
        t.add_column(col, justify="right" if col == "factor ± 1σ" else "left")
    for key, e in fit.calibration.items():
        instrument, _, what = key.partition(":")
        src = "readings" if e.informed_by == "readings" else f"[{DIM}]prior[/]"
        t.add_row(markup(instrument), markup(what.replace(":", " ")),
                  _fmt_u(e.value, e.stderr, ""), src)
    return t


def readings_table(fit: FitResult) -> Table:
    t = Table(title="Readings: measured against the fitted board", title_justify="left")
    for col in ("reading", "measured ± u", "predicted", "z"):
        t.add_column(col, justify="left" if col == "reading" else "right")
    for r in fit.readings:
        unit = numbers.quantity_symbol(r.quantity)
        label = markup(f"{r.quantity} {r.at}".strip())
        z = f"{r.normalized_residual:+.2f}"
        if r.suspect:
            z = f"[{BAD}]{z} suspect[/]"
        elif abs(r.normalized_residual) > 2:
            z = f"[{WARN}]{z}[/]"
        t.add_row(
            label,
            _fmt_u(r.measured, r.uncertainty, unit),
            _fmt(r.predicted, unit),
            z,
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
        f"readings' χ² = {fit.chi_square:.2f} on {numbers.plain(fit.dof, 3)} degrees of "
        f"freedom ({fit.readings_count} readings less "
        f"{numbers.plain(fit.effective_parameters, 3)} informed parameters), "
        f"p = {fit.p_value:.3g}: [{style}]{text}[/]\n" + prior_line(fit)
    )


def prior_line(fit: FitResult) -> str:
    """The prior penalty, beside the verdict and not in it."""
    parts = ("the fitted values sit within their tolerances as far as chance allows"
             if fit.parts_plausible else
             f"[{BAD}]parts far outside their tolerances (a fault? see diagnose)[/]")
    return (f"prior penalty {numbers.plain(fit.prior_penalty, 3)} on "
            f"{numbers.plain(fit.effective_parameters, 3)} parameters, "
            f"p = {fit.prior_p_value:.3g}: {parts} (not in the verdict)")


def budget_table(budget: ErrorBudget) -> Table:
    t = Table(
        title="Error budget: where the difference from the spec comes from", title_justify="left"
    )
    for col in ("quantity", "target", "fitted", "error", "design", *GROUPS):
        t.add_column(col, justify="left" if col == "quantity" else "right")
    for name, q in budget.quantities.items():
        unit = "Ω" if name.endswith("resistance") else ""
        scale = q.target
        shares = [
            numbers.with_u(
                q.shares[g], q.share_stderr[g], unit, sign=True, scale=scale, compact=True
            )
            for g in GROUPS
        ]
        t.add_row(
            name,
            numbers.si(q.target, unit),
            numbers.si(q.fitted, unit),
            numbers.signed(q.total, unit, scale=scale),
            numbers.signed(q.design, unit, scale=scale),
            *shares,
        )
    return t


def _unit_of(quantity: str) -> str:
    return numbers.quantity_symbol(quantity)


def next_table(suggestions: list[Suggestion]) -> Table:
    t = Table(title="Next most useful readings", title_justify="left")
    for col in ("#", "reading", "expected reduction", "uncertainty after (before)"):
        t.add_column(
            col, justify="left" if col in ("reading", "uncertainty after (before)") else "right"
        )
    for i, s in enumerate(suggestions, 1):
        detail = ", ".join(
            f"{k}: ±{numbers.si(s.after[k], _unit_of(k), 2)} ({numbers.si(s.before[k], _unit_of(k), 2)})"
            for k in list(s.after)[:3]
        )
        t.add_row(str(i), markup(s.label), f"{100 * s.score:.1f}%", markup(detail))
    return t


def print_fit(
    fit: FitResult,
    budget: ErrorBudget | None,
    suggestions: list[Suggestion],
    console: Console | None = None,
) -> None:
    console = console or make_console()
    console.print(parameters_table(fit))
    if fit.calibration:
        console.print(calibration_table(fit))
    console.print(readings_table(fit))
    console.print(verdict_line(fit))
    if fit.suspects:
        names = markup(", ".join(f"{r.quantity} {r.at}".strip() for r in fit.suspects))
        console.print(f"[{BAD}]suspect readings (more than 3σ off):[/] {names}")
    if budget is not None:
        console.print(budget_table(budget))
    if suggestions:
        console.print(next_table(suggestions))


def _end(value: float | None, unit: str) -> str:
    return "open" if value is None else _fmt(value, unit)


def profile_table(profile: dict) -> Table:
    """``fit --profile``: each parameter's profile-likelihood interval, own unit."""
    t = Table(title="Profile-likelihood intervals", title_justify="left")
    for col in ("parameter", "fitted", "1σ low", "1σ high", "2σ low", "2σ high"):
        t.add_column(col, justify="left" if col == "parameter" else "right")
    for key, p in profile.items():
        t.add_row(markup(key), _fmt(p.value, p.unit), _end(p.sigma1[0], p.unit),
                  _end(p.sigma1[1], p.unit), _end(p.sigma2[0], p.unit), _end(p.sigma2[1], p.unit))
    return t


def posterior_table(posterior) -> Table:
    """``fit --sample``: posterior median and quantiles per parameter, own unit."""
    t = Table(title=f"Posterior draws ({posterior.steps} steps × {posterior.walkers} walkers, "
                    f"first {posterior.burn} discarded)", title_justify="left")
    for col in ("parameter", "2.5 %", "16 %", "median", "84 %", "97.5 %"):
        t.add_column(col, justify="left" if col == "parameter" else "right")
    for key, q in posterior.quantiles.items():
        u = q["unit"]
        t.add_row(markup(key), _fmt(q["p2_5"], u), _fmt(q["p16"], u), _fmt(q["median"], u),
                  _fmt(q["p84"], u), _fmt(q["p97_5"], u))
    return t


def print_intervals(profile: dict, posterior, console: Console) -> None:
    """The profile intervals and posterior draws a fit was asked for, with their notes."""
    if profile:
        console.print(profile_table(profile))
        for key, p in profile.items():
            for note in p.notes:
                console.print(f"[{WARN}]{markup(key)}: {markup(note)}[/]")
    if posterior is not None:
        console.print(posterior_table(posterior))
        tau = posterior.autocorrelation_steps
        console.print(f"acceptance fraction {posterior.acceptance_fraction:.2f}, "
                      f"autocorrelation time {'unknown' if tau is None else f'{tau:.0f}'} steps")
        for w in posterior.warnings:
            console.print(f"[{WARN}]warning: {markup(w)}[/]")
