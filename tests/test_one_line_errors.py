"""Each input that once ended in a traceback or a screen of warnings: one line, exit 2.

Issue 15 items 9 and 10. The expected behaviour is the team's rule for bad input (one
line naming the file, line or key; exit 2; no traceback; docs/formats.md §2.4, §3.1-3.3),
so these are checks of our own contract. Outside references where a number matters:
IEEE 754 doubles (1e308 is near the largest finite value, so a product or a square of it
overflows), the TOML 1.0 specification (arrays and inline tables nest without a stated
limit; Python's tomllib recurses per level), and the CPython recursion limit (1000 by
default), all from memory.
"""

from __future__ import annotations

import re
import warnings
from pathlib import Path

import pytest
from cli_support import run_cli

SAMPLES = Path(__file__).resolve().parent.parent / "sample_data"
BOARD = SAMPLES / "line_receiver_cb.toml"
READINGS = SAMPLES / "line_receiver_built.csv"
SWEEPS = SAMPLES / "lot_sweep.csv"
DMM = SAMPLES / "instruments" / "bench-dmm.toml"


def _refused(*args: str, names: str | None = None) -> str:
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # numpy noise would be an error here
        result = run_cli(*args)
    assert result.crash is None, result.crash
    assert result.exit_code == 2, result
    assert len(result.message_lines) == 1, result.stderr
    assert result.message_lines[0].startswith("reconcile: ")
    if names is not None:
        assert names in result.stderr, result.stderr
    return result.stderr


def _board_with(tmp_path: Path, pattern: str, new: str) -> Path:
    text = BOARD.read_text(encoding="utf-8")
    changed, n = re.subn(pattern, new, text, count=1)
    assert n == 1, pattern
    path = tmp_path / "board.toml"
    path.write_text(changed, encoding="utf-8")
    return path


# ------------------------------------------------------------------ item 9
@pytest.mark.parametrize("nesting", ["[" * 3000 + "]" * 3000, "[" * 40 + "]" * 40,
                                     "{a=" * 1500 + "1" + "}" * 1500])
def test_deeply_nested_toml_is_refused_in_every_toml_input(tmp_path, nesting):
    board = tmp_path / "nested.toml"
    board.write_text(f'title = "x"\nbad = {nesting}\n', encoding="utf-8")
    assert "nested more than 16 deep" in _refused("solve", str(board), names=str(board))
    weights = tmp_path / "weights.toml"
    weights.write_text(f"[fault_weights]\nopen = {nesting}\n", encoding="utf-8")
    _refused("diagnose", str(BOARD), str(READINGS), "--weights", str(weights),
             names=str(weights))
    from reconcile.errors import InputError
    from reconcile.instruments.profile import load_profile

    dmm = tmp_path / "dmm.toml"
    dmm.write_text(DMM.read_text(encoding="utf-8") + f"\n[extra]\nx = {nesting}\n",
                   encoding="utf-8")
    with pytest.raises(InputError, match="nested more than 16 deep"):
        load_profile(dmm)


def test_non_utf8_weights_and_instrument_files_are_refused(tmp_path):
    latin = "# caf\u00e9\n".encode("latin-1")
    weights = tmp_path / "weights.toml"
    weights.write_bytes(b"[fault_weights]\nopen = 1\n" + latin)
    assert "not UTF-8" in _refused("diagnose", str(BOARD), str(READINGS), "--weights",
                                   str(weights), names=str(weights))
    from reconcile.errors import InputError
    from reconcile.instruments.profile import load_profile

    dmm = tmp_path / "dmm.toml"
    dmm.write_bytes(DMM.read_bytes() + latin)
    with pytest.raises(InputError, match="not UTF-8"):
        load_profile(dmm)


def test_an_argument_that_is_not_utf8_is_refused_before_it_reaches_the_store(tmp_path):
    store = tmp_path / "s.sqlite"
    lone = b"SN-\xff7".decode("utf-8", "surrogateescape")  # what Python makes of the bytes
    message = _refused("session", "new", str(BOARD), "--serial", lone, "--store", str(store))
    assert "not UTF-8" in message and "\\xff" in message
    assert not store.exists()


@pytest.mark.parametrize("name", ["fit.xyz", "fit", "fit.PNG.txt"])
def test_an_unknown_plot_extension_is_refused_before_the_fit(tmp_path, name):
    _refused("fit", str(BOARD), str(READINGS), "--plot", str(tmp_path / name), names="--plot")


@pytest.mark.parametrize("reading_id", ["99999999999999999999999", "0", str(2**63)])
def test_huge_or_zero_reading_ids_are_refused(tmp_path, reading_id):
    store = str(tmp_path / "s.sqlite")
    made = run_cli("session", "new", str(BOARD), "--store", store, "--json")
    sid = made.stdout.split('"')[3]
    for args in (["correct", sid, reading_id, "voltage,b,1,V,,,"], ["retract", sid, reading_id]):
        assert "has no reading" in _refused("session", *args, "--store", store)


@pytest.mark.parametrize(("args", "option"), [
    (["trim", str(BOARD), str(READINGS), "--seed", "-5"], "--seed"),
    (["solve", str(BOARD), "--seed", "-1", "--samples", "10"], "--seed"),
    (["diagnose", str(BOARD), str(READINGS), "--rows", "-5"], "--rows"),
    (["trim", str(BOARD), str(READINGS), "--top", "0"], "--top"),
    (["trim", str(BOARD), str(READINGS), "--max-changes", "-1"], "--max-changes"),
    (["trim", str(BOARD), str(READINGS), "--samples", "-3"], "--samples"),
])
def test_negative_counts_and_seeds_are_refused_by_option(args, option):
    _refused(*args, names=f"[{option}]")


@pytest.mark.parametrize("args", [
    ["diagnose", str(BOARD), str(READINGS), "--rows", "abc"],
    ["fit", "--no-such-option"],
    ["solve"],
])
def test_a_usage_error_is_one_line_too(args):
    assert "--help" in _refused(*args)


@pytest.mark.parametrize(("column", "value"), [(1, "1e308"), (1, "100"), (2, "1e308"),
                                               (2, "1e-300"), (3, "1e-320"), (4, "1e-200")])
def test_lot_sweeps_with_absurd_vbe_ic_or_uncertainty_are_refused(tmp_path, column, value):
    lines = SWEEPS.read_text(encoding="utf-8").splitlines()
    first = next(i for i, ln in enumerate(lines) if ln.startswith("device")) + 1
    cells = lines[first].split(",")
    cells[column] = value
    lines[first] = ",".join(cells)
    path = tmp_path / "sweeps.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    _refused("lot", str(path), names=f"{path}:{first + 1}:")


@pytest.mark.parametrize("current", ["1e308", "11", "0", "-1m"])
def test_a_matching_current_beyond_the_current_range_is_refused(current):
    # the quantity registry's current range (±10 A) bounds a matching current too; 1e308
    # once overflowed in VBE's ln(I/IS)
    _refused("lot", str(SWEEPS), "--current", current, "--json", names="[--current]")


def test_reading_uncertainty_1e_200_is_refused_at_load(tmp_path):
    path = tmp_path / "bench.csv"
    path.write_text(READINGS.read_text(encoding="utf-8").replace("voltage,b,1.2458,V,,",
                                                                 "voltage,b,1.2458,V,1e-200,"),
                    encoding="utf-8")
    assert "below the smallest" in _refused("fit", str(BOARD), str(path), names=str(path))


@pytest.mark.slow  # a process per case (the terminal's encoding is fixed at start-up)
@pytest.mark.parametrize("command", [
    ["fit", str(BOARD), str(READINGS)],
    ["diagnose", str(BOARD), str(READINGS), "--max-faults", "1"],
    ["lot", str(SWEEPS)],
])
def test_an_ascii_only_terminal_degrades_instead_of_crashing(command):
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-m", "reconcile", *command], capture_output=True,
                         timeout=300, env={"PYTHONIOENCODING": "ascii", "PATH": "/usr/bin:/bin",
                                           "COLUMNS": "120", "HOME": str(Path.home())})
    assert out.returncode == 0, out.stderr.decode("ascii", "replace")
    out.stdout.decode("ascii")  # nothing but ASCII reached the terminal


# ------------------------------------------------------------------ item 10
@pytest.mark.parametrize(("pattern", "new", "key"), [
    (r'volts = "?[0-9.]+"?', 'volts = "1e308"', "volts"),
    (r'frequency = "?[^"\n]*"?', 'frequency = "1e308"', "signal.frequency"),
    (r'ohms = "?[^"\n]*"?', 'ohms = "1e308"', "ohms"),
    (r'ohms = "?[^"\n]*"?', 'ohms = "1e-300"', "ohms"),
    (r'temperature = "25 C"', 'temperature = "1e308 K"', "conditions.temperature"),
])
def test_absurd_board_numbers_are_refused_at_load_without_numpy_noise(tmp_path, pattern,
                                                                      new, key):
    path = _board_with(tmp_path, pattern, new)
    message = _refused("solve", str(path), names=str(path))
    assert key in message and "physical limits" in message


def test_series_resistor_zero_is_refused_by_capture_and_derive(tmp_path):
    store = str(tmp_path / "s.sqlite")
    sid = run_cli("session", "new", str(BOARD), "--store", store, "--json").stdout.split('"')[3]
    _refused("capture", str(BOARD), "--session", sid, "--store", store, "--simulate",
             str(BOARD), "--series-resistor", "0", names="--series-resistor")
    _refused("derive", "input-resistance", "--v1", "1", "--v2", "0.5", "--series-resistor",
             "0", names="--series-resistor")


def test_a_tolerance_of_the_wrong_toml_type_is_refused(tmp_path):
    # found by the fuzz suite: `tolerance = []` reached float() and raised TypeError
    path = _board_with(tmp_path, r'tolerance = "1%"', "tolerance = []")
    assert "as a tolerance" in _refused("solve", str(path), names=str(path))


@pytest.mark.parametrize("value", ["\r", "plot\r.xyz", "a\u2028b", "\x1b[2J.txt"])
def test_a_control_character_in_an_echoed_option_stays_on_its_line(value, tmp_path):
    # found by the option fuzzer: `--plot "\r"` echoed a bare carriage return
    err = _refused("solve", str(BOARD), "--sweep", "10:1e5", "--plot", str(tmp_path / value),
                   names="--plot")
    assert "\x1b" not in err and "\r" not in err and "\u2028" not in err
    assert str(tmp_path / value).encode("unicode_escape").decode("ascii") in err


def test_run_cli_puts_the_interpreters_excepthook_back():
    """``main()`` installs the one-line hook for bad input; in-process runs must not
    leave it behind for the rest of the test session."""
    import sys

    before = sys.excepthook
    run_cli("--help")
    assert sys.excepthook is before
