"""``import reconcile.cli`` stays light: heavy libraries load inside the commands.

Outside reference: common practice for fast command-line start-up (import heavy
libraries inside the command that needs them), checked through ``sys.modules`` of a
fresh interpreter.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

HEAVY = ("lmfit", "scipy", "sqlalchemy", "pyvisa", "pandas", "matplotlib")

PROBE = """
import json, sys
import reconcile.cli.app
print(json.dumps(sorted(sys.modules)))
"""


@pytest.fixture(scope="module")
def loaded_modules() -> list[str]:
    done = subprocess.run(
        [sys.executable, "-c", PROBE], capture_output=True, text=True, timeout=60, check=True
    )
    return json.loads(done.stdout)


@pytest.mark.parametrize("package", HEAVY)
def test_cli_import_pulls_in_no_heavy_package(package: str, loaded_modules: list[str]) -> None:
    # Reference: common practice (lazy imports for a fast CLI); sys.modules after
    # `import reconcile.cli` in a fresh interpreter.
    assert "reconcile.cli.app" in loaded_modules
    pulled = [m for m in loaded_modules if m == package or m.startswith(package + ".")]
    assert pulled == []
