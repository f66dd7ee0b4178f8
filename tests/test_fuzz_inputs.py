"""Property-based fuzzing of every way in: each loader and every command's options.

Issue 15: whatever a user types or saves, ``reconcile`` ends with exit 0, 1 or 2 and,
when it refuses, one line on stderr that starts ``reconcile:`` (and names the file when a
file is at fault) -- never a traceback. The commands run in-process through the real
entry point (:func:`tests.cli_support.run_cli`), so a case costs milliseconds to a few
seconds, not a process start.

The expected outcome is the team's own rule (docs/formats.md, "Bad input"), so these are
self-consistency checks of the command line; hypothesis (a reference library for
property-based testing) generates the inputs. Under ``CI=true`` the profile is fixed and
derandomised, so CI runs the same cases every time and stays within its minute.
"""

from __future__ import annotations

import os
import string
from pathlib import Path

import pytest
from cli_support import Outcome, run_cli

hypothesis = pytest.importorskip("hypothesis")
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "sample_data"
BOARD = SAMPLES / "line_receiver_cb.toml"
READINGS = SAMPLES / "line_receiver_built.csv"
SWEEPS = SAMPLES / "lot_sweep.csv"
JIG = SAMPLES / "lot_jig.toml"
JIG_READINGS = SAMPLES / "lot_jig_readings.csv"
DMM = SAMPLES / "instruments" / "bench-dmm.toml"

_CI = os.environ.get("CI", "").lower() == "true"
#: more examples for a deeper local run (``RECONCILE_FUZZ_SCALE=10``); CI keeps 1
_SCALE = 1 if _CI else max(1, int(os.environ.get("RECONCILE_FUZZ_SCALE", "1") or 1))

pytestmark = pytest.mark.slow  # a few seconds to a minute in all; runs by default


def _profile(examples: int) -> settings:
    """Few examples, no deadline (a shared machine is slow at times); fixed under CI."""
    return settings(
        max_examples=examples * _SCALE,
        deadline=None,
        derandomize=_CI,
        database=None,
        suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
    )


# ----------------------------------------------------------------------------- checks
def _clean(result: Outcome, *, names: str | None = None) -> None:
    """Exit 0/1/2, no traceback; a refusal is one ``reconcile:`` line naming ``names``."""
    assert result.crash is None, result.crash
    assert result.exit_code in (0, 1, 2), result
    assert "Traceback (most recent call last)" not in result.stderr, result.stderr
    if result.exit_code != 0:
        lines = result.message_lines
        assert len(lines) == 1, result.stderr
        assert lines[0].startswith("reconcile: "), lines
        if names is not None and result.exit_code == 2:
            assert names in lines[0], (names, lines)


# ----------------------------------------------------------------------- strategies
_NUMBERS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.sampled_from(["1e308", "-1e308", "1e-308", "1e-200", "0", "-0", "9.9e37", "nan",
                     "inf", "-inf", "4k7", "1M", "1m", "25 C", "1e400", "0x10", "1_000",
                     "", " ", "1,5", "1..2", "--1", "١٢", "1e", "e5"]),
    st.integers(min_value=-10**30, max_value=10**30).map(str),
)
_TEXT = st.one_of(
    st.text(max_size=40),
    st.sampled_from(['"', '""', '"open', 'x"y', "[/]", "[bold]", "$x^$", "\x00", "\r",
                     "\u2028", "\ufeff", "#", ";", ",", "\t", "é", "𝛽"]),
)
_CELL = st.one_of(_NUMBERS, _TEXT)


def _mutate_csv(draw: st.DrawFn, text: str) -> str:
    lines = text.splitlines()
    for _ in range(draw(st.integers(1, 4))):
        i = draw(st.integers(0, len(lines) - 1))
        cells = lines[i].split(",")
        j = draw(st.integers(0, len(cells) - 1))
        action = draw(st.sampled_from(["cell", "cell", "append", "drop", "dup", "long"]))
        if action == "cell":
            cells[j] = draw(_CELL)
            lines[i] = ",".join(cells)
        elif action == "append":
            lines.insert(i, ",".join(draw(st.lists(_CELL, max_size=9))))
        elif action == "drop":
            del lines[i]
            if not lines:
                lines = [""]
        elif action == "dup":
            lines.insert(i, lines[i])
        else:
            cells[j] = draw(st.sampled_from(["x", '"'])) * draw(st.sampled_from([2001, 30000]))
            lines[i] = ",".join(cells)
    return "\n".join(lines) + draw(st.sampled_from(["\n", "", "\r\n"]))


@st.composite
def csv_files(draw: st.DrawFn, base: Path) -> bytes:
    text = _mutate_csv(draw, base.read_text(encoding="utf-8"))
    data = text.encode("utf-8", "surrogatepass")
    if draw(st.integers(0, 9)) == 0:
        data = data[: len(data) // 2] + b"\xff\xfe\xe9" + data[len(data) // 2:]
    return data


_TOML_VALUES = st.one_of(
    _NUMBERS.map(lambda s: '"' + s.replace("\\", "\\\\").replace('"', '\\"') + '"'),
    st.sampled_from(["1e308", "-1e308", "inf", "nan", "0", "-1", "true", "[]", "{}",
                     '["a", "b"]', "[" * 300 + "]" * 300, "{a=" * 200 + "1" + "}" * 200,
                     "[" * 3000 + "]" * 3000, '"\\u0000"', "1979-05-27", '"' + "x" * 5000 + '"']),
)


@st.composite
def toml_files(draw: st.DrawFn, base: Path) -> bytes:
    lines = base.read_text(encoding="utf-8").splitlines()
    keyed = [i for i, ln in enumerate(lines) if "=" in ln and not ln.lstrip().startswith("#")]
    for _ in range(draw(st.integers(1, 3))):
        i = draw(st.sampled_from(keyed))
        key = lines[i].split("=", 1)[0]
        if draw(st.integers(0, 5)) == 0:
            key = draw(st.sampled_from(["bogus ", "ground ", "0 ", "[x] "]))
        lines[i] = f"{key}= {draw(_TOML_VALUES)}"
    text = "\n".join(lines) + "\n"
    data = text.encode("utf-8")
    if draw(st.integers(0, 9)) == 0:
        data += "# caf\u00e9\n".encode("latin-1")
    if draw(st.integers(0, 14)) == 0:
        data = draw(st.binary(max_size=200))
    return data


def _write(tmp_path: Path, name: str, data: bytes) -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


# ------------------------------------------------------------------------- loaders
@_profile(30 if _CI else 40)
@given(data=csv_files(READINGS))
def test_fuzz_readings_file(tmp_path_factory, data):
    path = _write(tmp_path_factory.mktemp("r"), "bench.csv", data)
    _clean(run_cli("fit", str(BOARD), str(path), "--json"), names=str(path))


@_profile(30 if _CI else 40)
@given(data=toml_files(BOARD))
def test_fuzz_board_file(tmp_path_factory, data):
    path = _write(tmp_path_factory.mktemp("b"), "board.toml", data)
    _clean(run_cli("solve", str(path), "--json"), names=str(path))


@_profile(20 if _CI else 30)
@given(data=csv_files(SWEEPS))
def test_fuzz_sweep_file(tmp_path_factory, data):
    path = _write(tmp_path_factory.mktemp("s"), "sweeps.csv", data)
    _clean(run_cli("lot", str(path), "--json"), names=str(path))


@_profile(10 if _CI else 15)
@given(data=csv_files(JIG_READINGS))
def test_fuzz_lot_jig_readings(tmp_path_factory, data):
    path = _write(tmp_path_factory.mktemp("l"), "jig.csv", data)
    _clean(run_cli("lot", str(JIG), str(path), "--json"), names=str(path))


_WEIGHTS = "[fault_weights]\nopen = 1.0\nshort = 0.5\nvalue = 2\n"


@_profile(15 if _CI else 25)
@given(data=st.one_of(
    st.lists(st.tuples(st.sampled_from(["open", "short", "value", "swap", "bogus", "é", "[x"]),
                       _TOML_VALUES), max_size=4).map(
        lambda kv: ("[fault_weights]\n" + "".join(f"{k} = {v}\n" for k, v in kv)).encode()),
    st.just(_WEIGHTS.encode("utf-8") + "# caf\u00e9\n".encode("latin-1")),
    st.binary(max_size=100),
))
def test_fuzz_weights_file(tmp_path_factory, data):
    # the weights file is read before the diagnosis runs, so a bad one costs nothing;
    # a good one runs the whole diagnosis (kept to the few examples that parse)
    path = _write(tmp_path_factory.mktemp("w"), "weights.toml", data)
    _clean(run_cli("diagnose", str(BOARD), str(READINGS), "--weights", str(path), "--json",
                   "--max-faults", "1"), names=str(path))


@_profile(10 if _CI else 20)
@given(data=toml_files(DMM))
def test_fuzz_instrument_file(tmp_path_factory, data):
    # a fresh session each time, so a good file takes every reading through its tables
    import json

    folder = tmp_path_factory.mktemp("i")
    store = str(folder / "s.sqlite")
    made = run_cli("session", "new", str(BOARD), "--store", store, "--json")
    assert made.exit_code == 0, made
    sid = json.loads(made.stdout)["session"]
    path = _write(folder, "dmm.toml", data)
    result = run_cli("capture", str(BOARD), "--session", sid, "--store", store,
                     "--simulate", str(BOARD), "--dmm", str(path), "--json")
    _clean(result, names=str(path) if result.exit_code == 2 else None)


# ------------------------------------------------------------------------- options
_OPTION_VALUES = st.one_of(
    _NUMBERS, _TEXT.filter(lambda s: "\x00" not in s),
    st.sampled_from(["-5", "0", "-1", "100000000", str(2**63), str(-2**63 - 1),
                     "x.xyz", "plot.png", "plot", "/nonexistent/dir/p.png", "a,b",
                     "100,50", "S-0000", "[/]",
                     # --assume texts, good and bad, on the line receiver's parts
                     "C_B:missing", "RE:open", "Q1:reversed", "RC:wrong-value", "RE=1k",
                     "C_IN=47u", "C_IN=47", "RE=", "=1k", "R9:open", "RE:reversed"]),
)

# command -> (arguments it needs, options that multiply its work and the most they may be
# given here, so that a case stays quick)
_COMMANDS: dict[tuple[str, ...], tuple[list[str], dict[str, int]]] = {
    ("solve",): ([str(BOARD)], {"--samples": 200}),
    ("fit",): ([str(BOARD), str(READINGS)], {}),
    ("diagnose",): ([str(BOARD), str(READINGS)], {"--max-faults": 1}),
    ("trim",): ([str(BOARD), str(READINGS)], {"--samples": 200, "--max-changes": 1,
                                             "--top": 5}),
    ("lot",): ([str(SWEEPS)], {}),
    ("derive", "gain"): (["--vin", "10m", "--vout", "0.1"], {}),
    ("derive", "input-resistance"): (["--v1", "0.2", "--v2", "0.1", "--series-resistor",
                                      "100"], {}),
}
_FILE_OPTIONS = {"--weights", "--store", "--session", "--out", "--lot-jig", "--lot-readings"}


def _options(path: tuple[str, ...]) -> list[tuple[str, bool]]:
    """(option name, takes a value) of a command, from the app itself."""
    import typer

    from reconcile.cli.app import app

    command = typer.main.get_command(app)
    for name in path:
        command = command.commands[name]  # type: ignore[attr-defined]
    out = []
    for param in command.params:
        if param.param_type_name != "option":
            continue
        for opt in param.opts:
            if opt in ("--help", "--json") or opt in _FILE_OPTIONS:
                continue
            out.append((opt, not param.is_flag))
    return out


@st.composite
def command_lines(draw: st.DrawFn) -> tuple[list[str], str]:
    path = draw(st.sampled_from(sorted(_COMMANDS)))
    needed, caps = _COMMANDS[path]
    args = [*path, *needed]
    for opt, takes_value in draw(st.lists(st.sampled_from(_options(path)), max_size=3,
                                          unique=True)):
        if not takes_value:
            args.append(opt)
            continue
        value = draw(_OPTION_VALUES)
        if opt in caps:
            value = draw(st.one_of(st.just(value), st.integers(-3, caps[opt]).map(str)))
            try:
                if int(value) > caps[opt]:
                    value = str(caps[opt])
            except ValueError:
                pass
        if opt == "--plot" and value.endswith(".png"):
            value = os.devnull + ".png"  # no file is left behind; an unwritable path is fine
        args += [opt, value]
    args.append(draw(st.sampled_from(["--json", "--json", ""])))
    return [a for a in args if a != ""], " ".join(path)


@_profile(40 if _CI else 60)
@given(case=command_lines())
def test_fuzz_command_options(case):
    args, _command = case
    _clean(run_cli(*args))


@pytest.mark.parametrize("alphabet", [string.printable, "\u00e9\u03b2\U0001d6fd[]/$^"])
def test_text_options_of_a_session_are_stored_as_typed_or_refused(tmp_path, alphabet):
    # a one-off sweep over text options that end up in the store
    store = str(tmp_path / "s.sqlite")
    for text in (alphabet, alphabet[::-1], "\udce9 lone surrogate"):
        result = run_cli("session", "new", str(BOARD), "--serial", text, "--operator", text,
                         "--notes", text, "--store", store, "--json")
        _clean(result)


# ------------------------------------------------------------- sessions and stores
@pytest.fixture(scope="module")
def fuzz_store(tmp_path_factory):
    """A store holding one session with the sample readings: (store, session id, a
    reading id)."""
    import json

    folder = tmp_path_factory.mktemp("fuzz-store")
    store = str(folder / "s.sqlite")
    made = run_cli("session", "new", str(BOARD), "--store", store, "--json")
    sid = json.loads(made.stdout)["session"]
    added = run_cli("session", "add", sid, str(READINGS), "--store", store, "--json")
    assert added.exit_code == 0, added
    shown = json.loads(run_cli("session", "show", sid, "--store", store, "--json").stdout)
    return store, sid, str(shown["readings"][0]["id"])


_IDS = st.one_of(_OPTION_VALUES, st.sampled_from(["S-AAAAAAAA", "s-0", "1", "0", "-1",
                                                    str(2**64), "9" * 40]))
_ROWS = st.one_of(_TEXT, st.sampled_from([
    "voltage,b,1.2,V,,,", "voltage,b,1.2,V,0,,", "voltage,b,1e-300,V,1e-300,,",
    "gain,,1e308,,,,", "bogus,b,1,V,,,", 'voltage,b,"1.2,V,,,', "voltage,nowhere,1,V,,,"]))


@st.composite
def session_lines(draw: st.DrawFn, store: str, sid: str, rid: str) -> list[str]:
    command = draw(st.sampled_from(["new", "add", "correct", "retract", "end", "list",
                                    "show", "export"]))
    session = draw(st.one_of(st.just(sid), _IDS))
    reading = draw(st.one_of(st.just(rid), _IDS))
    args = {
        "new": [str(BOARD), "--serial", draw(_TEXT), "--operator", draw(_TEXT)],
        "add": [session, str(READINGS)] + draw(st.sampled_from([[], ["--again"]])),
        "correct": [session, reading, draw(_ROWS)],
        "retract": [session, reading, "--note", draw(_TEXT)],
        "end": [session],
        "list": [],
        "show": [session],
        "export": [session],
    }[command]
    store_value = draw(st.one_of(st.just(store), st.just(store), st.sampled_from([
        "", "sqlite://", "sqlite:////nonexistent/dir/s.db", "postgresql://u:pw@[::1/db",
        "postgresql://h:99999/db", "host=h port=x", "mysql://h/db", "\x7f", "[/]"])))
    return ["session", command, *args, "--store", store_value,
            *draw(st.sampled_from([["--json"], []]))]


@_profile(30 if _CI else 40)
@given(data=st.data())
def test_fuzz_session_commands_and_store_values(fuzz_store, data):
    store, sid, rid = fuzz_store
    args = data.draw(session_lines(store, sid, rid))
    _clean(run_cli(*[a.replace("\x00", "") for a in args]))


@pytest.mark.parametrize("value", ["S-AAAAAAAA", "", "[/]", "x" * 3000, str(2**64), "\r"])
def test_a_bad_session_value_is_one_line(fuzz_store, value):
    store, _sid, _rid = fuzz_store
    for command in ("fit", "diagnose", "trim", "report"):
        _clean(run_cli(command, "--session", value, "--store", store, "--json"))


@pytest.mark.parametrize("where", ["a-file/out", "/dev/null/out", "a-file\r/out"])
def test_demo_and_report_refuse_an_unwritable_out_in_one_line(tmp_path, where):
    # a folder cannot be made under a file (what is made of a missing folder is a choice:
    # both commands make the folders they need)
    (tmp_path / "a-file").write_text("x")
    (tmp_path / "a-file\r").write_text("x")
    where = where if where.startswith("/") else str(tmp_path / where)
    report = run_cli("report", str(BOARD), str(READINGS), "--out", where + ".html", "--json")
    _clean(report, names="[--out]")
    assert report.exit_code == 2
    demo = run_cli("demo", "--out", where, "--json")
    _clean(demo, names="[--out]")
    assert demo.exit_code == 2
