"""The package layers hold: import-linter checks the contracts in pyproject.toml.

``reconcile.instruments`` is installed from the top-level ``instruments/`` folder
(setuptools ``package-dir``), where import-linter cannot see it in place; the test lays
out a copy of the installed tree in a temporary folder and checks that copy. A second
check plants one wrong import in the copy and expects the contracts to fail, so a
contract that checks nothing cannot pass unnoticed.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
LINT = Path(sys.executable).with_name("lint-imports")


def _installed_copy(tmp: Path) -> Path:
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc")
    shutil.copytree(ROOT / "reconcile", tmp / "reconcile", ignore=ignore)
    shutil.copytree(ROOT / "instruments", tmp / "reconcile" / "instruments", ignore=ignore)
    shutil.copy(ROOT / "pyproject.toml", tmp / "pyproject.toml")
    return tmp


def _lint(tree: Path) -> subprocess.CompletedProcess:
    if not LINT.exists():
        pytest.skip("import-linter is not installed (it is in the test extra)")
    env = {**os.environ, "PYTHONPATH": str(tree)}
    return subprocess.run([str(LINT), "--no-cache"], cwd=tree, env=env, capture_output=True,
                          text=True, timeout=120)


def test_layer_contracts_hold(tmp_path):
    result = _lint(_installed_copy(tmp_path))
    assert result.returncode == 0, result.stdout + result.stderr
    assert "broken" not in result.stdout.lower().replace("0 broken", "")


@pytest.mark.parametrize(("module", "wrong"), [
    ("instruments/scpi.py", "import reconcile.store.repository"),
    ("engine/dc.py", "import reconcile.inference.fitting"),
    ("cli/session.py", "import reconcile.cli.app"),
])
def test_a_wrong_import_breaks_the_contracts(tmp_path, module, wrong):
    tree = _installed_copy(tmp_path)
    target = tree / "reconcile" / module
    target.write_text(target.read_text() + f"\n{wrong}  # planted by the test\n")
    result = _lint(tree)
    assert result.returncode != 0, result.stdout
