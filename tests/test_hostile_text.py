"""User text that looks like markup, math text or HTML is shown exactly as typed.

Classes of issue 15 item 3. The outside reference for each check is the consumer: rich's
renderer (what the terminal shows), matplotlib's math-text parser, Python's html.parser.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_data"


def run(*args: str, env: dict | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "reconcile", *args],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=120,
        env={**os.environ, "COLUMNS": "200", **(env or {})},
    )


def test_session_list_and_show_print_markup_like_text_as_typed(tmp_path):
    store = str(tmp_path / "s.sqlite")
    new = run(
        "session", "new", str(SAMPLES / "line_receiver_cb.toml"),
        "--serial", "[/]", "--operator", "[rev/B]", "--notes", ":smile: $x^$ \\",
        "--store", store, "--json",
    )
    assert new.returncode == 0, new.stderr
    sid = json.loads(new.stdout)["session"]
    listed = run("session", "list", "--store", store)
    assert listed.returncode == 0, listed.stderr
    assert "[/]" in listed.stdout and "[rev/B]" in listed.stdout
    shown = run("session", "show", sid, "--store", store)
    assert shown.returncode == 0, shown.stderr
    assert "[rev/B]" in shown.stdout and ":smile: $x^$ \\" in shown.stdout


@pytest.mark.slow
def test_ascii_terminal_degrades_instead_of_crashing(tmp_path):
    # PYTHONIOENCODING=ascii: characters such as ± and Ω must not raise UnicodeEncodeError.
    out = run(
        "fit", str(SAMPLES / "line_receiver_cb.toml"), str(SAMPLES / "line_receiver_built.csv"),
        env={"PYTHONIOENCODING": "ascii"},
    )
    assert out.returncode == 0, out.stderr
    assert "Traceback" not in out.stderr
    out.stdout.encode("ascii")
