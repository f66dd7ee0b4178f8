"""Kirchhoff's current law on random boards, and the npn/pnp mirror symmetry.

Outside references: Kirchhoff's current law (the currents into every node sum to zero),
checked with a sum written here from the solved node voltages and terminal currents,
not from the engine's nodal matrices; and the contract's statement that a pnp is the
npn model with every terminal voltage and current negated (formats.md, "Device model").
"""

from __future__ import annotations

import dataclasses
import math
from collections import defaultdict

import numpy as np
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from reconcile.engine import devices
from reconcile.model.board import (
    GND,
    Board,
    Capacitor,
    Device,
    DeviceParam,
    Resistor,
    Signal,
    Supply,
    Transistor,
)
from reconcile.model.board_loader import load_board
from reconcile.engine import compile_board, nominal_parameters, solve_batch
from reconcile.engine.solution import solve

KCL_TOL_A = 1e-12
E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
SAMPLE_DATA = __import__("pathlib").Path(__file__).resolve().parents[1] / "sample_data"


# ------------------------------------------------------------------ board building
def _device(name: str, is_a: float, beta: float, va: float, beta_r: float, n: float) -> Device:
    return Device(
        name=name,
        IS=DeviceParam(is_a),
        beta=DeviceParam(beta),
        beta_r=DeviceParam(beta_r),
        VA=DeviceParam(va),
        n=DeviceParam(n),
    )


def _board(
    resistors: list[tuple[str, str, str, float]],
    transistors: list[tuple[str, str, str, str, str, str]],
    supplies: list[tuple[str, str, float]],
    devs: list[Device],
    temperature: float = 298.15,
    capacitors: tuple[tuple[str, str, str, float], ...] = (),
) -> Board:
    return Board(
        title="random KCL board",
        temperature=temperature,
        supplies={ref: Supply(ref, node, volts) for ref, node, volts in supplies},
        resistors={ref: Resistor(ref, (a, b), ohms) for ref, a, b, ohms in resistors},
        capacitors={ref: Capacitor(ref, (a, b), f) for ref, a, b, f in capacitors},
        transistors={
            ref: Transistor(ref, pol, c, b, e, dev) for ref, pol, c, b, e, dev in transistors
        },
        devices={d.name: d for d in devs},
        signal=Signal(),
    )


def single_stage(
    polarity: str,
    vcc: float,
    r1: float,
    r2: float,
    rc: float,
    re_: float,
    dev: Device,
    temperature: float = 298.15,
    vee: float | None = None,
) -> Board:
    """Divider-biased stage. npn: RC from vcc, RE to gnd (or to a negative rail vee);
    pnp: RE from vcc, RC to gnd."""
    low = "vee" if vee is not None else GND
    if polarity == "npn":
        res = [("R1", "vcc", "b", r1), ("R2", "b", low, r2), ("RC", "vcc", "c", rc),
               ("RE", "e", low, re_)]
    else:
        res = [("R1", "vcc", "b", r1), ("R2", "b", low, r2), ("RC", "c", low, rc),
               ("RE", "vcc", "e", re_)]
    sup = [("VCC", "vcc", vcc)] + ([("VEE", "vee", vee)] if vee is not None else [])
    return _board(
        res, [("Q1", polarity, "c", "b", "e", dev.name)], sup, [dev], temperature,
        capacitors=(("CE", "e", low, 100e-6),),
    )


def two_stage(
    second: str,
    vcc: float,
    rs: tuple[float, ...],
    dev1: Device,
    dev2: Device,
    temperature: float = 298.15,
) -> Board:
    """An npn common-emitter stage direct-coupled into a second transistor whose base
    is the first collector: a pnp (emitter resistor from vcc, collector resistor to gnd)
    or an npn follower (collector on vcc, emitter resistor to gnd)."""
    r1, r2, rc1, re1, re2, rc2 = rs
    res = [("R1", "vcc", "b1", r1), ("R2", "b1", GND, r2), ("RC1", "vcc", "c1", rc1),
           ("RE1", "e1", GND, re1)]
    if second == "pnp":
        res += [("RE2", "vcc", "e2", re2), ("RC2", "c2", GND, rc2)]
        q2 = ("Q2", "pnp", "c2", "c1", "e2", dev2.name)
    else:
        res += [("RE2", "e2", GND, re2)]
        q2 = ("Q2", "npn", "vcc", "c1", "e2", dev2.name)
    return _board(
        res, [("Q1", "npn", "c1", "b1", "e1", dev1.name), q2], [("VCC", "vcc", vcc)],
        [dev1, dev2], temperature,
    )


# --------------------------------------------------------------- independent KCL
def check_kcl(board: Board, probe: tuple[str, str] | None = None, probe_ohms: float = 10e6):
    """Solve and check KCL with sums written from the board's parts; returns the batch."""
    probes = (probe,) if probe else ()
    circuit = compile_board(board, probes=probes)
    params = nominal_parameters(circuit, 1, probe_ohms=probe_ohms if probe else None)
    sol = solve_batch(circuit, params, small_signal=False)
    assert bool(sol.converged[0])

    def v(node: str) -> float:
        return 0.0 if node == GND else float(sol.voltage(node)[0])

    leaving = defaultdict(float)  # current leaving each node into the parts, A
    scale = defaultdict(float)  # the size of the currents meeting there, for the report
    for k, (ref, r) in enumerate(board.resistors.items()):
        a, b = r.nodes
        i = (v(a) - v(b)) / r.ohms  # Ohm's law, from nodes[0] to nodes[1]
        assert float(sol.resistor_current[0, k]) == pytest.approx(i, rel=1e-12, abs=1e-18), ref
        leaving[a] += i
        leaving[b] -= i
        scale[a] += abs(i)
        scale[b] += abs(i)
    if probe:
        a, b = probe
        i = (v(a) - v(b)) / probe_ohms
        leaving[a] += i
        leaving[b] -= i
    for k, (_ref, q) in enumerate(board.transistors.items()):
        ic, ib, ie = (float(x[0, k]) for x in (sol.ic, sol.ib, sol.ie))
        # the three terminal currents of one transistor sum to zero
        assert abs(ic + ib + ie) <= 1e-15 * max(abs(ic), abs(ib), abs(ie), 1e-30)
        for node, i in ((q.c, ic), (q.b, ib), (q.e, ie)):
            leaving[node] += i
            scale[node] += abs(i)
    supply_nodes = {s.node: k for k, s in enumerate(board.supplies.values())}
    for node in board.nodes:
        if node in supply_nodes:
            # what the supply delivers into the board is what leaves its node
            delivered = float(sol.supply_current[0, supply_nodes[node]])
            assert abs(delivered - leaving[node]) <= KCL_TOL_A, node
        else:
            assert abs(leaving[node]) <= KCL_TOL_A, (node, leaving[node], scale[node])
    # everything the supplies deliver comes back through gnd
    assert abs(sum(sol.supply_current[0]) + leaving[GND]) <= KCL_TOL_A
    assert float(sol.kcl_residual[0]) <= KCL_TOL_A
    return sol


# ------------------------------------------------------------------ strategies
def _e12(lo_exp: int, hi_exp: int):
    return st.builds(
        lambda m, d: m * 10.0**d, st.sampled_from(E12), st.integers(lo_exp, hi_exp)
    )


@st.composite
def devices_st(draw, name: str) -> Device:
    return _device(
        name,
        is_a=10.0 ** draw(st.floats(-17.0, -12.0)),
        beta=draw(st.floats(20.0, 600.0)),
        va=draw(st.one_of(st.just(math.inf), st.floats(10.0, 300.0))),
        beta_r=draw(st.floats(0.5, 10.0)),
        n=draw(st.floats(1.0, 1.3)),
    )


@st.composite
def single_stage_st(draw) -> Board:
    polarity = draw(st.sampled_from(["npn", "pnp"]))
    vcc = draw(st.floats(3.0, 24.0))
    rs = [draw(_e12(2, 5)) for _ in range(4)]
    vee = draw(st.one_of(st.none(), st.floats(-15.0, -3.0))) if polarity == "npn" else None
    temperature = draw(st.floats(233.15, 398.15))
    return single_stage(polarity, vcc, *rs, draw(devices_st("d1")), temperature, vee)


@st.composite
def two_stage_st(draw) -> Board:
    second = draw(st.sampled_from(["pnp", "npn"]))
    vcc = draw(st.floats(3.0, 24.0))
    rs = tuple(draw(_e12(2, 5)) for _ in range(6))
    return two_stage(second, vcc, rs, draw(devices_st("d1")), draw(devices_st("d2")))


GENERIC = _device("g", 8e-15, 180.0, 80.0, 1.0, 1.0)


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(board=single_stage_st(), probe_on_base=st.booleans())
@example(board=single_stage("npn", 5.0, 10e3, 10e3, 100e3, 470.0, GENERIC), probe_on_base=False)
@example(board=single_stage("pnp", 5.0, 10e3, 10e3, 100e3, 470.0, GENERIC), probe_on_base=True)
@example(board=single_stage("npn", 12.0, 1e6, 1e3, 4.7e3, 1e3, GENERIC), probe_on_base=False)
@example(board=single_stage("npn", 24.0, 100.0, 1e6, 100.0, 100.0, GENERIC), probe_on_base=True)
def test_kcl_single_stage(board: Board, probe_on_base: bool) -> None:
    # Reference: Kirchhoff's current law at every node, to 1e-12 A (see check_kcl).
    # The explicit examples are a saturated npn and pnp (RC far too large), a cut-off
    # npn (base divider near gnd) and one with 240 mA in the emitter.
    check_kcl(board, probe=("b", GND) if probe_on_base else None)


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(board=two_stage_st())
@example(board=two_stage("pnp", 15.0, (100e3, 12e3, 10e3, 1e3, 3.3e3, 1e3), GENERIC, GENERIC))
@example(board=two_stage("npn", 9.0, (10e3, 10e3, 100e3, 220.0, 1e3, 1.0), GENERIC, GENERIC))
def test_kcl_two_stage(board: Board) -> None:
    # Reference: Kirchhoff's current law at every node, to 1e-12 A (see check_kcl).
    check_kcl(board)


KNOWN_REGIONS = {
    # (board, Q1's region by the contract's 0.4 V rule)
    "saturated-npn": (single_stage("npn", 5.0, 10e3, 10e3, 100e3, 470.0, GENERIC), "saturation"),
    "saturated-pnp": (single_stage("pnp", 5.0, 10e3, 10e3, 100e3, 470.0, GENERIC), "saturation"),
    "cutoff-npn": (single_stage("npn", 12.0, 1e6, 1e3, 4.7e3, 1e3, GENERIC), "cutoff"),
    "cutoff-pnp": (single_stage("pnp", 12.0, 1e3, 1e6, 4.7e3, 1e3, GENERIC), "cutoff"),
    "split-rail-npn": (
        single_stage("npn", 12.0, 47e3, 10e3, 4.7e3, 2.2e3, GENERIC, vee=-12.0), "forward-active"
    ),
}


@pytest.mark.parametrize("name", list(KNOWN_REGIONS))
def test_kcl_holds_in_every_region(name: str) -> None:
    # Reference: Kirchhoff's current law (to 1e-12 A) and the contract's region rule.
    board, region = KNOWN_REGIONS[name]
    sol = check_kcl(board)
    assert devices.REGIONS[int(sol.region[0, 0])] == region
    if "split-rail" in name:
        # a negative rail sinks current: the contract reports it as negative
        k = list(board.supplies).index("VEE")
        assert float(sol.supply_current[0, k]) < 0.0


# ------------------------------------------------------------------ 5. pnp mirror
def mirror(board: Board) -> Board:
    """The same board with npn <-> pnp and every supply negated."""
    flip = {"npn": "pnp", "pnp": "npn"}
    return dataclasses.replace(
        board,
        supplies={
            k: dataclasses.replace(s, volts=-s.volts) for k, s in board.supplies.items()
        },
        transistors={
            k: dataclasses.replace(q, polarity=flip[q.polarity])
            for k, q in board.transistors.items()
        },
    )


def _close(a: float | None, b: float | None, rel: float = 1e-12) -> bool:
    if a is None or b is None:
        return a is b
    return math.isclose(a, b, rel_tol=rel, abs_tol=1e-300)


MIRROR_BOARDS = ["preamp_ce.toml", "line_receiver_cb.toml", "two_stage_npn_pnp.toml"]


@pytest.mark.parametrize("sample", MIRROR_BOARDS)
def test_pnp_mirror_negates_voltages_and_currents(sample: str) -> None:
    # Reference: the contract, "a pnp is the same with every terminal voltage and
    # current negated"; mirroring every transistor and supply must negate every node
    # voltage and current and leave gm, rpi, ro, power, regions and small signal alone.
    board = load_board(SAMPLE_DATA / sample)
    a = solve(board).to_dict()
    b = solve(mirror(board)).to_dict()
    for node, volts in a["nodes"].items():
        assert _close(b["nodes"][node], -volts), node
    for ref, qa in a["transistors"].items():
        qb = b["transistors"][ref]
        assert qb["polarity"] != qa["polarity"]
        for key in ("ic", "ib", "ie", "vbe", "vce"):
            assert _close(qb[key], -qa[key]), (ref, key)
        for key in ("gm", "rpi", "ro", "power"):
            assert _close(qb[key], qa[key]), (ref, key)
        assert qb["region"] == qa["region"]
    for ref, sa in a["supplies"].items():
        assert _close(b["supplies"][ref]["current"], -sa["current"]), ref
    for ref, ra in a["resistors"].items():
        assert _close(b["resistors"][ref]["current"], -ra["current"]), ref
        assert _close(b["resistors"][ref]["power"], ra["power"]), ref
    for key in ("gain", "source_gain", "input_resistance", "output_resistance", "gain_phase_deg"):
        assert _close(b["small_signal"][key], a["small_signal"][key], rel=1e-9), key


@settings(max_examples=25, deadline=None, derandomize=True)
@given(board=st.one_of(single_stage_st(), two_stage_st()))
def test_pnp_mirror_on_random_boards(board: Board) -> None:
    # Reference: the contract's pnp rule (as above), on random boards in any region.
    sa = solve_batch(compile_board(board), nominal_parameters(compile_board(board), 1),
                     small_signal=False)
    mb = mirror(board)
    sb = solve_batch(compile_board(mb), nominal_parameters(compile_board(mb), 1),
                     small_signal=False)
    assert bool(sa.converged[0]) and bool(sb.converged[0])
    np.testing.assert_allclose(sb.node_v, -sa.node_v, rtol=1e-10, atol=1e-12)
    for name in ("ic", "ib", "ie", "supply_current"):
        np.testing.assert_allclose(getattr(sb, name), -getattr(sa, name), rtol=1e-9, atol=1e-15)
    for name in ("gm", "rpi", "ro"):
        np.testing.assert_allclose(getattr(sb, name), getattr(sa, name), rtol=1e-9)
    np.testing.assert_array_equal(sb.region, sa.region)
