"""``reconcile demo``: the whole bench story on the bundled, invented sample data.

The scenario (our own invention): SP-7, the front end of a vibration-sensor channel, is
an npn common-emitter stage with a partly bypassed emitter resistor, direct-coupled to
a pnp follower that drives the 2.2 kΩ cable to the converter. It was designed for a gain
of 30.4 (±6 %) and an input resistance of 12.8 kΩ (±10 %) from a 1 kΩ sensor. Unit
SP-7-0113 came off the line with too little gain. The demo

1. solves the design under the exact model (it meets its spec);
2. opens a session for SP-7-0113 and captures its readings from a simulated bench (a
   scanner routes the meter; the bench answers for a hidden board,
   ``sample_data/sensor_preamp_sp7_0113_truth.toml``, plus noise);
3. fits the built board to the readings (what was built, error budget, next readings),
   through the same pipeline as the command line and the report;
4. asks which single fault explains them, takes the reading the diagnosis suggests
   (on the simulated bench) and asks again;
5. follows the decisive diagnosis: restore the drawn design first (replace RE1 with the
   drawn value), then any standard-value rework the repaired board still needs, with
   predicted spec and yield, and checks that against the hidden board;
6. characterises a small transistor lot from a jig;
7. writes the HTML report.

Everything goes into one folder (default ``./reconcile-demo-output``), the session store
included; nothing is written anywhere else.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

DESIGN_BOARD = "sensor_preamp.toml"
HIDDEN_TRUTH = "sensor_preamp_sp7_0113_truth.toml"
LOT_JIG = "lot_jig.toml"
LOT_READINGS = "lot_jig_readings.csv"
SERIAL = "SP-7-0113"
SEED = 42
MAX_EXTRA_READINGS = 3
CONFIDENT = 0.8

CAUTIONS = (
    "Bench safety: the sample data is invented. On a real bench follow your local lab "
    "rules and qualified practice: power off and let supplies and capacitors discharge "
    "before any rework, keep mains-powered instruments properly earthed, use ESD "
    "protection for transistors (a wrist strap keeps its series resistor), set the "
    "supply's current limit, and check the ratings of every part you add. Never put a "
    "DMM in current mode across a node; clip the scope's ground (protective earth) to "
    "board gnd only; no signal into an unpowered board; discharge capacitors through a "
    "resistor and check them with a meter."
)


def sample_data_dir() -> Path:
    """The installed sample data (package ``reconcile.sample_data``, the repository's
    top-level ``sample_data/`` folder), found through :mod:`importlib.resources` so the
    demo runs from a wheel in any folder."""
    from importlib.resources import files

    from reconcile.errors import InputError

    try:
        folder = Path(str(files("reconcile.sample_data")))
    except ModuleNotFoundError:
        folder = None
    if folder is None or not (folder / DESIGN_BOARD).is_file():
        raise InputError(
            "the sample data (package reconcile.sample_data) is not installed; "
            "reinstall the package: pip install ."
        )
    return folder


def run_demo(*, json_output: bool = False, out_dir: Path | None = None) -> dict:
    """Run the story; print it (or, with ``json_output``, one JSON object)."""
    import numpy as np
    from reconcile.present.console import make_console

    data = sample_data_dir()
    out = Path(out_dir) if out_dir is not None else Path.cwd() / "reconcile-demo-output"
    out.mkdir(parents=True, exist_ok=True)
    # matplotlib keeps a font cache; keep even that inside the demo's folder.
    os.environ.setdefault("MPLCONFIGDIR", str(out / ".matplotlib"))
    console = make_console(stderr=json_output, quiet=json_output)
    rng = np.random.default_rng(SEED)
    story = _Story(data, out, console, rng)
    console.print(f"[bold]reconcile demo[/] — an invented bench story, data from {data}")
    console.print(f"[yellow]{CAUTIONS}[/]\n")
    summary = story.run()
    summary["cautions"] = CAUTIONS
    console.print(f"\n[bold]Everything the demo wrote is in[/] {out}")
    console.print(f"[bold]Report:[/] {summary['files']['report']}")
    if json_output:
        from reconcile.cli.output import emit_json

        emit_json(summary)
    return summary


class _Story:
    def __init__(self, data: Path, out: Path, console, rng) -> None:
        self.data, self.out, self.console, self.rng = data, out, console, rng
        self.status = None
        self.summary: dict = {"sample_data": str(data), "output_folder": str(out), "files": {}}

    def step(self, title: str) -> None:
        self.console.rule(title)
        if self.status is not None:
            self.status.update(f"{title} …")

    def run(self) -> dict:
        """The story, with a spinner under it while each step computes (on a terminal
        only: rich leaves it out when the output is piped, and the --json console is
        quiet)."""
        with self.console.status("starting the demo …") as status:
            self.status = status
            try:
                return self._story()
            finally:
                self.status = None

    def _story(self) -> dict:
        from reconcile.model.board_loader import load_board
        from reconcile.pipeline.analyses import Analysis
        from reconcile.store.repository import open_store

        design = load_board(self.data / DESIGN_BOARD)
        truth = load_board(self.data / HIDDEN_TRUTH)
        self.design_check(design)
        store_path = self.out / "sessions.sqlite"
        with open_store(str(store_path)) as store:
            sid = store.create_session(
                design, serial=SERIAL, operator="demo", notes="invented demo scenario"
            )
            self.summary["session"] = {"id": sid, "store": str(store_path)}
            self.capture(design, truth, store, sid)
            inputs = self._inputs(store, sid)
            first = self.fit(inputs)
            inputs.record("fit", first.to_dict())
            diag, inputs = self.diagnose(truth, store, sid, inputs)
            outcome = self.fit(inputs, quiet=True)
            trimmed = self.trim(inputs, truth, outcome, diag)
            analysis = Analysis(inputs, outcome, diag, trimmed)
            analysis.record()
            lot, lot_png = self.lot()
            self.report(analysis, lot, lot_png, store, sid)
            store.end_session(sid, note="demo complete")
        return self.summary

    @staticmethod
    def _inputs(store, sid):
        """The session's board and current readings, as every analysis takes them."""
        from reconcile.pipeline.inputs import AnalysisInputs

        return AnalysisInputs.from_session(sid, store=store)

    # ------------------------------------------------------------------ steps
    def design_check(self, design) -> None:
        from reconcile.present.render_solve import print_solution
        from reconcile.engine.solution import solve

        self.step("1. The design, under the exact model")
        sol = solve(design)
        self.summary["design"] = sol.to_dict()
        print_solution(sol, self.console)

    def capture(self, design, truth, store, sid) -> None:
        from reconcile.capture.simulated_bench import capture_simulated_demo

        self.step(f"2. Unit {SERIAL}: readings captured from a simulated bench")
        self.console.print(
            "A scanner routes the DMM to every node, the supply reads back its current, and "
            "a generator with an AC meter gives the gain and (series-resistor method) the "
            "input resistance. The bench answers for a hidden board, plus noise."
        )
        report = capture_simulated_demo(design, truth, store, sid, self.rng)
        self.summary["capture"] = report.to_dict()
        from rich.table import Table

        t = Table(title=f"Captured into session {sid}", title_justify="left")
        for col in ("reading", "value", "u", "instrument"):
            t.add_column(col)
        for taken in report.taken:
            r = taken.reading
            t.add_row(
                f"{r.quantity} {r.at}".strip(),
                f"{r.value:.6g}",
                f"{r.uncertainty:.2g}",
                r.instrument,
            )
        self.console.print(t)

    def fit(self, inputs, *, quiet: bool = False):
        from reconcile.pipeline.analyses import fit_step

        outcome = fit_step(inputs)
        if quiet:
            self.summary["fit_after_new_reading"] = outcome.to_dict()
            return outcome
        self.step("3. What was built: the fit")
        from reconcile.present.plots_fit import plot_fit

        outcome.report(self.console)
        path = plot_fit(outcome.fit, self.out / "fit.png")
        self.summary["fit"] = outcome.to_dict()
        self.summary["files"]["fit_plot"] = str(path)
        return outcome

    def diagnose(self, truth, store, sid, inputs):
        from reconcile.inference.simulate import simulate_readings
        from reconcile.pipeline.analyses import diagnose_step
        from reconcile.present.render_diagnosis import print_diagnosis

        self.step("4. What is wrong with it: single-fault diagnosis")
        diag = diagnose_step(inputs)
        print_diagnosis(diag, self.console, rows=6)
        self.summary["diagnosis_first"] = diag.to_dict()
        taken = []
        for _ in range(MAX_EXTRA_READINGS):
            nxt = diag.next_reading
            if nxt is None or diag.top.probability >= CONFIDENT:
                break
            label = nxt.label
            self.console.print(
                f"\nThe diagnosis asks for one more reading: [bold]{label}[/]. Taking it on "
                "the simulated bench (for a part out of circuit: power off first)."
            )
            new = simulate_readings(
                truth, [(nxt.quantity, nxt.at, nxt.frequency)], rng=self.rng,
                note="demo: suggested"
            )
            store.add_readings(sid, new, source="demo")
            taken.append({"quantity": nxt.quantity, "at": nxt.at, "frequency": nxt.frequency,
                          "value": new[0].value})
            inputs = self._inputs(store, sid)
            diag = diagnose_step(inputs)
            self.console.print(f"[bold]With {label} = {new[0].value:.5g}:[/]")
            print_diagnosis(diag, self.console, rows=6)
        self.summary["extra_readings"] = taken
        self.summary["diagnosis"] = diag.to_dict()
        return diag, inputs

    def trim(self, inputs, truth, outcome, diag):
        from reconcile.errors import ReconcileError
        from reconcile.pipeline.analyses import trim_step
        from reconcile.present.plots_trim import plot_trim

        self.step("5. The repair the diagnosis points to, the least rework after it, and "
                  "their yield")
        trimmed = trim_step(inputs, outcome.fit, diagnosis=diag)
        trimmed.report(self.console)
        self.summary["trim"] = trimmed.to_dict()
        try:
            self.summary["files"]["trim_plot"] = str(
                plot_trim(trimmed.result, self.out / "trim.png")
            )
        except ReconcileError:  # no option with draws: the table says why
            pass
        best = trimmed.result.best
        if trimmed.repair is not None or (best is not None and best.changes):
            self._check_rework(inputs.board, truth, trimmed)
        return trimmed

    def _check_rework(self, design, truth, trimmed) -> None:
        """Apply the repair (when the trim follows a hypothesis), then the best option when
        the repaired board still needs one, to the hidden board; say whether it meets spec."""
        from reconcile.engine.solution import check_corners, check_spec, solve
        from reconcile.pipeline.repair import apply_repair
        from reconcile.present.escape import markup
        from reconcile.trim.apply import apply_changes

        reworked = truth if trimmed.repair is None else apply_repair(truth, trimmed.repair)
        best = trimmed.result.best
        changes = best.changes if best is not None and trimmed.result.needed else ()
        after = solve(apply_changes(reworked, changes))
        checks = check_spec(design, after.small_signal or {})
        if design.spec.low_corner_max is not None or design.spec.high_corner_min is not None:
            corners = after.corners
            checks += check_corners(design, corners.low_corner[0], corners.high_corner[0])
        verdict = all(ch.met for ch in checks)
        self.summary["hidden_board_after_rework"] = {
            "small_signal": after.small_signal,
            "meets_spec": verdict,
        }
        self.summary["hidden_board_after_rework"]["repair"] = (
            None if trimmed.repair is None else [s["text"] for s in trimmed.repair.steps])
        self.summary["hidden_board_after_rework"]["changes"] = [c.to_dict() for c in changes]
        from reconcile.present import numbers
        from reconcile.present.render_trim import describe_change

        values = ", ".join(
            f"{ch.quantity} {numbers.si(ch.value, numbers.quantity_symbol(ch.quantity), 4)}"
            for ch in checks)
        done = ([markup(s["text"]) for s in trimmed.repair.steps]
                if trimmed.repair is not None else [])
        done += [describe_change(c) for c in changes]  # escaped there
        self.console.print(
            f"The hidden board after {'; '.join(done)} (power off first): {values} — "
            + ("[green]meets its spec[/]" if verdict else "[red]still misses[/]")
            + " (the demo can check this; on a real bench, measure again after rework)."
        )

    def lot(self):
        from reconcile.lot.characterise import run_lot
        from reconcile.present.plots_lot import plot_lot
        from reconcile.present.render_lot import print_lot

        self.step("6. A new transistor lot, measured in a jig")
        lot = run_lot(self.data / LOT_JIG, self.data / LOT_READINGS)
        print_lot(lot, self.console)
        path = plot_lot(lot, self.out / "lot.png")
        self.summary["lot"] = lot.to_dict()
        self.summary["files"]["lot_plot"] = str(path)
        return lot, path.read_bytes()

    def report(self, analysis, lot, lot_png, store, sid) -> None:
        from reconcile.present.report import build_report, write_report

        self.step("7. The report")
        meta = {k: v for k, v in store.show_session(sid).to_dict().items() if k != "readings"}
        data = build_report(
            analysis.inputs,
            session=meta,
            lot_result=lot,
            lot_plot=lot_png,
            work_dir=self.out / "work",
            analysis=analysis,
        )
        path = write_report(data, self.out / "report.html")
        shutil.rmtree(self.out / "work", ignore_errors=True)
        analysis.inputs.record("report", {"path": str(path), **data.hashes})
        self.summary["files"]["report"] = str(path)
        self.console.print(f"report written to {path}")
