"""Board files (reconcile.board_loader) against the contract's section 2.

Every board here is invented for the tests. Validation cases edit one valid board and
check that the problem is reported with the file, the key and the line it sits on (the
line is looked up in the edited text, not typed in).
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest
import scipy.constants as sc

from reconcile.model.board import GND, DeviceParam
from reconcile.model.board_loader import board_from_text, load_board
from reconcile.errors import InputError, InputErrors

BASE = """\
title = "test amplifier, invented values"

[conditions]
temperature = "25 C"

[supplies.VCC]
node = "vcc"
volts = "5"
tolerance = "2%"

[resistors.R1]
nodes = ["vcc", "b"]
ohms = "27k"
tolerance = "1%"
rating = "0.25 W"
trim = true

[resistors.R2]
nodes = ["b", "gnd"]
ohms = "10k"

[resistors.RC]
nodes = ["vcc", "c"]
ohms = "4k7"
trim = false

[resistors.RE]
nodes = ["e", "gnd"]
ohms = "1k"

[capacitors.C1]
nodes = ["in", "b"]
farads = "10u"

[capacitors.C2]
nodes = ["c", "out"]
farads = "1u"
tolerance = "10%"

[transistors.Q1]
polarity = "npn"
c = "c"
b = "b"
e = "e"
device = "generic-npn"

[devices.generic-npn]
IS = { value = "5f", low = "1f", high = "40f" }
beta = { value = 150, low = 60, high = 400 }
beta_r = 1
VA = "100"
n = 1.0
is_temp_exponent = 3
bandgap = "1.11"

[signal]
input = "in"
source_ohms = "50"
output = "out"
load_ohms = "10k"
frequency = "10k"

[bench]
voltmeter_ohms = "10M"

[spec]
gain = { value = 12, tolerance = "5%" }
input_resistance = { value = "75", tolerance = "2%" }
min_vce = "0.4"
"""

DIVIDER = """\
[supplies.V1]
node = "top"
volts = 10

[resistors.RA]
nodes = ["top", "mid"]
ohms = "1k"

[resistors.RB]
nodes = ["mid", "gnd"]
ohms = 1000

[capacitors.CB]
nodes = ["mid", "gnd"]
farads = "100n"
"""


def _edit(text: str, *pairs: tuple[str, str]) -> str:
    for old, new in pairs:
        assert old in text, f"test set-up: {old!r} not in the board"
        text = text.replace(old, new, 1)
    return text


def _line_of(text: str, marker: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), 1) if marker in line)


def _write(tmp_path: Path, text: str, name: str = "board.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def _errors(tmp_path: Path, text: str) -> tuple[str, InputErrors]:
    path = _write(tmp_path, text)
    with pytest.raises(InputErrors) as caught:
        load_board(path)
    return str(path), caught.value


# ------------------------------------------------------------------ valid boards
def test_contract_example_loads_in_si_units(tmp_path: Path) -> None:
    path = _write(tmp_path, BASE)
    board = load_board(path)
    assert board.source_path == str(path)
    assert board.source_text == BASE
    assert board.title == "test amplifier, invented values"
    # temperature in kelvin, Celsius zero from scipy.constants
    assert board.temperature == pytest.approx(25 + sc.zero_Celsius)
    vcc = board.supplies["VCC"]
    assert (vcc.node, vcc.volts, vcc.tolerance) == ("vcc", 5.0, 0.02)
    r1 = board.resistors["R1"]
    assert r1.nodes == ("vcc", "b")
    assert r1.ohms == 27e3 and r1.tolerance == 0.01 and r1.rating_w == 0.25 and r1.trim
    # IEC 60062 code 4k7 is 4700 ohm
    assert board.resistors["RC"].ohms == 4700.0 and board.resistors["RC"].trim is False
    assert board.resistors["RE"].nodes == ("e", GND)  # integer 0 is ground
    assert board.resistors["R2"].tolerance == 0.05  # contract default
    assert board.capacitors["C1"].farads == 1e-5 and board.capacitors["C1"].tolerance == 0.2
    assert board.capacitors["C2"].tolerance == 0.1
    q1 = board.transistors["Q1"]
    assert (q1.polarity, q1.c, q1.b, q1.e, q1.device) == ("npn", "c", "b", "e", "generic-npn")
    dev = board.device_of("Q1")
    assert dev.IS == DeviceParam(5e-15, 1e-15, 4e-14)
    assert dev.beta == DeviceParam(150.0, 60.0, 400.0) and dev.beta.has_range
    assert dev.beta_r == DeviceParam(1.0) and dev.VA == DeviceParam(100.0)
    assert dev.n == DeviceParam(1.0)
    assert dev.is_temp_exponent == 3.0 and dev.bandgap == 1.11
    sig = board.signal
    assert (sig.input, sig.output) == ("in", "out")
    assert (sig.source_ohms, sig.load_ohms, sig.frequency) == (50.0, 1e4, 1e4)
    assert board.bench.voltmeter_ohms == 1e7
    assert board.spec.targets["gain"].value == 12.0
    assert board.spec.targets["gain"].tolerance == 0.05
    assert board.spec.targets["input_resistance"].value == 75.0
    assert board.spec.targets["input_resistance"].tolerance == 0.02
    assert board.spec.min_vce == 0.4
    assert board.nodes == ["vcc", "b", "c", "e", "in", "out"]


def test_defaults_of_a_divider_without_transistor_or_signal() -> None:
    board = board_from_text(DIVIDER, path="divider.toml")
    assert board.source_path == "divider.toml"
    assert board.transistors == {} and board.devices == {}
    assert board.temperature == pytest.approx(25 + sc.zero_Celsius)
    assert board.supplies["V1"].tolerance == 0.0
    assert board.resistors["RA"].tolerance == 0.05 and board.resistors["RA"].trim
    assert board.resistors["RA"].rating_w is None
    assert board.resistors["RB"].nodes == ("mid", GND)
    assert board.capacitors["CB"].tolerance == 0.20
    assert board.signal.input is None and board.signal.output is None
    assert board.signal.source_ohms == 50.0
    assert board.signal.load_ohms == math.inf
    assert board.signal.frequency == 1e3
    assert board.bench.voltmeter_ohms == 10e6
    assert board.spec.targets == {} and board.spec.min_vce is None


def test_inline_and_dotted_forms_and_integer_nodes() -> None:
    text = _edit(
        DIVIDER,
        ('[resistors.RB]\nnodes = ["mid", "gnd"]\nohms = 1000\n',
         '[resistors]\nRB = { nodes = ["mid", "gnd"], ohms = "1k" }\nRD.nodes = ["mid", 7]\n'
         'RD.ohms = "2k2"\nRF = { nodes = [7, "gnd"], ohms = "470R" }\n'),
    )
    board = board_from_text(text)
    assert board.resistors["RB"].nodes == ("mid", GND)
    assert board.resistors["RD"].nodes == ("mid", "7") and board.resistors["RD"].ohms == 2200.0
    assert board.resistors["RF"].ohms == 470.0


def test_diode_connected_transistor_and_scalar_device_params() -> None:
    text = _edit(
        BASE,
        ('c = "c"', 'c = "b"'),
        ('polarity = "npn"', 'polarity = "NPN"'),
        ('IS = { value = "5f", low = "1f", high = "40f" }', 'IS = "5f"'),
        ('VA = "100"', 'VA = "inf"'),
        ('bandgap = "1.11"', 'bandgap = "1.12 eV"'),
        ('gain = { value = 12, tolerance = "5%" }', 'gain = 12'),
    )
    board = board_from_text(text)
    assert board.spec.targets["gain"].value == 12.0
    assert board.spec.targets["gain"].tolerance == 0.05  # default spec tolerance
    q1 = board.transistors["Q1"]
    assert q1.c == q1.b == "b" and q1.polarity == "npn"
    dev = board.devices["generic-npn"]
    assert dev.IS == DeviceParam(5e-15) and not dev.IS.has_range
    assert dev.VA.value == math.inf and dev.bandgap == 1.12


def test_byte_order_mark_is_accepted(tmp_path: Path) -> None:
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + DIVIDER.encode())
    assert load_board(path).resistors["RA"].ohms == 1000.0


def test_unreadable_file_names_the_path(tmp_path: Path) -> None:
    missing = tmp_path / "nope.toml"
    with pytest.raises(InputError, match="nope.toml: cannot read the board file"):
        load_board(missing)


# ----------------------------------------------------------------- validation
SUPPLY_V2 = '\n[supplies.V2]\nnode = "vcc"   # second\nvolts = 3\n'
FLOAT_CAP = '\n[capacitors.C9]\nnodes = ["e", "float"]\nfarads = "1n"\n'
FLOAT_GROUP = (
    '\n[capacitors.C8]\nnodes = ["b", "p"]\nfarads = "1n"\n'
    '\n[resistors.RX]\nnodes = ["p", "q"]\nohms = "1k"\n'
)
SIGNAL = (
    '[signal]\ninput = "in"\nsource_ohms = "50"\noutput = "out"\nload_ohms = "10k"\n'
    'frequency = "10k"\n'
)
SUPPLY = '[supplies.VCC]\nnode = "vcc"\nvolts = "5"\ntolerance = "2%"\n'

# (id, edits, appended text, key, line marker or None, message fragment)
CASES = [
    ("unknown-table", [], '\n[resistor.R9]\nnodes = ["b", "gnd"]\nohms = 1\n',
     "resistor", "[resistor.R9]", "did you mean 'resistors'"),
    ("unknown-part-key", [('trim = true', 'trim = true\nohm = "1k"')], "",
     "resistors.R1.ohm", 'ohm = "1k"', "did you mean 'ohms'"),
    ("missing-ohms", [('ohms = "27k"\n', '')], "",
     "resistors.R1.ohms", "[resistors.R1]", "missing key 'ohms'"),
    ("missing-nodes", [('nodes = ["in", "b"]\n', '')], "",
     "capacitors.C1.nodes", "[capacitors.C1]", "missing key 'nodes'"),
    ("missing-farads", [('farads = "10u"\n', '')], "",
     "capacitors.C1.farads", "[capacitors.C1]", "missing key 'farads'"),
    ("missing-volts", [('volts = "5"\n', '')], "",
     "supplies.VCC.volts", "[supplies.VCC]", "missing key 'volts'"),
    ("missing-node", [('node = "vcc"\n', '')], "",
     "supplies.VCC.node", "[supplies.VCC]", "missing key 'node'"),
    ("missing-polarity", [('polarity = "npn"\n', '')], "",
     "transistors.Q1.polarity", "[transistors.Q1]", "missing key 'polarity'"),
    ("missing-emitter", [('e = "e"\n', '')], "",
     "transistors.Q1.e", "[transistors.Q1]", "missing key 'e'"),
    ("missing-device", [('device = "generic-npn"\n', '')], "",
     "transistors.Q1.device", "[transistors.Q1]", "missing key 'device'"),
    ("missing-IS", [('IS = { value = "5f", low = "1f", high = "40f" }\n', '')], "",
     "devices.generic-npn.IS", "[devices.generic-npn]", "missing key 'IS'"),
    ("unparseable", [('ohms = "27k"', 'ohms = "27q"')], "",
     "resistors.R1.ohms", 'ohms = "27q"', "unknown unit 'q'"),
    ("wrong-unit", [('ohms = "27k"', 'ohms = "10 V"')], "",
     "resistors.R1.ohms", 'ohms = "10 V"', "is a voltage"),
    ("zero-ohms", [('ohms = "27k"', 'ohms = 0')], "",
     "resistors.R1.ohms", "ohms = 0", "use a wire"),
    ("negative-ohms", [('ohms = "27k"', 'ohms = "-27k"')], "",
     "resistors.R1.ohms", 'ohms = "-27k"', "negative resistance"),
    ("infinite-ohms", [('ohms = "27k"', 'ohms = "inf"')], "",
     "resistors.R1.ohms", 'ohms = "inf"', "leave R1 out"),
    ("zero-farads", [('farads = "10u"', 'farads = 0')], "",
     "capacitors.C1.farads", "farads = 0", "greater than zero"),
    ("negative-farads", [('farads = "10u"', 'farads = "-10u"')], "",
     "capacitors.C1.farads", 'farads = "-10u"', "greater than zero"),
    ("r-code-in-farads", [('farads = "10u"', 'farads = "4R7"')], "",
     "capacitors.C1.farads", 'farads = "4R7"', "resistance only"),
    ("tolerance-100", [('tolerance = "1%"', 'tolerance = "100%"')], "",
     "resistors.R1.tolerance", 'tolerance = "100%"', "out of range"),
    ("tolerance-negative", [('tolerance = "2%"', 'tolerance = "-2%"')], "",
     "supplies.VCC.tolerance", 'tolerance = "-2%"', "out of range"),
    ("one-node", [('nodes = ["vcc", "b"]', 'nodes = ["b", "b"]')], "",
     "resistors.R1.nodes", 'nodes = ["b", "b"]', "a part on one node only"),
    ("node-0", [('nodes = ["e", "gnd"]', 'nodes = ["e", 0]')], "",
     "resistors.RE.nodes", 'nodes = ["e", 0]', 'write "gnd"'),
    ("node-0-text", [('nodes = ["e", "gnd"]', 'nodes = ["e", "0"]')], "",
     "resistors.RE.nodes", 'nodes = ["e", "0"]', 'write "gnd"'),
    ("meg", [('ohms = "1k"', 'ohms = "1meg"')], "",
     "resistors.RE.ohms", 'ohms = "1meg"', "write M"),
    ("nodes-not-list", [('nodes = ["vcc", "b"]', 'nodes = "b"')], "",
     "resistors.R1.nodes", 'nodes = "b"', "list of two node names"),
    ("nodes-three", [('nodes = ["vcc", "b"]', 'nodes = ["vcc", "b", "c"]')], "",
     "resistors.R1.nodes", 'nodes = ["vcc", "b", "c"]', "list of two node names"),
    ("node-float", [('nodes = ["vcc", "b"]', 'nodes = ["vcc", 1.5]')], "",
     "resistors.R1.nodes", 'nodes = ["vcc", 1.5]', "a node name is a string"),
    ("node-slash", [('nodes = ["vcc", "b"]', 'nodes = ["vcc", "b/x"]')], "",
     "resistors.R1.nodes", 'nodes = ["vcc", "b/x"]', "contains '/'"),
    ("unknown-device", [('device = "generic-npn"', 'device = "generic-nnp"')], "",
     "transistors.Q1.device", 'device = "generic-nnp"', "did you mean 'generic-npn'"),
    ("low-above-value", [('low = "1f"', 'low = "10f"')], "",
     "devices.generic-npn.IS.low", 'low = "10f"', "low '10f' is above value '5f'"),
    ("value-above-high", [('value = 150', 'value = 500')], "",
     "devices.generic-npn.beta.high", "value = 500", "above high"),
    ("IS-zero", [('IS = { value = "5f", low = "1f", high = "40f" }', 'IS = 0')], "",
     "devices.generic-npn.IS", "IS = 0", "greater than zero"),
    ("beta-negative", [('beta = { value = 150, low = 60, high = 400 }', 'beta = -5')], "",
     "devices.generic-npn.beta", "beta = -5", "greater than zero"),
    ("n-zero", [('n = 1.0', 'n = 0')], "",
     "devices.generic-npn.n", "n = 0", "greater than zero"),
    ("VA-negative", [('VA = "100"', 'VA = "-100"')], "",
     "devices.generic-npn.VA", 'VA = "-100"', "greater than zero"),
    ("param-without-value", [('beta = { value = 150, low = 60, high = 400 }',
                              'beta = { low = 60 }')], "",
     "devices.generic-npn.beta.value", "beta = { low = 60 }", "needs a value"),
    ("device-key-case", [('bandgap = "1.11"', 'bandgap = "1.11"\nIs = 3')], "",
     "devices.generic-npn.Is", "Is = 3", "did you mean 'IS'"),
    ("duplicate-ref", [], '\n[capacitors.R1]\nnodes = ["b", "gnd"]\nfarads = "1n"\n',
     "capacitors.R1", "[capacitors.R1]", "unique across the whole board"),
    ("ref-with-dot", [], '\n[resistors."R.9"]\nnodes = ["b", "gnd"]\nohms = 1\n',
     "resistors.R.9", '"R.9"', "plain name"),
    ("polarity", [('polarity = "npn"', 'polarity = "nnp"')], "",
     "transistors.Q1.polarity", 'polarity = "nnp"', '"npn" or "pnp"'),
    ("base-on-emitter", [('b = "b"', 'b = "e"')], "",
     "transistors.Q1.b", 'b = "e"', "base and emitter on the same node"),
    ("collector-on-emitter", [('c = "c"', 'c = "e"')], "",
     "transistors.Q1.c", 'c = "e"', "collector and emitter on the same node"),
    ("two-supplies-one-node", [], SUPPLY_V2,
     "supplies.V2.node", "# second", "VCC and V2 both drive node 'vcc'"),
    ("supply-on-gnd", [('node = "vcc"', 'node = "gnd"')], "",
     "supplies.VCC.node", 'node = "gnd"', "sits on gnd"),
    ("signal-unknown-node", [('input = "in"', 'input = "inn"')], "",
     "signal.input", 'input = "inn"', "unknown node 'inn' (did you mean 'in'?)"),
    ("signal-on-supply", [('output = "out"', 'output = "vcc"')], "",
     "signal.output", 'output = "vcc"', "node of supply VCC"),
    ("signal-on-gnd", [('input = "in"', 'input = "gnd"')], "",
     "signal.input", 'input = "gnd"', "signal.input is gnd"),
    ("signal-same-node", [('output = "out"', 'output = "in"')], "",
     "signal.output", 'output = "in"', "the same node"),
    ("signal-missing-output", [('output = "out"\n', '')], "",
     "signal.output", "[signal]", "missing key 'output'"),
    ("signal-zero-source", [('source_ohms = "50"', 'source_ohms = 0')], "",
     "signal.source_ohms", "source_ohms = 0", "greater than zero"),
    ("capacitor-only-node", [], FLOAT_CAP,
     "capacitors.C9.nodes", '"float"',
     "node 'float' has no DC path: it connects only through capacitors C9"),
    ("floating-group", [], FLOAT_GROUP,
     "resistors.RX", "[resistors.RX]", "nodes 'p', 'q' have no DC path to gnd or a supply"),
    ("no-supply", [(SUPPLY, '')], "", "supplies", None, "the board has no supply"),
    ("spec-unknown-key", [('min_vce = "0.4"', 'min_vce = "0.4"\nmax_gain = 3')], "",
     "spec.max_gain", "max_gain = 3", "unknown key 'max_gain'"),
    ("spec-without-signal", [(SIGNAL, '')], "",
     "spec.gain", "gain = {", "needs a [signal] table"),
    ("spec-bad-tolerance", [('tolerance = "2%" }', 'tolerance = "200%" }')], "",
     "spec.input_resistance.tolerance", 'tolerance = "200%" }', "out of range"),
    ("spec-negative-min-vce", [('min_vce = "0.4"', 'min_vce = "-0.4"')], "",
     "spec.min_vce", 'min_vce = "-0.4"', "headroom"),
    ("temperature-no-unit", [('temperature = "25 C"', 'temperature = 25')], "",
     "conditions.temperature", "temperature = 25", "needs a unit"),
    ("temperature-string-no-unit", [('temperature = "25 C"', 'temperature = "25"')], "",
     "conditions.temperature", 'temperature = "25"', "has no unit"),
    ("trim-not-bool", [('trim = true', 'trim = "yes"')], "",
     "resistors.R1.trim", 'trim = "yes"', "true or false"),
    ("voltmeter-negative", [('voltmeter_ohms = "10M"', 'voltmeter_ohms = "-10M"')], "",
     "bench.voltmeter_ohms", 'voltmeter_ohms = "-10M"', "greater than zero"),
    ("rating-wrong-unit", [('rating = "0.25 W"', 'rating = "0.25 V"')], "",
     "resistors.R1.rating", 'rating = "0.25 V"', "is a voltage"),
    ("inline-table", [], '\n[resistors]\nR7 = { nodes = ["b", "gnd"], ohms = "-5" }\n',
     "resistors.R7.ohms", "R7 = {", "negative resistance"),
    ("dotted-key", [], '\n[resistors]\nR7.nodes = ["b", "gnd"]\nR7.ohms = "5 A"\n',
     "resistors.R7.ohms", "R7.ohms", "is a current"),
]


@pytest.mark.parametrize(
    ("edits", "appended", "key", "marker", "fragment"),
    [pytest.param(*case[1:], id=case[0]) for case in CASES],
)
def test_validation_error_names_file_key_and_line(
    tmp_path: Path,
    edits: list[tuple[str, str]],
    appended: str,
    key: str,
    marker: str | None,
    fragment: str,
) -> None:
    text = _edit(BASE, *edits) + appended
    path, err = _errors(tmp_path, text)
    assert path in str(err)
    matching = [e for e in err.errors if e.key == key]
    assert matching, f"no error for {key}; got: {[str(e) for e in err.errors]}"
    found = matching[0]
    assert fragment in found.message
    expected_line = None if marker is None else _line_of(text, marker)
    assert found.line == expected_line
    where = f"{path}:{expected_line}: " if expected_line else f"{path}: "
    assert str(found).startswith(f"{where}[{key}] ")


def test_toml_syntax_error_keeps_the_line(tmp_path: Path) -> None:
    text = _edit(BASE, ('ohms = "27k"', 'ohms = "27k'))
    path, err = _errors(tmp_path, text)
    assert len(err.errors) == 1
    assert err.line == _line_of(text, 'ohms = "27k')
    assert str(err).startswith(f"{path}:{err.line}: TOML syntax error")


def test_every_problem_is_reported_together_in_file_order(tmp_path: Path) -> None:
    text = _edit(
        BASE,
        ('ohms = "27k"', 'ohms = "27q"'),
        ('farads = "1u"', 'farads = "-1u"'),
        ('polarity = "npn"', 'polarity = "xyz"'),
    )
    path, err = _errors(tmp_path, text)
    assert [e.key for e in err.errors] == [
        "resistors.R1.ohms", "capacitors.C2.farads", "transistors.Q1.polarity"
    ]
    assert [e.line for e in err.errors] == sorted(e.line for e in err.errors)
    assert "and 2 more problems" in str(err)
    assert all(e.path == path for e in err.errors)


def test_lines_inside_multiline_strings_are_not_keys(tmp_path: Path) -> None:
    text = _edit(
        BASE,
        ('title = "test amplifier, invented values"',
         'title = """notes:\n[resistors.R1]\nohms = "x"\n"""'),
        ('ohms = "27k"', 'ohms = "27 F"'),
    )
    path, err = _errors(tmp_path, text)
    (found,) = err.errors
    assert found.key == "resistors.R1.ohms"
    assert found.line == _line_of(text, 'ohms = "27 F"')


def test_signal_nodes_may_connect_through_capacitors_only() -> None:
    # contract: DC is the board alone; the generator and load exist only in small signal
    board = board_from_text(BASE)
    assert board.capacitors["C1"].nodes[0] == board.signal.input
    assert board.capacitors["C2"].nodes[1] == board.signal.output


def test_iec_60062_tolerance_letter_in_a_board() -> None:
    # IEC 60062: F is ±1 %, J ±5 %, as the letter printed on a part or a parts list
    samples = Path(__file__).resolve().parent.parent / "sample_data"
    text = (samples / "line_receiver_cb.toml").read_text(encoding="utf-8")
    text = text.replace('tolerance = "1%"', 'tolerance = "F"', 1)
    board = board_from_text(text)
    assert next(iter(board.resistors.values())).tolerance == pytest.approx(0.01)
