"""``reconcile demo``: the bench story on the bundled, invented sample data."""

from __future__ import annotations

from pathlib import Path

SAMPLE_BOARDS = ("line_receiver_cb.toml", "preamp_ce.toml", "two_stage_npn_pnp.toml")

CAUTIONS = (
    "Bench safety: the sample data is invented. On a real bench, follow your local lab "
    "rules: power off and let supplies discharge before any rework, use ESD protection "
    "for transistors, keep mains-powered instruments properly earthed, and check part "
    "ratings before applying power."
)


def sample_data_dir() -> Path:
    """The bundled sample_data folder (next to the package in a source checkout)."""
    here = Path(__file__).resolve().parent
    for candidate in (Path.cwd() / "sample_data", here.parent / "sample_data", here / "sample_data"):
        if candidate.is_dir():
            return candidate
    from .errors import InputError

    raise InputError("the bundled sample_data folder was not found next to the package")


def run_demo(*, json_output: bool = False, out_dir: Path | None = None) -> dict:
    """Solve each sample board and show (or return) the results."""
    from .board_loader import load_board
    from .solve import solve

    data = sample_data_dir()
    results = {}
    solutions = []
    for name in SAMPLE_BOARDS:
        board = load_board(data / name)
        sol = solve(board)
        results[name] = sol.to_dict()
        solutions.append(sol)
    summary = {"boards": results, "cautions": CAUTIONS}
    if json_output:
        from .cli import emit_json

        emit_json(summary)
        return summary
    from rich.console import Console

    from .render_solve import print_solution

    console = Console()
    console.print(f"[bold]reconcile demo[/] — invented sample boards from {data}\n")
    console.print(f"[yellow]{CAUTIONS}[/]\n")
    for sol in solutions:
        console.rule(sol.board.title)
        print_solution(sol, console)
    return summary
