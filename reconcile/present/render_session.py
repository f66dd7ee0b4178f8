"""Rich tables for the session store's list and show."""

from __future__ import annotations

from rich.console import Console
from rich.table import Table

from reconcile.present.console import make_console
from reconcile.present import numbers
from reconcile.present.escape import markup


def _reading_cell(r: dict, column: str) -> str:
    if column == "value":
        typed = (r.get("typed") or {}).get("unit") or ""
        if r.get("quantity") == "temperature":
            return numbers.temperature(r["value"], r.get("uncertainty"),
                                       typed="K" if typed.strip() == "K" else "C")
        return numbers.with_u(r["value"], r.get("uncertainty"), r.get("unit", ""))
    value = r.get(column)
    return markup(value)


def print_session_list(data: dict, console: Console | None = None) -> None:
    console = console or make_console()
    t = Table(title=f"Sessions in {markup(data['store'])}", title_justify="left")
    for col in (
        "session",
        "board",
        "serial",
        "operator",
        "started",
        "ended",
        "readings",
        "analyses",
    ):
        t.add_column(col, justify="right" if col in ("readings", "analyses") else "left")
    for s in data["sessions"]:
        t.add_row(
            markup(s.get("session", "")),
            markup(s.get("board_title", "")),
            markup(s.get("serial", "")),
            markup(s.get("operator", "")),
            markup(s.get("started", "")),
            markup(s.get("ended") or "open"),
            markup(s.get("readings", "")),
            markup(s.get("analyses", "")),
        )
    console.print(t)


def print_session(data: dict, console: Console | None = None) -> None:
    console = console or make_console()
    meta = {k: v for k, v in data.items() if not isinstance(v, list | dict)}
    head = Table(show_header=False, title="Session", title_justify="left")
    head.add_column("key")
    head.add_column("value")
    for k, v in meta.items():
        head.add_row(markup(k), "-" if v is None else markup(v))
    console.print(head)
    readings = data.get("readings") or []
    if readings:
        t = Table(title="Current readings", title_justify="left")
        cols = [
            c
            for c in (
                "id",
                "quantity",
                "at",
                "value",
                "uncertainty",
                "instrument",
                "taken_at",
                "note",
            )
            if c in readings[0]
        ]
        cols = [c for c in cols if c != "uncertainty"]
        for c in cols:
            t.add_column("value ± u" if c == "value" else c,
                         justify="right" if c == "value" else "left")
        for r in readings:
            t.add_row(*(_reading_cell(r, c) for c in cols))
        console.print(t)
    analyses = data.get("analyses") or []
    if analyses:
        t = Table(title="Analyses recorded", title_justify="left")
        cols = list(analyses[0].keys())
        for c in cols:
            t.add_column(markup(c))
        for a in analyses:
            t.add_row(*("-" if a.get(c) is None else markup(a.get(c)) for c in cols))
        console.print(t)
