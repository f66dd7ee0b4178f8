"""Rich tables for a diagnosis (human output of ``reconcile diagnose``)."""

from __future__ import annotations

import math

from rich.console import Console, Group
from rich.table import Table

from reconcile.diagnosis.diagnose import Diagnosis, Hypothesis, NextReading
from reconcile.model.quantities import REGISTRY
from reconcile.present.console import make_console
from reconcile.present.escape import markup
from reconcile.present import numbers

STYLE_OK = "green"
STYLE_BAD = "bold red"
STYLE_DIM = "dim"
CHECK_MIN_PROBABILITY = 0.01
OFF_TOLERANCE_SHOWN = 3


def _unit(quantity: str) -> str:
    return numbers.quantity_symbol(quantity)


def _value(x: float | None, unit: str) -> str:
    if x is None or not math.isfinite(x):
        return "-"
    return numbers.si(x, unit, 3)


def _probability(p: float) -> str:
    if p >= 0.001:
        return f"{p:.3f}"
    if p > 0:
        return f"{p:.0e}"
    return "0"


def _label(h: Hypothesis) -> str:
    text = h.label
    if h.aliases:
        text += f" (or {', '.join(h.aliases)})"
    if h.same_as:
        text += f" ≡ {', '.join(h.same_as)}"
    return text


def _fault_value(h: Hypothesis) -> str:
    if h.n_faults > 1:
        return "; ".join(
            f"{f['ref']} {_value(f['value'], 'Ω')}" for f in h.faults if f["value"] is not None
        )
    if h.fault != "wrong-value" or h.value is None:
        return ""
    text = f"{_value(h.value, 'Ω')} ± {_value(h.stderr, 'Ω')}"
    if h.nearest is not None:
        text += f", nearest {h.series} {_value(h.nearest, 'Ω')}"
    if h.decade_slip:
        text += f" [{STYLE_BAD}]decade slip[/]"
    return text


def _parameter_unit(board, key: str) -> str:
    """The unit of a parameter key (``RC``, ``VCC``, ``Q1.IS``, ``Q1.beta``)."""
    if key in board.resistors:
        return "Ω"
    if key in board.capacitors:
        return "F"
    if key in board.supplies:
        return "V"
    return {"IS": "A", "VA": "V"}.get(key.rpartition(".")[2], "")


def _fitted_board(h: Hypothesis, board) -> str:
    f = h.fitted
    parts = [
        f"{q.short} {_value(f[q.name], _unit(q.name))}"
        for q in REGISTRY.values()
        if q.small_signal and q.name != "source_gain" and f.get(q.name) is not None
        and math.isfinite(f[q.name])
    ]
    parts += [f"{ref} {region}" for ref, region in f.get("regions", {}).items()]
    off = list(f.get("off_tolerance", {}).items())
    if off:
        shown = ", ".join(
            f"{k} = {numbers.si(v, _parameter_unit(board, k), 3)}"
            for k, v in off[:OFF_TOLERANCE_SHOWN]
        )
        extra = len(off) - OFF_TOLERANCE_SHOWN
        more = f" and {extra} more" if extra > 0 else ""
        parts.append(f"needs {shown}{more} outside tolerance")
    return "; ".join(parts)


def _fault_value_short(h: Hypothesis) -> str:
    """The fitted value without its uncertainty, for the compact table."""
    if h.n_faults > 1:
        return _fault_value(h)
    if h.fault != "wrong-value" or h.value is None:
        return ""
    text = _value(h.value, "Ω")
    if h.nearest is not None:
        text += f" ({h.series} {_value(h.nearest, 'Ω')})"
    if h.decade_slip:
        text += f" [{STYLE_BAD}]decade slip[/]"
    return text


def _ranked(diag: Diagnosis) -> list[Hypothesis]:
    """The hypotheses the table ranks: those the readings can tell from ``none``; the
    others (``testable`` false) are listed apart (:func:`_untestable_line`)."""
    return [h for h in diag.hypotheses if h.testable]


def _untestable_line(diag: Diagnosis) -> str | None:
    """One line naming the hypotheses the readings cannot see, apart from the ranking."""
    apart = [h for h in diag.hypotheses if not h.testable]
    if not apart:
        return None
    total = sum(h.probability for h in apart)
    names = ", ".join(markup(h.label) for h in apart[:8]) + (" ..." if len(apart) > 8 else "")
    return (f"[{STYLE_DIM}]Not testable with these readings (they cannot tell these from "
            f"none, so each keeps about its prior share, together {_probability(total)}; "
            f"nothing is to be reworked on their account): {names}[/]")


def hypothesis_table(diag: Diagnosis, rows: int = 10, *, wide: bool = False) -> Table:
    """The ranked hypotheses: fault, probability, χ², fitted value; with ``wide`` also the
    fitted board in its own column (compact: :func:`hypothesis_details` below the table)."""
    pairs = any(h.n_faults > 1 for h in diag.hypotheses)
    title = ("Explanations (single faults and pairs), most probable first" if pairs
             else "Single-fault explanations, most probable first")
    t = Table(title=title, title_justify="left")
    t.add_column("#", justify="right")
    t.add_column("fault", no_wrap=not wide, overflow="fold")
    t.add_column("probability" if wide else "p", justify="right")
    t.add_column("χ²", justify="right")
    t.add_column("fitted value" + ("" if wide else " (nearest)"))
    if wide:
        t.add_column("the fitted board then has")
    ranked = _ranked(diag)
    for i, h in enumerate(ranked[:rows], start=1):
        style = "" if h.converged else STYLE_DIM
        chi = numbers.plain(h.chi_square, 3)
        chi = chi if h.converged else f"≥{chi}"
        cells = [str(i), markup(_label(h)), _probability(h.probability), chi]
        if wide:
            cells += [_fault_value(h), _fitted_board(h, diag.board)]
        else:
            cells.append(_fault_value_short(h))
        t.add_row(*cells, style=style)
    more = len(ranked) - rows
    if more > 0:
        rest = sum(h.probability for h in ranked[rows:])
        t.caption = f"{more} more hypotheses, together probability {_probability(rest)}"
    return t


def hypothesis_details(diag: Diagnosis, rows: int = 10) -> list:
    """The compact layout's details: the fitted value with its uncertainty and what the
    fitted board then has, one entry per shown hypothesis, wrapped under its own text."""
    grid = Table.grid(padding=(0, 1))
    grid.add_column(justify="right", no_wrap=True)
    grid.add_column()
    for i, h in enumerate(_ranked(diag)[:rows], start=1):
        value = _fault_value(h) if h.n_faults == 1 and h.fault == "wrong-value" else ""
        lead = f"{markup(h.label)} {value}: " if value else f"{markup(h.label)}: "
        grid.add_row(f"{i}.", f"{lead}{markup(_fitted_board(h, diag.board))}")
    return [f"[{STYLE_DIM}]The fitted board under each (--wide: as a column):[/]", grid]


def readings_table(diag: Diagnosis) -> Table:
    """Readings the best hypothesis disagrees with."""
    t = Table(title=f"Readings that disagree with {diag.top.label}", title_justify="left")
    for col in ("reading", "measured", "predicted", "u", "residual"):
        t.add_column(col, justify="left" if col == "reading" else "right")
    for r in diag.disagreeing_readings:
        unit = _unit(r["quantity"])
        where = f" at {r['at']}" if r["at"] else ""
        t.add_row(
            f"{r['quantity']}{where}",
            _value(r["measured"], unit),
            _value(r["predicted"], unit),
            _value(r["uncertainty"], unit),
            f"[{STYLE_BAD}]{r['normalized_residual']:+.1f}σ[/]",
        )
    return t


def next_reading_text(nr: NextReading) -> str:
    """One line: what to read next, why, and what each leading hypothesis expects."""
    unit = _unit(nr.quantity)
    why = {
        "separate": f"to tell {nr.separates[0]} from {nr.separates[1]}",
        "confirm": f"to confirm {nr.separates[0]} against {nr.separates[1]}",
        "explore": f"the reading {nr.separates[0]} predicts least well",
    }[nr.purpose]
    expect = "; ".join(f"{label}: {_value(v, unit)}" for label, v in list(nr.expected.items())[:4])
    return f"[bold]Next reading:[/] {nr.label} ({why}). Expected: {expect}"


def diagnosis_tables(diag: Diagnosis, *, rows: int = 10, checks: int = 3,
                     wide: bool = False) -> Group:
    """Everything ``diagnose`` shows: verdict, ranked table, checks, readings, next.
    ``wide``: the full table instead of the compact one with details lines (80 columns)."""
    parts: list = []
    if diag.explained:
        parts.append(f"[{STYLE_OK}]{diag.summary}[/]")
    else:
        parts.append(f"[{STYLE_BAD}]{diag.summary}[/]")
    parts.append(hypothesis_table(diag, rows, wide=wide))
    if not wide:
        parts += hypothesis_details(diag, rows)
    apart = _untestable_line(diag)
    if apart:
        parts.append(apart)
    shown = [
        h for i, h in enumerate(_ranked(diag)[:checks])
        if i == 0 or h.probability >= CHECK_MIN_PROBABILITY
    ]
    if shown:
        parts.append("[bold]Checks to make with a meter:[/]")
        for i, h in enumerate(shown, start=1):
            parts.append(f"  {i}. {markup(h.label)} (probability "
                         f"{_probability(h.probability)}): {markup(h.check)}")
    if diag.disagreeing_readings:
        parts.append(readings_table(diag))
    if diag.next_reading is not None:
        parts.append(next_reading_text(diag.next_reading))
    early = [h for h in diag.hypotheses if not h.converged]
    if early:
        parts.append(
            f"[{STYLE_DIM}]{len(early)} fits stopped before their minimum (χ² shown as an "
            f"upper bound): {', '.join(h.label for h in early[:6])}"
            f"{' ...' if len(early) > 6 else ''}[/]"
        )
    failed = [h for h in diag.hypotheses if h.fit.status == "no-operating-point"]
    if failed:
        parts.append(
            f"[{STYLE_DIM}]no operating point (probability 0): "
            f"{', '.join(h.label for h in failed)}[/]"
        )
    if diag.pair_search is not None:
        ps = diag.pair_search
        parts.append(
            f"[{STYLE_DIM}]Pairs of faults: {ps.fitted} of {ps.candidates} fitted exactly, "
            f"the rest ranked below them by an optimistic score from the single fits "
            f"(stopped by {ps.stopped_by}); a pair's prior is the product of its faults' "
            f"odds against none.[/]"
        )
    parts.append(
        f"[{STYLE_DIM}]Probabilities use prior weights over fault kinds "
        f"({', '.join(f'{k} {v:g}' for k, v in diag.prior_weights.items())}); "
        f"the defaults are invented guesses.[/]"
    )
    return Group(*parts)


def print_diagnosis(diag: Diagnosis, console: Console | None = None, *, rows: int = 10,
                    wide: bool = False) -> None:
    """Print a diagnosis for a person (the CLI's ``diagnose`` without ``--json``)."""
    console = console or make_console()
    title = diag.board.title or (diag.board.source_path or "board")
    console.print(f"[bold]{markup(title)}[/]: {diag.n_readings} readings")
    console.print(diagnosis_tables(diag, rows=rows, wide=wide))
