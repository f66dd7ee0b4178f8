"""``reconcile capture``: take a session's readings from instruments (thin).

Registered in :mod:`reconcile.cli` with ``app.command()(capture)``. Importing this
module costs only typer: the instrument layer, pyvisa and the store load inside the
command.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Optional

import typer

if TYPE_CHECKING:
    from reconcile.capture.run import CaptureReport, LiveValue
    from reconcile.capture.plan import ProbeStep

__all__ = ["capture"]

_FileOpt = Optional[Path]  # noqa: UP045 - typer needs Optional here
_TextOpt = Optional[str]  # noqa: UP045


def _shown(value: float, unit: str, digits: int) -> str:
    from reconcile.model.values import format_si

    return f"{value:.{digits}g}" if not unit else format_si(value, unit, digits)


def _value(text: str | None, kind: str, option: str, default: float) -> float:
    if text is None:
        return default
    from reconcile.errors import InputError
    from reconcile.model.values import parse_value

    try:
        if kind == "tolerance":
            from reconcile.model.values import parse_tolerance

            return parse_tolerance(text)
        return parse_value(text, kind)
    except InputError as err:
        raise err.located(key=option) from None


class _Screen:
    """Prints a capture run: a live line per reading, a line per stored reading.

    On a terminal the value updates in place until it settles (rich Live, on stderr, with
    the run's progress: which of the plan's readings it is on); elsewhere (a pipe, a log
    file) only the stored readings are printed. With ``--json`` everything goes to
    stderr, so stdout holds the one JSON object, and the progress is left out.
    """

    def __init__(self, *, json_output: bool) -> None:
        from reconcile.present.console import make_console

        self.console = make_console(stderr=json_output, highlight=False, soft_wrap=True)
        self.status = make_console(stderr=True, highlight=False, soft_wrap=True)
        self.counting = not json_output
        self.steps: dict[str, int] = {}
        self.step = 0
        self.live: Any = None

    def follow(self, plan: tuple[Any, ...]) -> None:
        """Count progress through ``plan`` (its readings' labels, in order)."""
        self.steps = {p.label: i for i, p in enumerate(plan, start=1)}

    def _stop_live(self) -> None:
        if self.live is not None:
            self.live.stop()
            self.live = None

    def _where(self, label: str) -> str:
        """``reading 3 of 12 · `` for the plan's reading ``label`` belongs to."""
        self.step = self.steps.get(label.split(": ")[0], self.step)
        if not (self.counting and self.steps and self.step):
            return ""
        return f"reading {self.step} of {len(self.steps)} · "

    def show(self, event: LiveValue) -> None:
        where = self._where(event.label)
        if event.stored:
            self._stop_live()
            u = (
                "" if event.uncertainty is None
                else f" ± {_shown(event.uncertainty, event.unit, 3)}"
            )
            self.console.print(
                f"[green]stored[/] {event.label}: {_shown(event.value, event.unit, 7)}{u}"
            )
            return
        if not self.status.is_terminal:
            return
        from rich.live import Live
        from rich.text import Text

        state = "settled" if event.settled else "settling"
        text = Text(f"  {where}{event.label}: {_shown(event.value, event.unit, 7)}  "
                    f"(value {event.sample}, {state})")
        if self.live is None:
            self.live = Live(text, console=self.status, auto_refresh=False, transient=True)
            self.live.start()
        self.live.update(text, refresh=True)

    def say(self, text: str) -> None:
        self._stop_live()
        self.console.print(text, markup=False)

    def ask(self, step: ProbeStep) -> str:
        """The operator's prompt: the step's text, then wait for Enter (Ctrl-C stops)."""
        from reconcile.errors import InputError

        self._stop_live()
        self.console.print(f">> {step.text} ", end="", markup=False)
        self.console.file.flush()
        line = sys.stdin.readline()
        if line == "":
            self.console.print()
            raise InputError(
                "capture needs an operator at the terminal to place the probe, but input "
                "is closed; use a scanner whose [channels] reach every node, or --simulate",
                key="prompt")
        return line.strip()

    def simulated(self, operator: Any) -> Any:
        """Wrap the simulated operator so that its steps are shown."""

        def prompt(step: ProbeStep) -> str | None:
            self.say(f">> {step.text} [simulated operator]")
            return operator(step)

        return prompt

    def summary(self, report: CaptureReport) -> None:
        from rich.table import Table

        self._stop_live()
        table = Table(title=f"Capture into session {report.session}", title_justify="left")
        swept = any(t.reading.frequency is not None for t in report.taken)
        cols = ("id", "quantity", "at") + (("frequency",) if swept else ()) + (
            "value", "uncertainty", "values read")
        for col in cols:
            table.add_column(col, justify="right" if col in ("id", "values read") else "left")
        for t in report.taken:
            r = t.reading
            f = ((("" if r.frequency is None else _shown(r.frequency, "Hz", 4)),) if swept
                 else ())
            table.add_row(str(t.id), r.quantity, r.at, *f, _shown(r.value, r.unit, 7),
                          _shown(r.uncertainty or 0.0, r.unit, 3), str(t.samples))
        self.console.print(table)
        for p in report.skipped_existing:
            self.console.print(f"skipped {p.label}: already in the session")
        for p, why in report.skipped:
            self.console.print(f"skipped {p.label}: {why}")
        self.console.print(f"{len(report.taken)} readings stored by this run; the session "
                           f"now holds {report.stored_total}")


# The command's options, named once (typer reads them from the annotations).
_BoardArg = Annotated[Path, typer.Argument(help="Board file (TOML) of the session.",
                                           show_default=False)]
_SessionOpt = Annotated[str, typer.Option("--session", help="Session id to capture into.",
                                          show_default=False)]
_StoreOpt = Annotated[_TextOpt, typer.Option(
    "--store", help="Store file path or database URL (default: your data folder).")]
_DmmOpt = Annotated[_FileOpt, typer.Option(
    "--dmm", help="Instrument file of the DC voltmeter (also the AC one if it has the role).",
)]
_SupplyOpt = Annotated[Optional[list[str]], typer.Option(  # noqa: UP045
    "--supply", help="Instrument file of the bench supply, FILE or REF=FILE (repeatable).",
)]
_ScannerOpt = Annotated[_FileOpt, typer.Option(
    "--scanner", help="Instrument file of a scanner; its [channels] map channels to nodes.",
)]
_AcMeterOpt = Annotated[_FileOpt, typer.Option(
    "--ac-meter", help="Instrument file of the AC voltmeter (default: the DMM).")]
_GeneratorOpt = Annotated[_FileOpt, typer.Option(
    "--generator", help="Instrument file of the function generator.")]
_GainOpt = Annotated[bool, typer.Option(
    "--gain/--no-gain", help="Also take the small-signal gain.")]
_FrequenciesOpt = Annotated[_TextOpt, typer.Option(
    "--frequencies", help="A gain sweep: the gain at each of these test frequencies, "
    "comma-separated (20,100,1k,10k,100k), each stored with its frequency.")]
_SeriesOpt = Annotated[_TextOpt, typer.Option(
    "--series-resistor",
    help="Also take the input resistance by the series-resistor method, with this "
         "resistor (e.g. 75, 1k).")]
_SeriesTolOpt = Annotated[str, typer.Option(
    "--series-tolerance", help="Tolerance of the series resistor.")]
_SignalOpt = Annotated[_TextOpt, typer.Option(
    "--signal", help="Generator amplitude in V rms (default 10m).")]
_SettleCountOpt = Annotated[int, typer.Option(
    "--settle-count", help="Consecutive values that must agree.")]
_SettleBandOpt = Annotated[_TextOpt, typer.Option(
    "--settle-band", help="Absolute settle band for voltages (default 0.1m V).")]
_SettleBandAOpt = Annotated[_TextOpt, typer.Option(
    "--settle-band-current", help="Absolute settle band for currents (default 1u A).",
)]
_MaxSamplesOpt = Annotated[int, typer.Option(
    "--max-samples", help="Values read at most before a reading is given up.")]
_IntervalOpt = Annotated[_TextOpt, typer.Option(
    "--interval", help="Time between values, s (default 0.2 s; 0 with --simulate).",
)]
_SimulateOpt = Annotated[_FileOpt, typer.Option(
    "--simulate",
    help="Use a simulated bench answering for this hidden board file instead of "
         "instruments (instrument files then optional).")]
_SeedOpt = Annotated[int, typer.Option("--seed", help="Noise seed of the simulated bench.")]
_JsonOpt = Annotated[bool, typer.Option(
    "--json", help="Print exactly one JSON object on stdout.")]


def capture(
    board: _BoardArg,
    session: _SessionOpt,
    store: _StoreOpt = None,
    dmm: _DmmOpt = None,
    supply: _SupplyOpt = None,
    scanner: _ScannerOpt = None,
    ac_meter: _AcMeterOpt = None,
    generator: _GeneratorOpt = None,
    gain: _GainOpt = False,
    frequencies: _FrequenciesOpt = None,
    series_resistor: _SeriesOpt = None,
    series_tolerance: _SeriesTolOpt = "1%",
    signal: _SignalOpt = None,
    settle_count: _SettleCountOpt = 3,
    settle_band: _SettleBandOpt = None,
    settle_band_current: _SettleBandAOpt = None,
    max_samples: _MaxSamplesOpt = 50,
    interval: _IntervalOpt = None,
    simulate: _SimulateOpt = None,
    seed: _SeedOpt = 0,
    json: _JsonOpt = False,
) -> None:
    """Take a session's readings from instruments: probe, settle, store each at once.

    Plans every node voltage, each supply's current and (with --gain, --series-resistor,
    --frequencies) the small-signal readings; prompts for each probe position unless a scanner reaches
    it; stores every reading as soon as it settles. Run it again after an interruption:
    readings already in the session are skipped.
    """
    from reconcile.capture.bench_setup import parse_supply_options
    from reconcile.capture.run import (
        DEFAULT_SETTLE_BAND_A,
        DEFAULT_SETTLE_BAND_V,
        DEFAULT_SIGNAL_VRMS,
    )
    from reconcile.data.derived_readings import series_resistor_uncertainty
    from reconcile.model.board_loader import load_board

    design = load_board(board)
    supplies = parse_supply_options(supply or [], design)
    band_v = _value(settle_band, "volts", "--settle-band", DEFAULT_SETTLE_BAND_V)
    band_a = _value(settle_band_current, "amps", "--settle-band-current", DEFAULT_SETTLE_BAND_A)
    signal_vrms = _value(signal, "volts", "--signal", DEFAULT_SIGNAL_VRMS)
    interval_s = _value(interval, "seconds", "--interval", 0.0 if simulate else 0.2)
    r_series = None
    if series_resistor is not None:
        from reconcile.data.derived_readings import check_series_resistor

        r_series = check_series_resistor(
            _value(series_resistor, "ohms", "--series-resistor", 0.0), "--series-resistor")
    tolerance = _value(series_tolerance, "tolerance", "--series-tolerance", 0.01)
    settings = dict(
        gain=gain, frequencies=_frequencies(frequencies), input_resistance=r_series is not None, series_resistor_ohm=r_series,
        series_resistor_u_ohm=series_resistor_uncertainty(r_series or 0.0, tolerance),
        signal_vrms=signal_vrms, settle_count=settle_count, settle_band_v=band_v,
        settle_band_a=band_a, max_samples=max_samples, sample_interval_s=interval_s,
    )
    screen = _Screen(json_output=json)
    from reconcile.capture.plan import plan_readings

    plan = plan_readings(design, gain=gain, input_resistance=r_series is not None,
                         frequencies=settings["frequencies"])
    bench, prompt = _bench(simulate, seed, screen, (design, plan), dmm=dmm,
                           supplies=supplies, scanner=scanner, ac_meter=ac_meter,
                           generator=generator)
    report = _run_capture(design, store, session, bench, prompt, screen, json, settings)
    if json:
        _emit(report.to_dict())
    else:
        screen.summary(report)


def _frequencies(text: str | None) -> list[float]:
    """``--frequencies 20,100,1k``: test frequencies in Hz, each > 0 and finite."""
    import math

    from reconcile.errors import InputError

    if text is None:
        return []
    out = []
    for item in text.split(","):
        f = _value(item.strip(), "hertz", "--frequencies", 0.0) if item.strip() else 0.0
        if not (math.isfinite(f) and f > 0):
            raise InputError(f"each test frequency must be a number of Hz > 0, got "
                             f"{item.strip()!r}", key="--frequencies")
        out.append(f)
    return out


def _bench(simulate: Path | None, seed: int, screen: _Screen, planned: tuple[Any, Any],
           **instruments: Any):
    """The bench (instruments, or a simulated one for a hidden board) and the prompt;
    ``planned`` (board, plan): a real bench's AC meter band is checked before it opens."""
    from reconcile.capture.bench_setup import open_bench, simulated_bench
    from reconcile.errors import InputError
    from reconcile.model.board_loader import load_board

    if simulate is not None:
        bench = simulated_bench(load_board(simulate), seed=seed, **instruments)
        return bench, screen.simulated(bench.prompt)
    if instruments["dmm"] is None:
        raise InputError("capture needs --dmm FILE (or --simulate TRUE_BOARD)", key="--dmm")
    board, plan = planned
    return open_bench(**instruments, board=board, plan=plan), screen.ask


def _run_capture(design, store, session, bench, prompt, screen, json: bool, settings):
    """Run the capture into the session; on an interruption say what is stored."""
    from reconcile.capture.run import Capture, CaptureInterrupted
    from reconcile.store.repository import open_store

    run = None
    try:
        with open_store(store) as db:
            run = Capture(
                design, db, session,
                voltmeter=bench.voltmeter, supply=bench.supplies or None,
                scanner=bench.scanner, ac_voltmeter=bench.ac_voltmeter,
                generator=bench.generator, prompt=prompt, show=screen.show, **settings,
            )
            screen.follow(run.plan)
            try:
                return run.run()
            except CaptureInterrupted as stop:
                if json:
                    _emit(stop.report.to_dict())
                else:
                    screen.summary(stop.report)
                raise
    except KeyboardInterrupt:
        if run is not None:
            done = run.progress()
            screen.say(f"capture interrupted: {len(done.taken)} readings of this run are "
                       f"stored in session {done.session}; run it again to resume")
        raise
    finally:
        bench.close()


def _emit(obj: object) -> None:
    from reconcile.jsonout import dumps

    sys.stdout.write(dumps(obj) + "\n")
