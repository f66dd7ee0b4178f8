"""Rich table for rework options (human output of ``reconcile trim``)."""

from __future__ import annotations

from rich.console import Console
from rich.table import Table

from reconcile.trim.rework import Change, TrimOption, TrimResult
from reconcile.model.quantities import REGISTRY
from reconcile.present.console import make_console
from reconcile.present.escape import markup
from reconcile.present import numbers

STYLE_OK = "green"
STYLE_BAD = "bold red"
STYLE_WARN = "yellow"
STYLE_DIM = "dim"


CORNER_UNIT = "Hz"


def _unit(quantity: str) -> str:
    if quantity in ("low_corner", "high_corner"):
        return CORNER_UNIT
    return numbers.quantity_symbol(quantity)


def _short(quantity: str) -> str:
    q = REGISTRY.get(quantity)
    return quantity.replace("_", " ") if q is None else q.short


def _value(quantity: str, x: float | None) -> str:
    if x is None:
        return "-"
    return numbers.si(x, _unit(quantity), 4)


def describe_change(change: Change, *, compact: bool = False) -> str:
    """``replace RC with 931 Ω (E96)`` or ``RC ∥ 12.4 kΩ (E96) → 940 Ω``; compact (the
    series said once below the table): ``RC := 931 Ω``, ``RC ∥ 12.4 kΩ → 940 Ω``. A
    capacitor the same in farads (``C2 ∥ 22 µF → 32 µF``: capacitances in parallel add)."""
    new = numbers.si(change.value, change.unit, 3)
    ref = markup(change.ref)
    if change.action == "replace":
        return f"{ref} := {new}" if compact else f"replace {ref} with {new} ({change.series})"
    combined = numbers.si(change.combined, change.unit, 3 if compact else 4)
    if compact:
        return f"{ref} ∥ {new} → {combined}"
    return f"{ref} ∥ {new} ({change.series}) → {combined}"


def _yield_text(option: TrimOption) -> str:
    if option.yield_ is None:
        return "-"
    style = STYLE_OK if option.yield_ >= 0.95 else STYLE_WARN if option.yield_ >= 0.5 else STYLE_BAD
    return f"[{style}]{100 * option.yield_:.1f}%[/]"


def trim_table(result: TrimResult, *, wide: bool = False,
               repair: tuple[str, ...] | None = None) -> Table:
    """One row for the board as it is (with ``repair``, the steps of a hypothesis'
    repair: row ``R``, the board after it), then one per option, best first. Compact
    (the default, 80 columns): short quantity labels with the spec bands in the caption,
    the margin alone, changes written short; ``wide``: the full table."""
    quantities = list(result.baseline.predicted)
    mode = "fitted board" if result.mode == "fitted" else "board as drawn (design mode)"
    table = Table(
        title=f"Rework options against the {mode}; search {result.search}, "
        f"{result.evaluated} boards solved",
        title_justify="left",
    )
    table.add_column("#", justify="right", no_wrap=True)
    table.add_column("changes", overflow="fold")
    for q in quantities:
        head = q.replace("_", " ") if wide else _short(q)
        if wide and q in result.spec:
            head += "\n" + _band(q, result.spec[q]).removeprefix(_short(q)).strip()
        table.add_column(head, justify="right", no_wrap=not wide)
    table.add_column("margin\n(worst case)" if wide else "margin", justify="right",
                     no_wrap=not wide)
    table.add_column("meets" if wide else "ok", justify="center", no_wrap=not wide)
    table.add_column("yield", justify="right", no_wrap=not wide)
    table.add_column("cost", justify="right", no_wrap=not wide)

    def row(label: str, option: TrimOption, changes: str) -> None:
        meets = f"[{STYLE_OK}]yes[/]" if option.meets_spec else f"[{STYLE_BAD}]no[/]"
        cells = [_value(q, option.predicted.get(q)) for q in quantities]
        margin = f"{100 * option.margin:+.1f}%"
        if wide:
            margin += f" ({100 * option.worst_case_margin:+.1f}%)"
        table.add_row(
            label, changes, *cells, margin, meets, _yield_text(option), f"{option.cost:g}"
        )

    def why(option: TrimOption) -> str:
        return "".join(f"\n[{STYLE_WARN}]{markup(p)}[/]" for p in option.problems)

    if repair is None:
        row("", result.baseline, f"[{STYLE_DIM}]as it is[/]" + why(result.baseline))
    else:
        steps = "\n".join(markup(s) for s in repair) or "nothing to repair"
        row("R", result.baseline, f"[bold]{steps}[/]" + why(result.baseline))
    for i, option in enumerate(result.options, start=1):
        changes = "\n".join(describe_change(c, compact=not wide) for c in option.changes)
        row(str(i), option, changes + why(option))
    if not wide:
        bands = "; ".join(_band(q, result.spec[q]) for q in quantities if q in result.spec)
        series = sorted({c.series for o in result.options for c in o.changes})
        table.caption = (f"spec: {bands}" if bands else "") + (
            f"; new parts from {', '.join(series)}" if series else "") + "; --wide: full table"
    return table


def _band(quantity: str, limits: dict) -> str:
    """``gain 9.5 … 10.5``, or for a one-sided limit (a corner) ``low corner ≤ 20 Hz``."""
    if limits["low"] is None:
        return f"{_short(quantity)} ≤ {_value(quantity, limits['high'])}"
    if limits["high"] is None:
        return f"{_short(quantity)} ≥ {_value(quantity, limits['low'])}"
    low, high = _value(quantity, limits["low"]), _value(quantity, limits["high"])
    return f"{_short(quantity)} {low} … {high}"


def print_trim(result: TrimResult, console: Console | None = None, *,
               wide: bool = False, repair: tuple[str, ...] | None = None,
               hypothesis: str | None = None) -> None:
    """Print the options table and a one-line verdict; under a hypothesis, its repair
    (``repair``: the steps) first, the options then rework the repaired board."""
    console = console or make_console()
    if repair is not None:
        console.print(
            f"[bold]Under {markup(hypothesis or '')}:[/] first restore the drawn design "
            "(row R: the board after that repair, predicted from the fit under this "
            "hypothesis); the numbered options rework the repaired board.")
    console.print(trim_table(result, wide=wide, repair=repair))
    costs = ", ".join(f"{k} {v:g}" for k, v in sorted(result.costs.items()))
    console.print(
        f"[{STYLE_DIM}]margin: distance to the nearer spec limit over the target at the predicted "
        f"board (worst case, {result.k_sigma:g} predicted σ further in: "
        f"{'in brackets' if wide else 'with --wide'}); yield: Monte Carlo over "
        f"{result.samples} draws; rework cost per part: {costs}[/]"
    )
    if not result.needed:
        board = "The repaired board" if repair is not None else "The board as it is"
        console.print(f"[{STYLE_OK}]{board} meets spec: no rework needed.[/]")
    elif result.best is None or not result.best.meets_spec:
        console.print(f"[{STYLE_BAD}]No option within the search meets spec.[/]")
    else:
        best = result.best
        text = "; ".join(describe_change(c) for c in best.changes)
        tail = "" if best.yield_ is None else f" (yield {100 * best.yield_:.1f}%)"
        console.print(f"[bold]Best:[/] {text}{tail}")
