"""Import hygiene: nothing opens a device or loads pyvisa at import; reconcile never
imports instruments (common practice for a tool whose CLI must start fast)."""

from __future__ import annotations

import json
import subprocess
import sys

MODULES = [
    "instruments", "instruments.transport", "instruments.fake", "instruments.scpi",
    "instruments.commands", "instruments.profile", "instruments.driver",
    "instruments.dc_voltmeter", "instruments.ac_voltmeter", "instruments.power_supply",
    "instruments.function_generator", "instruments.scanner",
]


def _loaded_after(imports: list[str]) -> set[str]:
    code = (
        "import json, sys\n"
        + "".join(f"import {m}\n" for m in imports)
        + "print(json.dumps(sorted(sys.modules)))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=60)
    return set(json.loads(out.stdout))


def test_instrument_modules_do_not_import_pyvisa():
    loaded = _loaded_after(MODULES)
    assert not {m for m in loaded if m.split(".")[0] in ("pyvisa", "pyvisa_sim", "pyvisa_py")}


def test_reconcile_math_modules_import_neither_instruments_nor_numpy():
    loaded = _loaded_after(["reconcile.accuracy", "reconcile.derived_readings"])
    assert "instruments" not in loaded
    assert "numpy" not in loaded
