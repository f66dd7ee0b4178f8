"""The ``reconcile`` command line: a thin typer app.

Each command imports what it needs inside its body, so ``reconcile --help`` stays fast.
Errors the project raises on purpose (:class:`reconcile.errors.ReconcileError`) become one
line on stderr and exit code 2 (bad input) or 1 (other known failures); ``--debug``
shows the traceback instead.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Optional

import typer

from .errors import InputError, ReconcileError

app = typer.Typer(
    name="reconcile",
    help=(
        "Fit a model of a built transistor board to bench readings: what was built, "
        "what is wrong with it, and the least rework that restores its spec."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)

_state = {"debug": False}

JsonOpt = Annotated[bool, typer.Option("--json", help="Print exactly one JSON object on stdout.")]
BoardArg = Annotated[Path, typer.Argument(help="Board file (TOML).", show_default=False)]


@app.callback()
def _root(
    debug: Annotated[bool, typer.Option("--debug", help="Show tracebacks for errors.")] = False,
) -> None:
    _state["debug"] = debug


def emit_json(obj: object) -> None:
    from .jsonout import dumps

    sys.stdout.write(dumps(obj) + "\n")


def _temperature_option(text: str | None) -> float | None:
    if text is None:
        return None
    from .values import parse_temperature

    try:
        return parse_temperature(text)
    except InputError as err:
        raise err.located(key="--temperature") from None


@app.command()
def solve(
    board: BoardArg,
    json: JsonOpt = False,
    temperature: Annotated[
        Optional[str],  # noqa: UP045 - typer needs Optional here
        typer.Option(help="Junction temperature, e.g. '45 C' (default: the board's)."),
    ] = None,
) -> None:
    """Solve the board as drawn: operating point, small signal and the spec check."""
    from .board_loader import load_board
    from .solve import solve as solve_board

    b = load_board(board)
    sol = solve_board(b, temperature=_temperature_option(temperature))
    if json:
        emit_json(sol.to_dict())
        return
    from .render_solve import print_solution

    print_solution(sol)


ReadingsArg = Annotated[
    Optional[Path],  # noqa: UP045
    typer.Argument(help="Readings file (CSV).", show_default=False),
]
PlotOpt = Annotated[
    Optional[Path],  # noqa: UP045
    typer.Option("--plot", help="Write a PNG plot to this file."),
]


def _readings_for(board_obj, readings_path: Path | None, command: str):
    from .readings import load_readings

    if readings_path is None:
        raise InputError(f"{command} needs a READINGS file (or --session ID)")
    return load_readings(readings_path, board_obj)


@app.command()
def fit(
    board: BoardArg,
    readings: ReadingsArg = None,
    json: JsonOpt = False,
    plot: PlotOpt = None,
    meter_model: Annotated[
        bool,
        typer.Option(
            "--meter-model/--no-meter-model",
            help="Predict voltage readings with the voltmeter attached (default on).",
        ),
    ] = True,
) -> None:
    """Fit the built board to its readings: values, uncertainties, miss budget, next reading."""
    from .analysis import run_fit

    b, rd = _inputs(board, readings, "fit")
    outcome = run_fit(b, rd, model_meter=meter_model)
    if plot is not None:
        from .plots_fit import plot_fit

        plot_fit(outcome.fit, plot)
    if json:
        emit_json(outcome.to_dict())
        return
    from .render_fit import print_fit

    print_fit(outcome.fit, outcome.budget, outcome.suggestions)
    if plot is not None:
        typer.echo(f"plot written to {plot}")


def _inputs(board_path: Path, readings_path: Path | None, command: str):
    from .board_loader import load_board

    b = load_board(board_path)
    return b, _readings_for(b, readings_path, command)


@app.command()
def demo(
    json: JsonOpt = False,
    out: Annotated[
        Optional[Path],  # noqa: UP045
        typer.Option(help="Folder for everything the demo writes (default: ./reconcile-demo-output)."),
    ] = None,
) -> None:
    """Run the bench story on the bundled sample boards (invented examples)."""
    from .demo import run_demo

    run_demo(json_output=json, out_dir=out)


def main() -> None:
    """Console-script entry point with the project's single error handler.

    typer handles usage errors itself (exit 2); everything the project raises on
    purpose is caught here.
    """
    try:
        app()
    except ReconcileError as err:
        if _state["debug"]:
            raise
        sys.stderr.write(f"reconcile: {err}\n")
        sys.exit(err.exit_code)
    except KeyboardInterrupt:
        sys.stderr.write("reconcile: interrupted\n")
        sys.exit(130)
    except BrokenPipeError:
        sys.exit(1)
    except OSError as err:
        if _state["debug"]:
            raise
        name = getattr(err, "filename", None)
        sys.stderr.write(f"reconcile: {str(name) + ': ' if name else ''}{err.strerror or err}\n")
        sys.exit(2)


if __name__ == "__main__":  # pragma: no cover
    main()
