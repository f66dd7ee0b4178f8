"""The README's quick start and CI agree (the README is the contract for both)."""

from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _quick_start() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    block = text.split("## Quick start", 1)[1].split("```sh", 1)[1].split("```", 1)[0]
    return [line.strip() for line in block.strip().splitlines() if line.strip()]


def test_quick_start_is_two_commands_demo_then_tests():
    lines = _quick_start()
    assert len(lines) == 2
    assert lines[0].endswith("reconcile demo")
    assert "pytest" in lines[1]


def test_ci_runs_exactly_the_readme_test_command():
    test_command = _quick_start()[1]
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert test_command in [line.strip() for line in ci]
