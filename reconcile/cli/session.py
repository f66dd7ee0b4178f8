"""``reconcile session ...``: the session store from the command line (thin)."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Optional

import typer

session_app = typer.Typer(
    name="session",
    help="Keep measurement sessions: a board snapshot plus every reading taken on it.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)

StoreOpt = Annotated[
    Optional[str],  # noqa: UP045 - typer needs Optional here
    typer.Option("--store", help="Store file path or database URL (default: your data folder)."),
]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print exactly one JSON object on stdout.")]
IdArg = Annotated[str, typer.Argument(help="Session id, e.g. S-K7QX2MZA.", show_default=False)]


def _emit(obj) -> None:
    from reconcile.cli.output import emit_json

    emit_json(obj)


@session_app.command("new")
def session_new(
    board: Annotated[Path, typer.Argument(help="Board file (TOML).", show_default=False)],
    serial: Annotated[str, typer.Option(help="Unit serial number.")] = "",
    operator: Annotated[str, typer.Option(help="Who is at the bench.")] = "",
    notes: Annotated[str, typer.Option(help="Bench notes.")] = "",
    store: StoreOpt = None,
    json: JsonOpt = False,
) -> None:
    """Start a session on a board (its file is snapshotted into the store)."""
    from reconcile.store.sessions import new_session

    out = new_session(board, serial=serial, operator=operator, notes=notes, store=store)
    if json:
        _emit(out)
    else:
        typer.echo(f"session {out['session']} started on {board}")


@session_app.command("add")
def session_add(
    session: IdArg,
    readings: Annotated[Path, typer.Argument(help="Readings file (CSV).", show_default=False)],
    again: Annotated[bool, typer.Option(
        "--again", help="Add a file this session already holds a second time.")] = False,
    store: StoreOpt = None,
    json: JsonOpt = False,
) -> None:
    """Append readings to a session (each committed as it is stored). Adding the same
    file again resumes an interrupted import, or is refused once it is complete."""
    from reconcile.store.sessions import add_readings_file

    out = add_readings_file(session, readings, again=again, store=store)
    if json:
        _emit(out)
    elif out["resumed"]:
        typer.echo(f"resumed import {out['import']['import']}: {out['added']} more readings "
                   f"added to {out['session']} ({out['already_stored']} were stored before)")
    else:
        typer.echo(f"{out['added']} readings added to {out['session']} "
                   f"(import {out['import']['import']})")


@session_app.command("correct")
def session_correct(
    session: IdArg,
    reading_id: Annotated[int, typer.Argument(help="Id of the reading to correct.")],
    row: Annotated[str, typer.Argument(help="The corrected reading as one CSV row.")],
    store: StoreOpt = None,
    json: JsonOpt = False,
) -> None:
    """Store a corrected reading that supersedes an earlier one (nothing is overwritten)."""
    from reconcile.store.sessions import correct_reading

    out = correct_reading(session, reading_id, row, store=store)
    if json:
        _emit(out)
    else:
        typer.echo(
            f"reading {reading_id} superseded by reading {out['id']} in session {out['session']}"
        )


@session_app.command("retract")
def session_retract(
    session: IdArg,
    reading_id: Annotated[int, typer.Argument(help="Id of the reading to withdraw.")],
    note: Annotated[str, typer.Option(help="Why.")] = "",
    store: StoreOpt = None,
    json: JsonOpt = False,
) -> None:
    """Withdraw a reading (it stays stored, marked as retracted)."""
    from reconcile.store.sessions import retract_reading

    out = retract_reading(session, reading_id, note=note, store=store)
    if json:
        _emit(out)
    else:
        typer.echo(
            f"reading {reading_id} retracted in session {out['session']} (record {out['id']})"
        )


@session_app.command("end")
def session_end(
    session: IdArg,
    note: Annotated[str, typer.Option(help="Closing note.")] = "",
    store: StoreOpt = None,
    json: JsonOpt = False,
) -> None:
    """Record the end of a session (it then takes no more readings)."""
    from reconcile.store.sessions import end_session

    out = end_session(session, note=note, store=store)
    if json:
        _emit(out)
    else:
        typer.echo(f"session {out['session']} ended at {out['ended']}")


@session_app.command("list")
def session_list(store: StoreOpt = None, json: JsonOpt = False) -> None:
    """List the sessions in the store."""
    from reconcile.store.sessions import list_sessions

    out = list_sessions(store=store)
    if json:
        _emit(out)
        return
    from reconcile.present.render_session import print_session_list

    print_session_list(out)


@session_app.command("show")
def session_show(session: IdArg, store: StoreOpt = None, json: JsonOpt = False) -> None:
    """Show a session: board, unit, current readings and the analyses recorded."""
    from reconcile.store.sessions import show_session

    out = show_session(session, store=store)
    if json:
        _emit(out)
        return
    from reconcile.present.render_session import print_session

    print_session(out)


@session_app.command("export")
def session_export(
    session: IdArg,
    store: StoreOpt = None,
    output: Annotated[
        Optional[Path],  # noqa: UP045
        typer.Option("--output", "-o", help="Write the CSV here instead of stdout."),
    ] = None,
    json: JsonOpt = False,
) -> None:
    """Print the session's current readings as a readings CSV (it round-trips exactly)."""
    from reconcile.store.sessions import export_session

    text = export_session(session, store=store)
    if output is not None:
        output.write_text(text, encoding="utf-8")
    if json:
        _emit(
            {
                "session": session.strip().upper(),
                "csv": text,
                "output": str(output) if output else None,
            }
        )
    elif output is None:
        sys.stdout.write(text)
