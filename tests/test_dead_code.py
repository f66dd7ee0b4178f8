"""No dead code: vulture (a maintained dead-code finder) over the package, the drivers
and the tests finds nothing unused beyond the names listed here, each with its reason.

A new finding fails this test: delete the code, or, if something outside the package
uses it (a typer command, a database event hook, a driver method for notebook users),
add its name below with the reason.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: decorated functions that a framework calls
FRAMEWORK_DECORATORS = ("@app.command", "@app.callback", "@*.command", "@event.listens_for")

#: name -> why it stays although nothing in the repository calls it
ALLOWED = {
    # instrument driver API: complete per role for users scripting a bench
    "set_sine": "function-generator driver API",
    "read_frequency": "function-generator driver API",
    "read_voltage": "power-supply driver API",
    "read_current_limit": "power-supply driver API",
    "is_closed": "scanner driver API",
    "schema_version": "store API: what a store holds, for administrators",
    # module protocol and framework hooks
    "__getattr__": "PEP 562 lazy exports of reconcile/__init__.py",
    "__dir__": "PEP 562 dir() of reconcile/__init__.py's lazy exports",
    "__class__": "reconcile/trim/__init__.py makes the package callable (module class)",
    "pytest_*": "pytest hooks (tests/conftest.py)",
    "isolation_level": "sqlite3 connection attribute set in the connect hook",
    "caption": "rich Table attribute",
    "handle_starttag": "html.parser.HTMLParser callback (tests)",
    "handle_data": "html.parser.HTMLParser callback (tests)",
    "pytestmark": "pytest module marker",
    "dps": "mpmath precision setting (tests)",
    "pg_location": "pytest fixture",
    "_recreate_cm": "contextlib.ContextDecorator hook (inference/threads.py: a fresh one per call)",
    # result fields: part of the result a notebook user reads
    "prior_sd_ratio": "FitResult field (posterior sd / prior sd)",
    "beta_chi_square": "lot extraction result field",
    "low_corner_max": "Spec field, parsed from [spec] (docs/formats.md §2)",
    "high_corner_min": "Spec field, parsed from [spec] (docs/formats.md §2)",
}


def test_vulture_finds_no_dead_code():
    pytest.importorskip("vulture")
    cmd = [sys.executable, "-m", "vulture", "reconcile", "instruments", "tests",
           "--min-confidence", "60",
           "--ignore-decorators", ",".join(FRAMEWORK_DECORATORS),
           "--ignore-names", ",".join(sorted(ALLOWED))]
    run = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert run.returncode in (0, 3), run.stderr
    assert run.stdout.strip() == "", "vulture found unused code:\n" + run.stdout
