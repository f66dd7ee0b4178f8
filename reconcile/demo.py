"""``reconcile demo``: the bench story on the bundled, invented sample data.

The scenario (invented): a 75-ohm line receiver, a common-base stage, was designed to a
gain of 10 and an input resistance of 75 ohm. Unit LR-0042 came off the bench at a gain
of about 9.2 and 86 ohm. The demo solves the design, fits the built board to its readings,
asks which single fault explains them, proposes the least rework and predicts its yield.
Everything it writes goes into one folder it names.
"""

from __future__ import annotations

from pathlib import Path

DESIGN_BOARD = "line_receiver_cb.toml"
BUILT_READINGS = "line_receiver_built.csv"
OTHER_BOARDS = ("preamp_ce.toml", "two_stage_npn_pnp.toml")

CAUTIONS = (
    "Bench safety: the sample data is invented. On a real bench follow your local lab "
    "rules and qualified practice: power off and let supplies and capacitors discharge "
    "before any rework, keep mains-powered instruments properly earthed, use ESD "
    "protection for transistors, set the supply's current limit, and check the ratings "
    "of every part you add."
)


def sample_data_dir() -> Path:
    """The bundled sample_data folder (the working directory's, else the source tree's)."""
    here = Path(__file__).resolve().parent
    for candidate in (
        Path.cwd() / "sample_data",
        here.parent / "sample_data",
        here / "sample_data",
    ):
        if (candidate / DESIGN_BOARD).is_file():
            return candidate
    from .errors import InputError

    raise InputError("the bundled sample_data folder was not found (run from the repository)")


def run_demo(*, json_output: bool = False, out_dir: Path | None = None) -> dict:
    """Run the story; print it (or one JSON object) and return the summary."""
    from rich.console import Console

    from .analysis import run_fit
    from .board_loader import load_board
    from .readings import load_readings
    from .solve import solve

    data = sample_data_dir()
    out = Path(out_dir) if out_dir is not None else Path.cwd() / "reconcile-demo-output"
    out.mkdir(parents=True, exist_ok=True)
    console = Console(stderr=json_output, quiet=json_output)
    console.print(f"[bold]reconcile demo[/] — an invented bench story, data from {data}")
    console.print(f"[yellow]{CAUTIONS}[/]\n")
    summary: dict = {"sample_data": str(data), "output_folder": str(out), "cautions": CAUTIONS}

    design = load_board(data / DESIGN_BOARD)
    console.rule("1. The design, under the exact model")
    sol = solve(design)
    summary["design"] = sol.to_dict()
    from .render_solve import print_solution

    print_solution(sol, console)

    console.rule("2. Unit LR-0042 as built: fit to its bench readings")
    readings = load_readings(data / BUILT_READINGS, design)
    outcome = run_fit(design, readings)
    summary["fit"] = outcome.to_dict()
    from .plots_fit import plot_fit
    from .render_fit import print_fit

    print_fit(outcome.fit, outcome.budget, outcome.suggestions, console)
    fit_plot = plot_fit(outcome.fit, out / "fit.png")
    summary["files"] = {"fit_plot": str(fit_plot)}

    for step in _LATER_STEPS:
        step(design, readings, outcome, summary, console, out)

    console.rule("Other sample boards")
    summary["boards"] = {}
    for name in OTHER_BOARDS:
        board = load_board(data / name)
        other = solve(board)
        summary["boards"][name] = other.to_dict()
        print_solution(other, console)

    console.print(f"\n[bold]Everything the demo wrote is in[/] {out}")
    if json_output:
        from .cli import emit_json

        emit_json(summary)
    return summary


_LATER_STEPS: list = []
