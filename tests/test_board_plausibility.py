"""Boards that parse but are probably wrong: warnings, not errors.

Every board here is invented. The plausible ranges are common practice for discrete
small-signal boards (resistors 0.1 ohm to 100 Mohm, capacitors 1 pF to 0.1 F, supplies
0.1 V to 100 V, ambient 200 K to 450 K, IS 1e-18 A to 1e-9 A, beta 5 to 2000); the SI
prefixes m (1e-3) and M (1e6) are those of the SI brochure (from memory), checked here
through scipy.constants.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
import scipy.constants as sc

from reconcile.errors import input_warnings
from reconcile.model.board_loader import board_from_text

ROOT = Path(__file__).resolve().parent.parent

GOOD = """\
title = "plausibility test stage (invented)"

[conditions]
temperature = "25 C"

[supplies.VCC]
node = "vcc"
volts = "12"

[resistors.R1]
nodes = ["vcc", "b"]
ohms = "68k"

[resistors.R2]
nodes = ["b", "gnd"]
ohms = "12k"

[resistors.RC]
nodes = ["vcc", "c"]
ohms = "3k3"

[resistors.RE]
nodes = ["e", "gnd"]
ohms = "820"

[capacitors.CIN]
nodes = ["in", "b"]
farads = "2.2u"

[transistors.Q1]
polarity = "npn"
c = "c"
b = "b"
e = "e"
device = "gp-npn"

[devices.gp-npn]
IS = "8f"
beta = { value = 180, low = 90, high = 350 }

[signal]
input = "in"
output = "c"
"""


def _line_of(text: str, needle: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), 1) if needle in line)


def test_a_sound_board_has_no_warnings():
    assert board_from_text(GOOD, "good.toml").warnings == ()


def test_a_node_only_one_part_touches_is_named_with_its_connection():
    text = GOOD.replace('nodes = ["vcc", "c"]', 'nodes = ["vcc", "cc"]')  # a typo in a pin
    board = board_from_text(text, "typo.toml")
    line = _line_of(text, '["vcc", "cc"]')
    # ('c' keeps only Q1's collector, but it is signal.output: the load connects there)
    assert board.warnings == (
        f"typo.toml:{line}: [resistors.RC.nodes] node 'cc' connects only to one end of RC: "
        "a mistyped node name, or a part left unconnected?",
    )

def test_warnings_are_noted_for_the_command_line_only_when_it_collects():
    from reconcile import errors

    text = GOOD.replace('nodes = ["vcc", "c"]', 'nodes = ["vcc", "cc"]')
    saved = errors.input_warnings(), errors._COLLECTING[0]
    try:
        errors._COLLECTING[0] = False
        errors._INPUT_WARNINGS.clear()
        board_from_text(text, "a.toml")
        assert input_warnings() == []  # a library caller reads Board.warnings instead
        errors.collect_input_warnings()  # what the command line's entry point does
        board = board_from_text(text, "a.toml")
        board_from_text(text, "a.toml")  # noted once
        assert input_warnings() == list(board.warnings)
    finally:
        errors._INPUT_WARNINGS[:] = saved[0]
        errors._COLLECTING[0] = saved[1]


def test_a_floating_collector_is_named():
    text = GOOD.replace('c = "c"', 'c = "cq"')
    [warning] = board_from_text(text, "f.toml").warnings
    assert warning == (f"f.toml:{_line_of(text, 'c = ')}: [transistors.Q1.c] node 'cq' "
                       "connects only to the collector of Q1: a mistyped node name, or a "
                       "part left unconnected?")


def test_a_resistor_to_nowhere_and_a_supply_alone_are_named():
    text = GOOD + '\n[resistors.R9]\nnodes = ["b", "nowhere"]\nohms = "1k"\n'
    text += '\n[supplies.VEE]\nnode = "vee"\nvolts = "-12"\n'
    warnings = board_from_text(text, "b.toml").warnings
    assert any("[resistors.R9.nodes] node 'nowhere' connects only to one end of R9" in w
               for w in warnings)
    assert any("[supplies.VEE.node] node 'vee' connects only to supply VEE" in w
               for w in warnings)


def test_the_signal_nodes_may_have_one_part():
    # 'in' has only CIN: the generator connects there in small signal
    assert not any("'in'" in w for w in board_from_text(GOOD, "g.toml").warnings)


@pytest.mark.parametrize("spelling", ["ground", "GND", "Ground", "0V", "grnd"])
def test_a_misspelled_ground_gets_the_spelled_gnd_hint(spelling):
    text = GOOD.replace('nodes = ["e", "gnd"]', f'nodes = ["e", "{spelling}"]')
    text += f'\n[resistors.RG]\nnodes = ["{spelling}", "gnd"]\nohms = "1"\n'
    warnings = board_from_text(text, "g.toml").warnings
    hits = [w for w in warnings if "the reference node is spelled 'gnd'" in w]
    assert len(hits) == 1 and f"node {spelling!r} looks like ground" in hits[0]


def test_a_misspelled_ground_with_no_path_keeps_the_hint_in_its_error():
    from reconcile.errors import InputErrors

    text = GOOD.replace('nodes = ["e", "gnd"]', 'nodes = ["e", "ground"]').replace(
        'nodes = ["b", "gnd"]', 'nodes = ["b", "ground"]')
    text = text.replace('[supplies.VCC]\nnode = "vcc"', '[supplies.VCC]\nnode = "vcc"')
    try:
        board_from_text(text.replace('node = "vcc"', 'node = "vcc2"'), "g.toml")
    except InputErrors as err:
        assert "the reference node is spelled 'gnd'" in str(err)
        assert "or '0'" not in str(err)  # "0" is refused as ground (contract v2 §6.1)
    else:
        raise AssertionError("a board with no DC path should be refused")


def test_milli_where_mega_was_meant_gets_a_plausibility_warning():
    text = GOOD.replace('ohms = "68k"', 'ohms = "0.1m"')
    board = board_from_text(text, "m.toml")
    assert board.resistors["R1"].ohms == pytest.approx(0.1 * sc.milli)  # parsed as milli
    [warning] = board.warnings
    assert warning.startswith(f"m.toml:{_line_of(text, '0.1m')}: [resistors.R1.ohms] ")
    assert "far outside what a discrete board uses" in warning
    assert "for megohms write '0.1M'" in warning
    fixed = board_from_text(text.replace('"0.1m"', '"0.1M"'), "m.toml")
    assert fixed.resistors["R1"].ohms == pytest.approx(0.1 * sc.mega) and not fixed.warnings


@pytest.mark.parametrize("old, new, key", [
    ('temperature = "25 C"', 'temperature = "1 K"', "conditions.temperature"),
    ('farads = "2.2u"', 'farads = "2.2f"', "capacitors.CIN.farads"),
    ('volts = "12"', 'volts = "12k"', "supplies.VCC.volts"),
    ('IS = "8f"', 'IS = "8m"', "devices.gp-npn.IS"),
    ('value = 180', 'value = 1.8', "devices.gp-npn.beta"),
])
def test_implausible_values_are_warned_about(old, new, key):
    text = GOOD.replace(old, new).replace("low = 90, ", "low = 1, ")
    warnings = board_from_text(text, "v.toml").warnings
    [warning] = [w for w in warnings if f"[{key}]" in w]
    assert "far outside what a discrete board uses" in warning


def test_one_kelvin_suggests_celsius():
    text = GOOD.replace('temperature = "25 C"', 'temperature = "1 K"')
    [warning] = board_from_text(text, "t.toml").warnings
    assert "(1 K)" in warning and "for Celsius write '1 C'" in warning


@pytest.mark.slow  # two processes, each solving the board
def test_warnings_go_to_stderr_and_into_json_not_errors(tmp_path):
    path = tmp_path / "typo.toml"
    path.write_text(GOOD.replace('ohms = "68k"', 'ohms = "0.1m"'), encoding="utf-8")
    cmd = [sys.executable, "-m", "reconcile", "solve", str(path)]
    as_json = subprocess.run([*cmd, "--json"], capture_output=True, text=True, cwd=ROOT,
                             timeout=120)
    assert as_json.returncode == 0, as_json.stderr
    out = json.loads(as_json.stdout)
    [noted] = [w for w in out["warnings"] if "[resistors.R1.ohms]" in w]
    assert f"reconcile: warning: {noted}" in as_json.stderr.splitlines()
    plain = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert plain.returncode == 0 and f"reconcile: warning: {noted}" in plain.stderr
