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

from reconcile.cli.output import check_count, check_plot_path, emit_json
from reconcile.errors import InputError, ReconcileError

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


def _register_subcommands() -> None:
    from reconcile.cli.capture import capture
    from reconcile.cli.derive import derive_app
    from reconcile.cli.session import session_app

    app.add_typer(session_app, name="session")
    app.add_typer(derive_app, name="derive")
    app.command()(capture)


_register_subcommands()

JsonOpt = Annotated[bool, typer.Option("--json", help="Print exactly one JSON object on stdout.")]
BoardArg = Annotated[Path, typer.Argument(help="Board file (TOML).", show_default=False)]


@app.callback()
def _root(
    debug: Annotated[bool, typer.Option("--debug", help="Show tracebacks for errors.")] = False,
    memory: Annotated[Optional[str], typer.Option(  # noqa: UP045 - typer needs Optional
        "--memory", metavar="SIZE",
        help="Memory budget of each batched step, e.g. 256M or 2G (default 512M, or "
             "RECONCILE_MEMORY); 16M to 1024G.")] = None,
) -> None:
    _state["debug"] = debug
    loaded = sys.modules.get("reconcile.engine.budget")  # (importing it loads the engine)
    if loaded is not None:  # each command line starts from RECONCILE_MEMORY or the default
        loaded.forget_budget()
    if memory is not None:
        from reconcile.engine.budget import parse_budget, set_budget

        set_budget(parse_budget(memory, key="--memory"))


def _out_ready(prepare, path: Path):
    """``prepare(path)`` (make an output folder, or a report file's folder), a failure
    told as one line naming ``--out``."""
    try:
        return prepare(path)
    except OSError as err:
        where = err.filename if err.filename is not None else path
        raise InputError(f"{where}: {err.strerror or err}", key="--out") from None


def _value_option(text: str | None, kind: str, option: str) -> float | None:
    if text is None:
        return None
    from reconcile.model.values import parse_value

    try:
        return parse_value(text, kind)
    except InputError as err:
        raise err.located(key=option) from None


@app.command()
def solve(
    board: BoardArg,
    json: JsonOpt = False,
    temperature: Annotated[
        Optional[str],  # noqa: UP045 - typer needs Optional here
        typer.Option(help="Junction temperature, e.g. '45 C' (default: the board's)."),
    ] = None,
    samples: Annotated[
        int,
        typer.Option(
            "--samples",
            help="Also build the board N times in simulation (parts and devices drawn from "
            "their tolerances and ranges): yield, spread and what drives it (0: off).",
        ),
    ] = 0,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the --samples draws.")] = 0,
    sweep: Annotated[
        Optional[str],  # noqa: UP045
        typer.Option("--sweep", metavar="FROM:TO[:POINTS]",
                     help="Also sweep the frequency (log-spaced, e.g. 10:1M:200): gain, "
                     "phase, |Zin|, |Zout|, mid-band gain and the -3 dB corners."),
    ] = None,
    plot: Annotated[
        Optional[Path],  # noqa: UP045
        typer.Option("--plot", help="With --sweep: write the Bode plot (PNG, SVG or PDF)."),
    ] = None,
) -> None:
    """Solve the board as drawn: operating point, small signal and the spec check."""
    from reconcile.model.board_loader import load_board
    from reconcile.engine.solution import solve as solve_board

    frequencies = None
    if sweep is not None:
        from reconcile.engine.sweep import SweepRange

        frequencies = SweepRange.from_text(sweep).frequencies()
    if plot is not None:
        if sweep is None:
            raise InputError("--plot draws the frequency response: give --sweep FROM:TO too",
                             key="--plot")
        check_plot_path(plot)
    b = load_board(board)
    check_count(seed, "--seed")
    if samples != 0:  # 0, the default, is no Monte Carlo
        from reconcile.analysis.monte_carlo import check_samples

        check_samples(b, samples)
    sol = solve_board(b, temperature=_value_option(temperature, "temperature", "--temperature"))
    design = None
    if samples:
        from reconcile.analysis.monte_carlo import design_samples
        from reconcile.present.progress import chunk_progress

        with chunk_progress("solving drawn boards", samples, enabled=not json) as on_progress:
            design = design_samples(b, samples, seed=seed, on_progress=on_progress)
    response = sol.sweep(frequencies) if frequencies is not None else None
    if plot is not None:
        from reconcile.present.plots_sweep import plot_bode

        plot_bode(response, plot, title=b.title or "")
    if json:
        out = sol.to_dict()
        if design is not None:
            out["samples"] = design.to_dict()
        if response is not None:
            out["sweep"] = response.to_dict()
        emit_json(out)
        return
    from reconcile.present.render_solve import print_design_samples, print_solution

    print_solution(sol)
    if design is not None:
        print_design_samples(design)
    if response is not None:
        from reconcile.present.render_sweep import print_sweep

        print_sweep(response)
    if plot is not None:
        typer.echo(f"plot written to {plot}")


ReadingsArg = Annotated[
    Optional[Path],  # noqa: UP045
    typer.Argument(help="Readings file (CSV).", show_default=False),
]
PlotOpt = Annotated[
    Optional[Path],  # noqa: UP045
    typer.Option("--plot", help="Write a PNG plot to this file."),
]


SessionOpt = Annotated[
    Optional[str],  # noqa: UP045
    typer.Option("--session", help="Analyse a stored session (and record the result with it)."),
]
StoreOpt = Annotated[
    Optional[str],  # noqa: UP045
    typer.Option("--store", help="Store file path or database URL (default: your data folder)."),
]
AssumeOpt = Annotated[
    Optional[list[str]],  # noqa: UP045
    typer.Option(
        "--assume", metavar="REF:FAULT|REF=VALUE",
        help="Analyse the board as built under this fault (repeatable): CE:missing, "
        "RC:open, RE:short, Q1:reversed, RE1:wrong-value, or RE1=270, CE=4.7u for a part "
        "read out of circuit.")]
BoardOptArg = Annotated[
    Optional[Path],  # noqa: UP045
    typer.Argument(help="Board file (TOML); not needed with --session.", show_default=False),
]


@app.command()
def fit(
    board: BoardOptArg = None,
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
    session: SessionOpt = None,
    store: StoreOpt = None,
    assume: AssumeOpt = None,
    profile: Annotated[
        Optional[list[str]],  # noqa: UP045
        typer.Option("--profile", metavar="PARAM",
                     help="Profile-likelihood interval of PARAM (a key such as RE or Q1.IS) "
                          "at 1 and 2 sigma; repeatable."),
    ] = None,
    sample: Annotated[
        int,
        typer.Option("--sample", metavar="N",
                     help="Draw the posterior with N steps of an ensemble sampler (emcee, "
                          "the [sample] extra): median and 16/84 % and 2.5/97.5 %."),
    ] = 0,
    seed: Annotated[int, typer.Option(help="Seed of --sample.")] = 0,
) -> None:
    """Fit the built board to its readings: values, uncertainties, error budget, next reading."""
    from reconcile.pipeline.analyses import fit_step, with_intervals
    from reconcile.pipeline.inputs import AnalysisOptions

    if plot is not None:
        check_plot_path(plot)
    check_count(sample, "--sample")
    check_count(seed, "--seed")
    if sample:
        from reconcile.inference.sampling import check_sampling

        check_sampling(sample)
    options = AnalysisOptions(model_meter=meter_model, assume=tuple(assume or ()))
    inputs = _gather(board, readings, session, store, "fit", options)
    outcome = with_intervals(fit_step(inputs), profile=tuple(profile or ()), sample=sample,
                             seed=seed)
    result = outcome.to_dict()
    recorded = inputs.record("fit", result)
    if plot is not None:
        from reconcile.present.plots_fit import plot_fit

        plot_fit(outcome.fit, plot)
    if json:
        _emit_recorded(result, recorded)
        return
    outcome.report()
    if plot is not None:
        typer.echo(f"plot written to {plot}")
    _echo_recorded(recorded)


def _gather(board, readings, session, store, command: str, options=None, **kwargs):
    """The pipeline's inputs for a command; the loader's notices go to stderr (``--json``
    keeps stdout to one object)."""
    from reconcile.pipeline.inputs import AnalysisInputs

    inputs = AnalysisInputs.gather(
        board, readings, session, store, command, options=options, **kwargs
    )
    for notice in inputs.notices:
        typer.echo(f"note: {notice}", err=True)
    return inputs


def _emit_recorded(result: dict, recorded: dict | None) -> None:
    if recorded:
        result["recorded"] = recorded
    emit_json(result)


def _echo_recorded(recorded: dict | None) -> None:
    if recorded:
        typer.echo(
            f"recorded with session {recorded['session']} as analysis {recorded['analysis']}"
        )


OptStr = Optional[str]  # noqa: UP045 - typer needs Optional here


@app.command()
def lot(
    first: Annotated[
        Path, typer.Argument(help="Jig board (TOML), or a sweep file (CSV) on its own.")
    ],
    readings: Annotated[
        Optional[Path],  # noqa: UP045
        typer.Argument(help="Jig readings with a device column, or sweep data (CSV)."),
    ] = None,
    json: JsonOpt = False,
    plot: PlotOpt = None,
    bins: Annotated[OptStr, typer.Option(help="Beta bin edges, e.g. '100,150,200'.")] = None,
    vbe_limit: Annotated[str, typer.Option(help="Matching: largest VBE difference.")] = "2m",
    beta_ratio: Annotated[float, typer.Option(help="Matching: largest beta ratio.")] = 1.1,
    current: Annotated[str, typer.Option(help="Matching: collector current for VBE.")] = "1m",
    set_size: Annotated[int, typer.Option(help="Devices per matched set.")] = 2,
    spec_low: Annotated[Optional[float], typer.Option(help="Beta lower spec limit (Cpk).")] = None,  # noqa: UP045
    spec_high: Annotated[Optional[float], typer.Option(help="Beta upper spec limit (Cpk).")] = None,  # noqa: UP045
    socket: Annotated[
        OptStr, typer.Option(help="Jig transistor under test (default: the only one).")
    ] = None,
    device_name: Annotated[str, typer.Option(help="Name of the device table written.")] = "lot",
    early_voltage: Annotated[
        OptStr, typer.Option(help="Sweeps: VA for the Early correction.")
    ] = None,
    wide: Annotated[bool, typer.Option(
        "--wide", help="The full device table (a column per value and error, flags "
                       "written out) instead of the 80-column one.")] = False,
) -> None:
    """Characterise a transistor lot from jig readings or sweeps: spread, outliers, pairs."""
    from reconcile.lot.characterise import run_lot

    if plot is not None:
        check_plot_path(plot)
    jig, data = (first, readings) if readings is not None else (None, first)
    from reconcile.present.progress import stage_progress

    with stage_progress(enabled=not json) as stage:
        stage("characterising the lot")
        result = run_lot(
            jig,
            data,
            bins=bins,
            vbe_limit=_value_option(vbe_limit, "volts", "--vbe-limit"),
            beta_ratio=beta_ratio,
            current=_value_option(current, "amps", "--current"),
            spec_low=spec_low,
            spec_high=spec_high,
            socket=socket,
            set_size=set_size,
            device_name=device_name,
            early_voltage=_value_option(early_voltage, "volts", "--early-voltage"),
        )
    if plot is not None:
        from reconcile.present.plots_lot import plot_lot

        plot_lot(result, plot)
    if json:
        emit_json(result.to_dict())
        return
    from reconcile.present.render_lot import print_lot

    print_lot(result, wide=wide)
    if plot is not None:
        typer.echo(f"plot written to {plot}")


@app.command()
def diagnose(
    board: BoardOptArg = None,
    readings: ReadingsArg = None,
    json: JsonOpt = False,
    weights: Annotated[
        Optional[Path],  # noqa: UP045
        typer.Option(help="TOML file with [fault_weights] (prior weight per fault kind)."),
    ] = None,
    rows: Annotated[int, typer.Option(help="Hypotheses shown in the table.")] = 10,
    wide: Annotated[bool, typer.Option(
        "--wide", help="The full table (the fitted board as a column) instead of the "
        "80-column layout with a details line per hypothesis.")] = False,
    max_faults: Annotated[
        Optional[int],  # noqa: UP045
        typer.Option(
            "--max-faults",
            help="1: single faults only; 2: pairs of faults too "
            "(default: 2 when no single fault explains the readings, else 1).",
        ),
    ] = None,
    session: SessionOpt = None,
    store: StoreOpt = None,
) -> None:
    """Say which fault (or pair of faults) best explains the readings, and the check to
    confirm it."""
    from reconcile.pipeline.analyses import diagnose_step
    from reconcile.pipeline.inputs import AnalysisOptions
    from reconcile.present.progress import step_progress

    check_count(rows, "--rows", minimum=1)
    prior = None
    if weights is not None:
        from reconcile.diagnosis.weights import load_fault_weights

        prior = load_fault_weights(weights)
    options = AnalysisOptions(prior_weights=prior, max_faults=max_faults)
    inputs = _gather(board, readings, session, store, "diagnose", options)
    with step_progress("fitting pairs of faults", enabled=not json) as on_progress:
        diag = diagnose_step(inputs, on_progress=on_progress)
    out = diag.to_dict()
    recorded = inputs.record("diagnose", out)
    if json:
        _emit_recorded(out, recorded)
        return
    from reconcile.present.render_diagnosis import print_diagnosis

    print_diagnosis(diag, rows=rows, wide=wide)
    _echo_recorded(recorded)


@app.command()
def trim(
    board: BoardOptArg = None,
    readings: ReadingsArg = None,
    json: JsonOpt = False,
    plot: PlotOpt = None,
    max_changes: Annotated[int, typer.Option(help="Most parts one option changes.")] = 2,
    top: Annotated[int, typer.Option(help="How many options to show.")] = 10,
    samples: Annotated[int, typer.Option(help="Monte Carlo samples for the yield.")] = 10_000,
    seed: Annotated[int, typer.Option(help="Seed of the Monte Carlo draws.")] = 0,
    wide: Annotated[bool, typer.Option(
        "--wide", help="The full table (spec bands in the header, worst-case margins) "
        "instead of the 80-column layout.")] = False,
    session: SessionOpt = None,
    store: StoreOpt = None,
    assume: AssumeOpt = None,
) -> None:
    """Propose the least rework (standard values, swaps or parts in parallel) that restores
    the spec, with its yield. Without readings: design mode on the drawn board."""
    from reconcile.pipeline.analyses import trim_step
    from reconcile.pipeline.inputs import AnalysisOptions

    if plot is not None:
        check_plot_path(plot)
    for value, option, minimum in ((max_changes, "--max-changes", 1), (top, "--top", 1),
                                   (samples, "--samples", 0), (seed, "--seed", 0)):
        check_count(value, option, minimum=minimum)
    options = AnalysisOptions(max_changes=max_changes, top=top, trim_samples=samples, seed=seed,
                              assume=tuple(assume or ()))
    inputs = _gather(board, readings, session, store, "trim", options, readings_optional=True)
    from reconcile.present.progress import stage_progress

    with stage_progress(enabled=not json) as stage:
        stage("fitting the board, then searching reworks and their yield")
        outcome = trim_step(inputs)
    out = outcome.to_dict()
    recorded = inputs.record("trim", out)
    if plot is not None and samples > 0:
        from reconcile.present.plots_trim import plot_trim

        plot_trim(outcome.result, plot)
    if json:
        _emit_recorded(out, recorded)
        return
    from reconcile.present.show import print_trim_outcome

    print_trim_outcome(outcome, wide=wide)
    if plot is not None:
        typer.echo(f"plot written to {plot}")


@app.command()
def report(
    board: BoardOptArg = None,
    readings: ReadingsArg = None,
    session: SessionOpt = None,
    store: StoreOpt = None,
    out: Annotated[Path, typer.Option("--out", help="HTML file to write.")] = Path(
        "reconcile-report.html"
    ),
    lot_jig: Annotated[
        Optional[Path],  # noqa: UP045
        typer.Option(help="Add a lot: its jig board (TOML), with --lot-readings."),
    ] = None,
    lot_readings: Annotated[
        Optional[Path],  # noqa: UP045
        typer.Option(help="Add a lot: jig readings or sweep data (CSV)."),
    ] = None,
    json: JsonOpt = False,
    assume: AssumeOpt = None,
) -> None:
    """Write the bench story as one self-contained HTML page (plots embedded)."""
    import tempfile

    from reconcile.pipeline.inputs import AnalysisOptions
    from reconcile.present.report import build_report, prepare_report_path, write_report

    inputs = _gather(board, readings, session, store, "report",
                     AnalysisOptions(assume=tuple(assume or ())))
    _out_ready(prepare_report_path, out)  # before the seconds of analysis, not after
    meta = None
    if session is not None:
        from reconcile.store.sessions import show_session

        meta = {k: v for k, v in show_session(session, store=store).items() if k != "readings"}
    from reconcile.present.progress import stage_progress

    lot_result = lot_png = None
    with stage_progress(enabled=not json) as stage, tempfile.TemporaryDirectory() as tmp:
        if lot_readings is not None:
            from reconcile.lot.characterise import run_lot
            from reconcile.present.plots_lot import plot_lot

            stage("characterising the lot")
            lot_result = run_lot(lot_jig, lot_readings)
            lot_png = plot_lot(lot_result, Path(tmp) / "lot.png").read_bytes()
        data = build_report(inputs, session=meta, lot_result=lot_result, lot_plot=lot_png,
                            work_dir=Path(tmp), on_stage=stage)
    path = write_report(data, out)
    data.analysis.record()
    recorded = inputs.record("report", {"path": str(path.resolve()), **data.hashes})
    summary = {
        "report": str(path.resolve()),
        "sections": [
            k
            for k in ("board", "readings", "fit", "budget", "diagnosis", "trim", "lot")
            if k in data.plots or k in ("board", "readings")
        ],
        "plots": sorted(data.plots),
        "hashes": data.hashes,
        "recorded": recorded,
    }
    if json:
        emit_json(summary)
    else:
        typer.echo(f"report written to {path.resolve()}")


@app.command()
def demo(
    json: JsonOpt = False,
    out: Annotated[
        Optional[Path],  # noqa: UP045
        typer.Option(
            help="Folder for everything the demo writes (default: ./reconcile-demo-output)."
        ),
    ] = None,
) -> None:
    """Run the bench story on the bundled sample boards (invented examples)."""
    from reconcile.cli.demo import run_demo

    if out is not None:
        _out_ready(lambda p: p.mkdir(parents=True, exist_ok=True), out)
    run_demo(json_output=json, out_dir=out)


def _check_arguments(args: list[str]) -> None:
    """Refuse an argument that is not UTF-8 (Python hands its bytes over as lone
    surrogates, which no file, store or terminal can take): one line naming it."""
    for number, arg in enumerate(args, start=1):
        try:
            arg.encode("utf-8")
        except UnicodeEncodeError:
            raw = arg.encode("utf-8", "surrogateescape")
            raise InputError(
                f"argument {number} ({raw!r}) is not UTF-8 text; type it again in UTF-8 "
                "(or rename the file)") from None


def _print_input_warnings(redact) -> None:
    """Each input warning noted by the command, one line each on stderr (also with
    ``--json``, whose object lists them in ``warnings``)."""
    from reconcile.errors import input_warnings

    for message in input_warnings():
        _say(f"warning: {message}", redact)


def _say(text: str, redact) -> None:
    """One line on stderr: ``reconcile: `` and the text, with every password redacted
    and every control character or line separator shown escaped (user values such as
    ``--plot "\\r"`` are echoed in messages and must not break the line)."""
    from reconcile.present.escape import one_line

    sys.stderr.write(f"reconcile: {one_line(redact(text))}\n")


def _redacted_tracebacks(redact) -> None:
    """Print any traceback that reaches the interpreter (``--debug``, or a bug) with
    every password redacted, as a whole: exception messages, chained causes and all."""
    import traceback

    def hook(kind, error, tb) -> None:
        text = "".join(traceback.format_exception(kind, error, tb))
        sys.stderr.write(redact(text))

    sys.excepthook = hook


def main() -> None:
    """Console-script entry point with the project's single error handler.

    Usage errors (an unknown option, a bad integer) and everything the project raises
    on purpose become one line on stderr here.
    """
    from reconcile.present.console import tolerate_narrow_encoding
    from reconcile.store.redact import redact  # stdlib only; no password is ever printed

    from reconcile.errors import collect_input_warnings

    _redacted_tracebacks(redact)
    tolerate_narrow_encoding()
    collect_input_warnings()
    # typer >= 0.26 carries its own click (typer._click); older typer uses click itself
    try:
        from typer._click import exceptions as _usage
    except ImportError:  # pragma: no cover - depends on the typer release
        from click import exceptions as _usage
    try:
        _check_arguments(sys.argv[1:])
        # the click command itself: Typer.__call__ would put its own excepthook back
        code = typer.main.get_command(app)(standalone_mode=False)
        code = code if isinstance(code, int) else 0
        if code == 0:  # a command that failed prints its one line only
            _print_input_warnings(redact)
        sys.exit(code)
    except typer.Abort:
        _say("interrupted", redact)
        sys.exit(130)
    except _usage.NoArgsIsHelpError as err:
        err.show()  # no arguments: the help, as click shows it
        sys.exit(err.exit_code)
    except _usage.UsageError as err:
        # a usage error is bad input like any other: one line, exit 2
        where = err.ctx.command_path if err.ctx is not None else "reconcile"
        message = " ".join(err.format_message().split())
        _say(f"{message} (see '{where} --help')", redact)
        sys.exit(2)
    except _usage.ClickException as err:
        _say(" ".join(err.format_message().split()), redact)
        sys.exit(2)
    except ReconcileError as err:
        if _state["debug"]:
            raise
        line = str(err)
        from reconcile.errors import input_warnings

        noted = input_warnings()
        if noted and err.exit_code == 1:  # a failure a suspicious input may explain
            more = f"; and {len(noted) - 1} more" if len(noted) > 1 else ""
            line += f" (warning: {noted[0]}{more})"
        _say(line, redact)
        sys.exit(err.exit_code)
    except KeyboardInterrupt:
        _say("interrupted", redact)
        sys.exit(130)
    except BrokenPipeError:
        sys.exit(1)
    except MemoryError:
        if _state["debug"]:
            raise
        from reconcile.engine.budget import MIB, budget_bytes

        _say("ran out of memory (the batch budget is "
             f"{budget_bytes() / MIB:.0f} MiB; the machine or its limits allow less): give "
             "fewer samples or a smaller board, or lower the budget with --memory",
             redact)
        sys.exit(1)
    except OSError as err:
        if _state["debug"]:
            raise
        name = getattr(err, "filename", None)
        where = f"{name}: " if name else ""
        _say(f"{where}{err.strerror or err}", redact)
        sys.exit(2)


if __name__ == "__main__":  # pragma: no cover
    main()
