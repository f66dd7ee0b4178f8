"""Every command's terminal output fits 80 columns (the default terminal width), and the
diagnose table keeps one line per hypothesis there (its details go below the table;
``--wide`` restores the full table).

The commands run in-process through the real entry point (``cli_support.run_cli``) with
``COLUMNS`` set as a terminal sets it: rich reads the width from the environment when it
makes each command's console, so no process boundary is needed to see what a user's
terminal shows."""

from __future__ import annotations

from pathlib import Path

import pytest
from cli_support import Outcome, run_cli

ROOT = Path(__file__).resolve().parents[1]
S = ROOT / "sample_data"
BOARD, READINGS = str(S / "line_receiver_cb.toml"), str(S / "line_receiver_built.csv")

COMMANDS = {
    "solve": ["solve", str(S / "preamp_ce.toml")],
    "solve-samples": ["solve", str(S / "preamp_ce.toml"), "--samples", "2000"],
    "solve-sweep": ["solve", BOARD, "--sweep", "1:10M:200"],
    "fit": ["fit", BOARD, READINGS],
    "diagnose": ["diagnose", BOARD, READINGS],
    "trim": ["trim", BOARD, READINGS],
    "lot-jig": ["lot", str(S / "lot_jig.toml"), str(S / "lot_jig_readings.csv")],
    "lot-sweep": ["lot", str(S / "lot_sweep.csv")],
    "help": ["--help"],
    "fit-help": ["fit", "--help"],
}


def _run(args: list[str], cwd: Path, columns: int = 80) -> Outcome:
    """``reconcile ARGS`` in ``cwd`` on a terminal ``columns`` wide."""
    with pytest.MonkeyPatch.context() as patch:
        patch.chdir(cwd)
        patch.setenv("COLUMNS", str(columns))
        done = run_cli(*args)
    assert done.crash is None, done.crash
    return done


@pytest.mark.slow
@pytest.mark.parametrize("name", sorted(COMMANDS))
def test_terminal_output_fits_80_columns(name: str, tmp_path) -> None:
    run = _run(COMMANDS[name], tmp_path)
    assert run.exit_code == 0, run.stderr
    lines = run.stdout.splitlines()
    assert lines
    too_long = [line for line in lines if len(line) > 80]
    assert not too_long, too_long[:3]


def _table_rows(stdout: str) -> list[str]:
    """Body lines of the first box table (between its header rule and its bottom)."""
    lines = stdout.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("┡"))
    end = next(i for i in range(start, len(lines)) if lines[i].startswith("└"))
    return lines[start + 1:end]


def test_diagnose_table_has_one_line_per_hypothesis_at_80_columns(tmp_path) -> None:
    run = _run(["diagnose", BOARD, READINGS, "--rows", "8"], tmp_path)
    assert run.exit_code == 0, run.stderr
    rows = _table_rows(run.stdout)
    assert len(rows) == 8
    assert [r.split("│")[1].strip() for r in rows] == [str(i) for i in range(1, 9)]
    assert "The fitted board under each" in run.stdout
    block = run.stdout.split("The fitted board under each")[1].split("Checks to make")[0]
    details = [line for line in block.splitlines() if line.lstrip()[:3] in
               {f"{i}. " for i in range(1, 9)}]
    assert len(details) == 8  # every shown hypothesis has its details line


def test_diagnose_wide_restores_the_fitted_board_column(tmp_path) -> None:
    run = _run(["diagnose", BOARD, READINGS, "--rows", "3", "--wide"], tmp_path, columns=200)
    assert run.exit_code == 0, run.stderr
    assert "the fitted board then has" in run.stdout
    assert "The fitted board under each" not in run.stdout
    assert len(_table_rows(run.stdout)) == 3


@pytest.mark.slow
def test_trim_compact_table_keeps_every_column_readable_and_wide_has_the_bands(tmp_path):
    run = _run(["trim", BOARD, READINGS, "--samples", "500"], tmp_path)
    assert run.exit_code == 0, run.stderr
    header = next(line for line in run.stdout.splitlines() if line.startswith("┃"))
    assert "…" not in header  # no column squeezed to an ellipsis
    assert "spec: gain" in run.stdout and "--wide: full" in run.stdout
    wide = _run(["trim", BOARD, READINGS, "--samples", "500", "--wide"], tmp_path, columns=200)
    assert wide.exit_code == 0, wide.stderr
    assert "worst case" in wide.stdout and "input resistance" in wide.stdout
