"""Capture's progress display (issue 16): which of the plan's readings the run is on,
shown on stderr beside the live value on a terminal, never with ``--json``.

The display itself is rich's (a reference library); these checks are of our wiring:
where the progress goes and when it is left out. The count is checked against the plan
the same run printed (self-consistency of the display with the run it follows).
"""

from __future__ import annotations

import io
import json
import re
from pathlib import Path

import pytest
from cli_support import run_cli
from rich.console import Console

from reconcile.model.board_loader import load_board
from reconcile.present import console as console_module
from reconcile.store.repository import open_store

ROOT = Path(__file__).resolve().parent.parent
BOARD = ROOT / "sample_data" / "line_receiver_cb.toml"


@pytest.fixture
def terminals(monkeypatch):
    """Every console the capture makes is a terminal: stdout's and stderr's kept apart."""
    screens = {"stdout": io.StringIO(), "stderr": io.StringIO()}

    def make_console(*, stderr: bool = False, **options):
        options.setdefault("emoji", False)
        return Console(file=screens["stderr" if stderr else "stdout"], force_terminal=True,
                       width=120, **options)

    monkeypatch.setattr(console_module, "make_console", make_console)
    return screens


def _capture(tmp_path, *extra: str):
    db_path = tmp_path / "progress.sqlite"
    with open_store(db_path) as db:
        sid = db.create_session(load_board(BOARD))
    return run_cli("capture", str(BOARD), "--session", sid, "--store", str(db_path),
                   "--simulate", str(BOARD), "--frequencies", "100,1k", *extra)


def test_capture_progress_goes_to_stderr_on_a_terminal(tmp_path, terminals):
    out = _capture(tmp_path)
    assert out.exit_code == 0, out.stderr + (out.crash or "")
    shown = terminals["stderr"].getvalue()
    counts = {(int(a), int(b)) for a, b in re.findall(r"reading (\d+) of (\d+)", shown)}
    assert counts, shown[-500:]
    (total,) = {b for _, b in counts}
    assert {a for a, _ in counts} == set(range(1, total + 1))  # every reading, in its place
    printed = re.sub(r"\x1b\[[0-9;]*m", "", terminals["stdout"].getvalue())
    stored = [ln for ln in printed.splitlines() if ln.startswith("stored ")]
    assert len(stored) == total  # a fresh session: the whole plan is taken
    assert "reading 1 of" not in terminals["stdout"].getvalue()


def test_capture_with_json_shows_no_progress(tmp_path, terminals):
    out = _capture(tmp_path, "--json")
    assert out.exit_code == 0, out.stderr + (out.crash or "")
    assert json.loads(out.stdout)["taken"]
    for screen in terminals.values():
        assert "reading 1 of" not in screen.getvalue()
