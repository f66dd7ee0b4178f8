"""Trim proposes capacitor changes for a missed corner limit, against outside references.

Outside references, each named again beside its check:

- the first-order RC network's corner f_c = 1/(2*pi*R*C), high-pass (series C, shunt R:
  the low corner) and low-pass (series R, shunt C: the high corner): textbook circuit
  theory (Horowitz & Hill, "The Art of Electronics", chapter 1, from memory); exact;
- capacitances in parallel add, C = C1 + C2 (basic circuit theory);
- the E12 series of IEC 60063, from the ``eseries`` package;
- a tolerance as a rectangular distribution of standard deviation tol/sqrt(3)
  (JCGM 100:2008 4.3.7), for the hand value of the worst-case rule trim documents
  (in spec k_sigma = 2 standard deviations inside the limit).

Every board here is invented test data.
"""

from __future__ import annotations

import json
import math

import eseries
import pytest
from boards import capacitor, resistor, supply, table, title
from cli_support import run_cli

from reconcile.engine.solution import solve
from reconcile.model.board_loader import board_from_text
from reconcile.trim.apply import apply_changes
from reconcile.trim.rework import trim

R_OHMS = 10e3
TOL_C = 0.10
TOL_R = 0.001
K_SIGMA = 2.0


def _e12(low: float, high: float) -> list[float]:
    """E12 values (IEC 60063, from ``eseries``) from ``low`` to ``high``."""
    return sorted(eseries.erange(eseries.ESeries.E12, low, high))


def _rc(kind: str, farads: str, spec: dict) -> str:
    """An invented first-order RC network between ``in`` and ``out``."""
    if kind == "high-pass":
        parts = (capacitor("C1", "in", "out", farads, tolerance="10%")
                 + resistor("R1", "out", "gnd", "10k", tolerance="0.1%", trim=False))
    else:
        parts = (resistor("R1", "in", "out", "10k", tolerance="0.1%", trim=False)
                 + capacitor("C1", "out", "gnd", farads, tolerance="10%")
                 + resistor("RIN", "in", "gnd", "1M", tolerance="0.1%", trim=False))
    return (title(f"invented {kind} RC network") + supply("VCC", "vcc", 5)
            + resistor("RBIAS", "vcc", "gnd", "10k", trim=False) + parts
            + table("signal", input="in", output="out", source_ohms=50, frequency="1k")
            + table("spec", **spec))


def _corner(c: float) -> float:
    return 1.0 / (2.0 * math.pi * R_OHMS * c)  # exact for a first-order RC network


def _worst_case_factor() -> float:
    """1 + k·sd of ln f for a replaced C (its own tolerance) and R's: JCGM 100 4.3.7."""
    return 1.0 + K_SIGMA * math.hypot(TOL_C, TOL_R) / math.sqrt(3.0)


def _first(result, action: str):
    return next(o for o in result.options if o.changes[0].action == action)


def test_low_corner_replacement_is_the_smallest_e12_capacitor_meeting_it():
    f_max = 18.5
    result = trim(board_from_text(_rc("high-pass", "220n", {"low_corner": {"max": f_max}})),
                  samples=0)
    # Hand value: the smallest E12 C whose corner, k_sigma spreads up, is at most f_max.
    expected = min(c for c in _e12(22e-9, 2.2e-6) if _corner(c) * _worst_case_factor() <= f_max)
    assert expected == pytest.approx(1e-6)  # 820 nF gives 19.4 Hz: over the max outright
    best_replace = _first(result, "replace")
    change = best_replace.changes[0]
    assert (change.ref, change.part, change.series) == ("C1", "capacitor", "E12")
    assert change.value == pytest.approx(expected, rel=1e-12)
    assert best_replace.predicted["low_corner"] == pytest.approx(_corner(expected), rel=1e-9)
    assert best_replace.meets_spec
    assert any(p.startswith("low corner") and "> max" in p for p in result.baseline.problems)
    assert result.to_dict()["options"][0]["changes"][0]["part"] == "capacitor"


def test_high_corner_replacement_is_the_largest_e12_capacitor_meeting_it():
    f_min = 10e3
    result = trim(board_from_text(_rc("low-pass", "4n7", {"high_corner": {"min": f_min}})),
                  samples=0)
    expected = max(c for c in _e12(470e-12, 47e-9)
                   if _corner(c) / _worst_case_factor() >= f_min)
    change = result.best.changes[0]
    assert (change.ref, change.action) == ("C1", "replace")
    assert change.value == pytest.approx(expected, rel=1e-12)
    assert result.best.predicted["high_corner"] == pytest.approx(_corner(expected), rel=1e-6)


def test_parallel_capacitor_total_is_what_the_yield_uses():
    f_max = 60.0
    result = trim(board_from_text(_rc("high-pass", "100n", {"low_corner": {"max": f_max}})),
                  samples=4000)
    option = _first(result, "parallel")
    change = option.changes[0]
    assert change.combined == pytest.approx(change.built + change.value, rel=1e-12)  # C1 + C2
    total = 100e-9 + change.value
    assert option.predicted["low_corner"] == pytest.approx(_corner(total), rel=1e-9)
    # C2 alone would miss the max outright; the yield counts the total C1 + C2
    assert _corner(change.value) > f_max
    assert option.yield_ >= 0.95
    assert option.spread["low_corner"]["p50"] == pytest.approx(_corner(total), rel=0.02)


def _ce_stage(c_in: str, spec: dict) -> str:
    """An invented common-emitter stage, input coupled through C_IN, output at the
    collector; only RC (and C_IN) may be changed."""
    fixed = {"tolerance": "1%", "trim": False}  # one trimmable resistor keeps it lean
    parts = (supply("VCC", "vcc", 12)
             + resistor("R1", "vcc", "b", "47k", **fixed)
             + resistor("R2", "b", "gnd", "10k", **fixed)
             + resistor("RC", "vcc", "c", "4k7", tolerance="5%")
             + resistor("RE", "e", "gnd", "1k", **fixed)
             + capacitor("C_IN", "in", "b", c_in, tolerance="10%")
             + table("transistors.Q1", polarity="npn", c="c", b="b", e="e", device="dev")
             + table("devices.dev", IS="10f", beta=200, VA=100))
    return (title("invented coupled CE stage") + parts
            + table("signal", input="in", output="c", source_ohms=50, frequency="10k")
            + table("spec", **spec))


def test_board_meeting_its_corner_proposes_no_capacitor_change():
    spec = {"gain": {"value": 4.2, "tolerance": "3%"}, "low_corner": {"max": 200}}
    result = trim(board_from_text(_ce_stage("10u", spec)), samples=0, top=5)
    assert result.baseline.predicted["low_corner"] < 20.0  # far inside its max
    assert result.needed and result.best.meets_spec
    assert all(c.part == "resistor" for o in result.options for c in o.changes)


def test_self_consistency_mixed_rework_applied_to_the_board_meets_its_spec():
    spec = {"gain": {"value": 4.2, "tolerance": "3%"}, "low_corner": {"max": 60}}
    board = board_from_text(_ce_stage("100n", spec))
    result = trim(board, samples=500, top=3)
    best = result.best
    assert {c.part for c in best.changes} == {"resistor", "capacitor"}
    after = solve(apply_changes(board, best.changes))  # the engine on the reworked board
    checks = {c.quantity: c for c in after.spec_checks}
    assert checks["low_corner"].met and checks["gain"].met
    assert checks["low_corner"].value == pytest.approx(best.predicted["low_corner"], rel=1e-6)
    assert checks["gain"].value == pytest.approx(best.predicted["gain"], rel=1e-9)


def test_cli_json_and_table_describe_a_capacitor_change(tmp_path):
    path = tmp_path / "rc.toml"
    path.write_text(_rc("high-pass", "100n", {"low_corner": {"max": 60.0}}))
    out = run_cli("trim", str(path), "--json", "--samples", "200")
    assert out.exit_code == 0, out.stderr
    data = json.loads(out.stdout)
    change = data["options"][0]["changes"][0]
    assert change["part"] == "capacitor" and "ohms" not in change
    assert change["combined_farads"] == pytest.approx(change["built_farads"] + change["farads"])
    assert data["spec"]["low_corner"] == {"target": 60.0, "low": None, "high": 60.0}
    assert data["baseline"]["predicted"]["low_corner"] == pytest.approx(_corner(100e-9))
    table_out = run_cli("trim", str(path), "--samples", "200")
    assert table_out.exit_code == 0, table_out.stderr
    assert "low corner 159.2 Hz > max 60 Hz" in data["baseline"]["problems"]
    assert "C1 ∥ 220 nF (E12) → 320 nF" in table_out.stdout  # the best, said in full
