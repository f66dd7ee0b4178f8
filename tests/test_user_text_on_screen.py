"""User text (node names, part references, device names) shows as typed in the fit and
lot tables and draws in their plots, however it looks to rich markup or matplotlib math
text (issue 15 item 3).

rich's own markup parser (a reference library) decides what would have been eaten: a
name such as ``[red]b`` is a colour tag to it, ``[/]`` a closing tag that raises. The
checks run the real entry point in-process (``cli_support.run_cli``).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from cli_support import run_cli

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_data"

# a node and a part whose names rich would read as markup, and matplotlib as math text
NODE = "[red]b$x^2$"
REF = "R[bold]2"


def _odd_board_and_readings(tmp_path: Path) -> tuple[Path, Path]:
    board = (SAMPLES / "line_receiver_cb.toml").read_text(encoding="utf-8")
    board = board.replace('"b"', f'"{NODE}"').replace("[resistors.R2]", f'[resistors."{REF}"]')
    readings = (SAMPLES / "line_receiver_built.csv").read_text(encoding="utf-8")
    readings = readings.replace("voltage,b,", f"voltage,{NODE},")
    b, r = tmp_path / "board.toml", tmp_path / "readings.csv"
    b.write_text(board, encoding="utf-8")
    r.write_text(readings, encoding="utf-8")
    return b, r


def _flat(text: str) -> str:
    """The printed text with table borders and wrapping removed."""
    return re.sub(r"[\s│┃┆╎|]+", "", text)


def test_fit_tables_show_node_and_part_names_as_typed(tmp_path):
    board, readings = _odd_board_and_readings(tmp_path)
    out = run_cli("fit", str(board), str(readings))
    assert out.crash is None and out.exit_code == 0, out.crash or out.stderr
    printed = _flat(out.stdout)
    assert _flat(f"voltage {NODE}") in printed
    assert _flat(REF) in printed


def test_fit_plot_draws_names_that_look_like_math_text(tmp_path):
    board, readings = _odd_board_and_readings(tmp_path)
    plot = tmp_path / "fit.png"
    out = run_cli("fit", str(board), str(readings), "--plot", str(plot), "--json")
    assert out.crash is None and out.exit_code == 0, out.crash or out.stderr
    assert plot.is_file() and plot.stat().st_size > 5_000


@pytest.mark.slow  # a trim with its Monte Carlo, and its plot
def test_trim_and_report_plots_draw_odd_names(tmp_path):
    board, readings = _odd_board_and_readings(tmp_path)
    plot = tmp_path / "trim.png"
    out = run_cli("trim", str(board), str(readings), "--plot", str(plot), "--samples", "2000",
                  "--json")
    assert out.crash is None and out.exit_code in (0, 1), out.crash or out.stderr
    report = tmp_path / "report.html"
    out = run_cli("report", str(board), str(readings), "--out", str(report), "--json")
    assert out.crash is None and out.exit_code == 0, out.crash or out.stderr
    assert "[red]b$x^2$" in report.read_text(encoding="utf-8").replace("&#x27;", "'")


def _odd_lot(tmp_path: Path) -> Path:
    text = (SAMPLES / "lot_sweep.csv").read_text(encoding="utf-8")
    text = text.replace("\nS01,", "\n[bold]S01,").replace("\nS02,", "\nS$0^2$,")
    path = tmp_path / "lot.csv"
    path.write_text(text, encoding="utf-8")
    return path


def test_lot_tables_and_plot_show_device_names_as_typed(tmp_path):
    lot = _odd_lot(tmp_path)
    plot = tmp_path / "lot.png"
    out = run_cli("lot", str(lot), "--plot", str(plot))
    assert out.crash is None and out.exit_code == 0, out.crash or out.stderr
    printed = _flat(out.stdout)
    assert "[bold]S01" in printed and "S$0^2$" in printed
    assert plot.is_file() and plot.stat().st_size > 5_000
