"""Import hygiene: nothing opens a device or loads pyvisa at import; reconcile never
imports instruments (common practice for a tool whose CLI must start fast)."""

from __future__ import annotations

import json
import subprocess
import sys

MODULES = [
    "instruments", "reconcile.instruments.transport", "reconcile.instruments.fake", "reconcile.instruments.scpi",
    "reconcile.instruments.commands", "reconcile.instruments.profile", "reconcile.instruments.driver",
    "reconcile.instruments.dc_voltmeter", "reconcile.instruments.ac_voltmeter", "reconcile.instruments.power_supply",
    "reconcile.instruments.function_generator", "reconcile.instruments.scanner",
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
    loaded = _loaded_after(["reconcile.data.accuracy", "reconcile.data.derived_readings"])
    assert "instruments" not in loaded
    assert "numpy" not in loaded
