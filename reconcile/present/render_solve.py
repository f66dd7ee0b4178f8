"""Rich tables for a solved board (human output of ``reconcile solve``)."""

from __future__ import annotations

from rich.console import Console, Group
from rich.table import Table

from reconcile.engine.solution import BoardSolution
from reconcile.model.quantities import REGISTRY
from reconcile.present.console import make_console
from reconcile.present.escape import markup
from reconcile.present import numbers

STYLE_OK = "green"
STYLE_BAD = "bold red"
STYLE_WARN = "yellow"


def _si(x: float | None, unit: str) -> str:
    if x is None:
        return "∞"
    return numbers.si(x, unit, 4)


def solution_tables(sol: BoardSolution) -> Group:
    """Node voltages, transistors, supplies, resistors, small signal and spec check.

    Node names and part refs are the user's text: escaped for rich markup."""
    parts: list = [_nodes_table(sol)]
    if sol.transistors:
        parts.append(_transistors_table(sol))
    parts += [_supplies_table(sol), _resistors_table(sol)]
    if sol.small_signal is not None:
        parts.append(_small_signal_table(sol.small_signal))
    if sol.spec_checks:
        parts.append(_spec_table(sol))
    parts += [f"[{STYLE_WARN}]warning:[/] {markup(w)}" for w in sol.warnings]
    return Group(*parts)


def _nodes_table(sol: BoardSolution) -> Table:
    nodes = Table(title="Node voltages", title_justify="left")
    nodes.add_column("node")
    nodes.add_column("voltage", justify="right")
    for name, v in sol.nodes.items():
        nodes.add_row(markup(name), "no DC path" if v is None else numbers.si(v, "V", 5))
    return nodes


def _transistors_table(sol: BoardSolution) -> Table:
    q = Table(title="Transistors", title_justify="left")
    q.add_column("")
    for ref in sol.transistors:
        q.add_column(markup(ref), justify="right")
    ts = list(sol.transistors.values())

    def row(label: str, fmt) -> None:
        q.add_row(label, *(fmt(t) for t in ts))

    def region(t: dict) -> str:
        style = STYLE_OK if t["region"] == "forward-active" else STYLE_BAD
        return f"[{style}]{t['region']}[/]"

    row("polarity", lambda t: t["polarity"])
    row("region", region)
    row("IC", lambda t: _si(t["ic"], "A"))
    row("IB", lambda t: _si(t["ib"], "A"))
    row("VBE", lambda t: f"{t['vbe']:.4f} V")
    row("VCE", lambda t: f"{t['vce']:.3f} V")
    row("gm", lambda t: _si(t["gm"], "S"))
    row("rπ", lambda t: _si(t["rpi"], "Ω"))
    row("ro", lambda t: _si(t["ro"], "Ω"))
    row("dissipation", lambda t: _si(t["power"], "W"))
    return q


def _supplies_table(sol: BoardSolution) -> Table:
    s = Table(title="Supplies", title_justify="left")
    for col in ("ref", "voltage", "current"):
        s.add_column(col, justify="right" if col != "ref" else "left")
    for ref, sup in sol.supplies.items():
        s.add_row(markup(ref), numbers.si(sup["volts"], "V"), _si(sup["current"], "A"))
    return s


def _resistors_table(sol: BoardSolution) -> Table:
    r = Table(title="Resistors", title_justify="left")
    for col in ("ref", "value", "current", "power", "rating"):
        r.add_column(col, justify="right" if col != "ref" else "left")
    for ref, res in sol.resistors.items():
        rating = res["rating"]
        power = _si(res["power"], "W")
        if rating is not None and res["power"] > rating:
            power = f"[{STYLE_BAD}]{power}[/]"
        r.add_row(markup(ref), _si(res["ohms"], "Ω"), _si(res["current"], "A"), power,
                  _si(rating, "W") if rating is not None else "-")
    return r


def _small_signal_table(ss: dict) -> Table:
    t = Table(title=f"Small signal at {_si(ss['frequency'], 'Hz')}", title_justify="left")
    t.add_column("quantity")
    t.add_column("value", justify="right")
    for q in REGISTRY.values():
        if q.small_signal and q.name in ss:
            t.add_row(q.label, numbers.si(ss[q.name], q.unit, q.digits))
    return t


def _spec_table(sol: BoardSolution) -> Table:
    sp = Table(title="Spec", title_justify="left")
    for col in ("quantity", "target", "allowed", "value", "margin", "result"):
        sp.add_column(col, justify="left" if col in ("quantity", "result") else "right")
    for c in sol.spec_checks:
        unit = numbers.quantity_symbol(c.quantity)
        sp.add_row(
            markup(c.quantity),
            _si(c.target, unit),
            f"{_si(c.low, unit)} … {_si(c.high, unit)}",
            _si(c.value, unit),
            numbers.percent(c.margin),
            f"[{STYLE_OK}]meets[/]" if c.met else f"[{STYLE_BAD}]misses[/]",
        )
    return sp


def print_solution(sol: BoardSolution, console: Console | None = None) -> None:
    console = console or make_console()
    title = sol.board.title or (sol.board.source_path or "board")
    console.print(f"[bold]{title}[/]")
    console.print(solution_tables(sol))


def _quantity_unit(name: str) -> str:
    if name.startswith("nodes."):
        return "V"
    return "Ω" if name.endswith("resistance") else ""


def design_samples_tables(design) -> Group:
    """The ``--samples`` result: yield with its interval, spreads, and the drivers."""
    from rich.markup import escape

    parts = []
    head = f"Built {design.n:,} times in simulation (seed {design.seed})"
    if design.yield_fraction is not None:
        lo, hi = design.yield_interval
        head += (
            f": {100 * design.yield_fraction:.2f}% meet the spec "
            f"(95% interval {100 * lo:.2f}% … {100 * hi:.2f}%)"
        )
    else:
        head += ": the board has no [spec], so no yield"
    parts.append(f"[bold]{head}[/]")
    if design.unsolved:
        parts.append(
            f"[{STYLE_WARN}]warning:[/] {design.unsolved:,} drawn boards have no DC "
            "operating point (counted as failing)"
        )
    t = Table(title="Spread over the drawn boards", title_justify="left")
    for col in ("quantity", "mean", "sd", "5%", "50%", "95%"):
        t.add_column(col, justify="left" if col == "quantity" else "right")
    for name, s in design.quantities.items():
        unit = _quantity_unit(name)
        t.add_row(
            escape(name),
            *(_si(s[k], unit) if s[k] == s[k] else "-" for k in ("mean", "sd", "p05", "p50", "p95")),
        )
    parts.append(t)
    if design.drivers:
        d = Table(
            title=f"What drives the spread (rank correlation, first {design.driver_samples:,} boards)",
            title_justify="left",
        )
        d.add_column("quantity")
        d.add_column("parameters, strongest first")
        for name, rows in design.drivers.items():
            d.add_row(escape(name), ", ".join(f"{escape(ref)} {rho:+.2f}" for ref, rho in rows))
        parts.append(d)
    return Group(*parts)


def print_design_samples(design, console: Console | None = None) -> None:
    console = console or make_console()
    console.print(design_samples_tables(design))
