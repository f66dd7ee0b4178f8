"""In-circuit meter checks: what an ohmmeter reads across a part, and checks whose two
outcomes a meter cannot tell apart are not offered.

Outside references: the series and parallel rules for resistors and the balanced
Wheatstone bridge (no current in the bridging arm), as in Horowitz & Hill, *The Art of
Electronics*, 3rd ed., ch. 1 (from memory).
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import pytest
from boards import capacitor, divider_stage, resistor, supply, table

from reconcile.cli.demo import sample_data_dir
from reconcile.diagnosis.checks import check
from reconcile.diagnosis.faults import single_faults
from reconcile.diagnosis.in_circuit import ohms_between, readings_differ
from reconcile.model.board_loader import board_from_text, load_board


def _board(text: str):
    return board_from_text(supply("VCC", "vcc", 10) + text, path="net.toml")


def test_series_and_parallel_resistors():
    b = _board(resistor("R1", "vcc", "a", "1k") + resistor("R2", "a", "gnd", "2k7")
               + resistor("R3", "vcc", "gnd", "1k"))
    # R1 + R2 in series, in parallel with R3: 3.7k·1k/4.7k
    assert ohms_between(b, "vcc", "gnd") == pytest.approx(3700.0 * 1000.0 / 4700.0, rel=1e-12)
    assert ohms_between(b, "a", "gnd") == pytest.approx(2700.0 * 2000.0 / 4700.0, rel=1e-12)
    assert ohms_between(b, "a", "a") == 0.0


def test_a_balanced_bridge_carries_nothing_in_its_middle_arm():
    b = _board(resistor("R1", "vcc", "l", "1k") + resistor("R2", "vcc", "r", "2k")
               + resistor("R3", "l", "gnd", "1k") + resistor("R4", "r", "gnd", "2k")
               + resistor("R5", "l", "r", "470"))
    # balanced (R1/R3 = R2/R4): R5 carries no current, so (R1 + R3) ∥ (R2 + R4)
    assert ohms_between(b, "vcc", "gnd") == pytest.approx(2000.0 * 4000.0 / 6000.0, rel=1e-12)


def test_a_capacitor_alone_joins_nothing_an_ohmmeter_sees():
    b = _board(resistor("R1", "vcc", "a", "1k") + capacitor("C1", "a", "out", "1u")
               + resistor("R2", "out", "gnd", "10k"))
    assert math.isinf(ohms_between(b, "a", "out"))
    assert ohms_between(b, "vcc", "gnd") == math.inf  # no resistor path at all


def test_readings_a_meter_cannot_tell_apart():
    assert not readings_differ("voltage", 6.98, 6.98)
    assert not readings_differ("voltage", 6.98, 6.981)  # within a 4½-digit meter's u
    assert readings_differ("voltage", 6.98, 5.0)
    assert readings_differ("resistance", 0.0, 62e3)
    assert not readings_differ("resistance", 0.0, 0.05)  # below the leads' 0.1 Ω
    assert readings_differ("resistance", 0.0, math.inf)


def _fault(board, ref, kind):
    return next(f for f in single_faults(board) if f.ref == ref and f.kind == kind)


def test_a_shorted_capacitors_check_names_the_network_a_good_board_reads():
    board = load_board(sample_data_dir() / "line_receiver_cb.toml")
    ft = SimpleNamespace(fault=_fault(board, "C_B", "short"))
    text = check(board, ft, None, None, None, None, 0)
    # C_B sits from b to gnd, across R2 (62k); with the supply disconnected R1 goes
    # nowhere and the transistor does not conduct, so a good board reads R2
    assert "in circuit" in text and "about 62 kΩ if it is good" in text and "about 0 ohm" in text
    assert "charges up and reads open" not in text


def test_a_short_across_a_near_short_is_checked_out_of_circuit():
    b = board_from_text(divider_stage(vcc=5, r1="27k", r2="10k", rc="4k7", re="1k",
                                      device_name="d", device_params={"IS": "5f", "beta": 150})
                        + capacitor("C1", "e", "gnd", "10u") + resistor("R9", "e", "gnd", "0.05"),
                        path="near.toml")
    text = check(b, SimpleNamespace(fault=_fault(b, "C1", "short")), None, None, None, None, 0)
    assert "lift one leg of C1" in text and "out of circuit" in text


def test_a_reversed_check_leaves_out_a_node_that_reads_the_same_either_way():
    board = load_board(sample_data_dir() / "line_receiver_cb.toml")
    q = board.transistors["Q1"]
    fault = _fault(board, "Q1", "reversed")
    same = {q.e: 6.98, q.c: 6.98, q.b: 6.98}
    text = check(board, SimpleNamespace(fault=fault, node_volts=same), SimpleNamespace(
        node_volts=dict(same)), None, None, None, 0)
    assert "orientation" in text and "measure V(" not in text
    apart = dict(same, **{q.c: 4.1})
    text = check(board, SimpleNamespace(fault=fault, node_volts=apart), SimpleNamespace(
        node_volts=dict(same)), None, None, None, 0)
    assert f"measure V({q.c})" in text
