"""The reading catalogue: one list of the readings one could take on a board.

The independent reference is a catalogue listed by hand from the sample board file
``line_receiver_cb.toml`` (its nodes, parts and ``[signal]`` table read off the file),
following the rules in the module docstring of :mod:`reconcile.inference.catalogue`;
the DC-path rule is docs/formats.md §2.2. The other tests check the catalogue's
consumers against the catalogue filtered by each one's documented rule (self-consistency
of our own code), and that no module outside the catalogue builds its own list.
"""

from __future__ import annotations

import ast
from pathlib import Path

import numpy as np
import pytest
from fit_support import SAMPLE_DATA, draw_truth, sample_board

from reconcile.analysis.next_reading import (
    candidate_readings,
    fitted_response,
    low_band_frequencies,
)
from reconcile.capture.plan import dc_nodes as plan_dc_nodes
from reconcile.capture.plan import plan_readings
from reconcile.capture.simulated_bench import SimulatedBench
from reconcile.data.readings import Reading, readings_from_text, readings_to_csv
from reconcile.diagnosis.separating import _candidates as separating_candidates
from reconcile.inference.catalogue import (
    DC_BENCH,
    GUIDED_CAPTURE_BENCH,
    BenchNeed,
    catalogued_quantities,
    reading_key,
    readings_one_could_take,
)
from reconcile.inference.fitting import fit_board
from reconcile.inference.measure import MeasurementModel, Observation, observations_from
from reconcile.inference.simulate import full_plan
from reconcile.model.board_loader import board_from_text
from reconcile.model.quantities import REGISTRY, QuantityKind

SAMPLE_BOARDS = sorted(p.stem for p in SAMPLE_DATA.glob("*.toml"))
PACKAGE = Path(__file__).resolve().parent.parent / "reconcile"

N = BenchNeed
DMM = (N.DC_VOLTMETER,)
READBACK = (N.SUPPLY_READBACK,)
SERIES_AMMETER = (N.AMMETER_IN_SERIES,)
OHMS = (N.OHMMETER, N.PART_OUT_OF_CIRCUIT)
FARADS = (N.CAPACITANCE_METER, N.PART_OUT_OF_CIRCUIT)
AC = (N.GENERATOR, N.AC_VOLTMETER)

#: line_receiver_cb.toml, listed by hand from the file: nodes in order of first appearance
#: (vcc from the supply, then b, c, e from the resistors, in and out from the bleeders);
#: every one has a DC path (in and out through RB_IN and RB_OUT).
LINE_RECEIVER_BY_HAND = [
    ("voltage", "vcc", DMM), ("voltage", "b", DMM), ("voltage", "c", DMM),
    ("voltage", "e", DMM), ("voltage", "in", DMM), ("voltage", "out", DMM),
    ("current", "VCC", READBACK),
    ("current", "R1", SERIES_AMMETER), ("current", "R2", SERIES_AMMETER),
    ("current", "RC", SERIES_AMMETER), ("current", "RE", SERIES_AMMETER),
    ("current", "RB_IN", SERIES_AMMETER), ("current", "RB_OUT", SERIES_AMMETER),
    ("gain", "", AC),
    ("input_resistance", "", (*AC, N.SERIES_RESISTOR)),
    ("output_resistance", "", (*AC, N.SWITCHED_LOAD)),
    ("resistance", "R1", OHMS), ("resistance", "R2", OHMS), ("resistance", "RC", OHMS),
    ("resistance", "RE", OHMS), ("resistance", "RB_IN", OHMS), ("resistance", "RB_OUT", OHMS),
    ("capacitance", "C_B", FARADS), ("capacitance", "C_IN", FARADS),
    ("capacitance", "C_OUT", FARADS),
]


def _line_receiver_text() -> str:
    return (SAMPLE_DATA / "line_receiver_cb.toml").read_text(encoding="utf-8")


# ----------------------------------------------------------------- against the hand list
def test_line_receiver_catalogue_equals_the_hand_listed_one() -> None:
    board = sample_board("line_receiver_cb")
    got = [(e.quantity, e.at, e.needs) for e in readings_one_could_take(board)]
    assert got == LINE_RECEIVER_BY_HAND


def test_signal_node_without_dc_path_has_no_voltage_entry() -> None:
    # docs/formats.md §2.2: a [signal] node reached only through capacitors has no DC
    # voltage. Without its bleeder, "in" meets only C_IN; its RB_IN entries go too.
    text = _line_receiver_text().replace(
        '[resistors.RB_IN]               # bleeds the input coupling capacitor to 0 V\n'
        'nodes = ["in", "gnd"]\nohms = "100k"\n', "")
    board = board_from_text(text, "no-bleed.toml")
    want = [(q, at) for q, at, _ in LINE_RECEIVER_BY_HAND
            if (q, at) != ("voltage", "in") and at != "RB_IN"]
    assert [e.place for e in readings_one_could_take(board)] == want


def test_board_without_signal_table_has_no_small_signal_entries() -> None:
    text = _line_receiver_text()
    text = text[: text.index("[signal]")] + text[text.index("[bench]"):]
    text = text.replace('gain = { value = 10, tolerance = "5%" }\n', "").replace(
        'input_resistance = { value = "75", tolerance = "5%" }\n', "")
    board = board_from_text(text, "no-signal.toml")
    want = [(q, at) for q, at, _ in LINE_RECEIVER_BY_HAND
            if REGISTRY[q].kind is not QuantityKind.SMALL_SIGNAL]
    assert [e.place for e in readings_one_could_take(board)] == want


def test_reading_key_spellings() -> None:
    # docs/formats.md §3: a voltage "a" means V(a) − V(gnd), so "a/gnd" is the same reading.
    assert reading_key("voltage", "b/gnd") == ("voltage", "b", None)
    assert reading_key("voltage", " b / gnd ") == ("voltage", "b", None)
    assert reading_key("voltage", "c/e") == ("voltage", "c/e", None)
    assert reading_key("current", " RC ") == ("current", "RC", None)
    assert reading_key("gain", "") == ("gain", "", None)


def test_reading_key_carries_the_test_frequency() -> None:
    # docs/formats.md §6.2 (frequency column): blank means [signal] frequency, so a blank
    # cell and the board's own frequency are one reading; any other frequency is another.
    assert reading_key("gain", "", None, signal_frequency=1e4) == ("gain", "", None)
    assert reading_key("gain", "", 1e4, signal_frequency=1e4) == ("gain", "", None)
    assert reading_key("gain", "", 50.0, signal_frequency=1e4) == ("gain", "", 50.0)
    assert reading_key("input_resistance", "", 50, signal_frequency=1e4)[2] == 50.0
    assert reading_key("gain", "", 50.0) == ("gain", "", 50.0)
    assert reading_key("voltage", "b", 50.0) == ("voltage", "b", None)  # DC: no frequency


def test_a_gain_at_another_frequency_does_not_count_as_the_gain_taken() -> None:
    board = sample_board("line_receiver_cb")  # [signal] frequency 10 kHz
    f0 = board.signal.frequency
    keys = [e.key for e in readings_one_could_take(board, taken=[("gain", "", 50.0)])]
    assert ("gain", "", None) in keys
    keys = [e.key for e in readings_one_could_take(board, taken=[("gain", "", f0)])]
    assert ("gain", "", None) not in keys
    asked = readings_one_could_take(board, frequencies=[50.0, f0], taken=[("gain", "", None)])
    at_50 = [e.key for e in asked if e.frequency == 50.0]
    assert at_50 == [("gain", "", 50.0), ("input_resistance", "", 50.0),
                     ("output_resistance", "", 50.0)]
    assert ("gain", "", None) not in [e.key for e in asked]
    assert [e.label for e in asked if e.frequency == 50.0][0].endswith(" at 50 Hz")
    done = readings_one_could_take(board, frequencies=[50.0], taken=[("gain", "", 50)])
    assert ("gain", "", 50.0) not in [e.key for e in done]


def test_taken_and_bench_filters() -> None:
    board = sample_board("line_receiver_cb")
    every = readings_one_could_take(board)
    rest = readings_one_could_take(board, taken=[("voltage", "b/gnd"), ("gain", "")])
    assert [e.place for e in rest] == [
        e.place for e in every if e.place not in {("voltage", "b"), ("gain", "")}]
    on_dc = readings_one_could_take(board, bench=DC_BENCH)
    assert [e.place for e in on_dc] == [("voltage", n) for n in
                                      ("vcc", "b", "c", "e", "in", "out")] + [("current", "VCC")]
    assert all(e.possible_on(DC_BENCH) for e in on_dc)
    assert not any(e.possible_on(DC_BENCH) for e in every if e not in on_dc)


# ------------------------------------------------------------- on every sample board
@pytest.mark.parametrize("name", SAMPLE_BOARDS)
def test_sample_board_catalogue_follows_the_registry(name: str) -> None:
    board = sample_board(name)
    entries = readings_one_could_take(board)
    assert entries == readings_one_could_take(board)  # deterministic
    keys = [e.key for e in entries]
    assert len(keys) == len(set(keys))
    order = list(catalogued_quantities())
    assert [order.index(e.quantity) for e in entries] == sorted(
        order.index(e.quantity) for e in entries)
    for e in entries:
        q = REGISTRY[e.quantity]
        assert q.readable and q.predicted
        if q.places:  # the registry says which board tables "at" may name
            assert any(e.at in _place_names(board, p) for p in q.places), e
        else:
            assert e.at == ""
        assert e.label and e.needs


def _place_names(board, table: str) -> list[str]:
    return board.nodes if table == "nodes" else list(getattr(board, table))


@pytest.mark.parametrize("name", SAMPLE_BOARDS)
def test_every_entry_is_a_reading_the_loader_accepts_and_the_model_predicts(name: str) -> None:
    board = sample_board(name)
    entries = readings_one_could_take(board)
    model = MeasurementModel(board, [Observation(e.quantity, e.at, 0.0, 1.0) for e in entries])
    predicted = model.predict(model.space.prior_mean[None, :])[0]
    assert np.all(np.isfinite(predicted))
    text = readings_to_csv(
        Reading.from_si(e.quantity, e.at, abs(float(v)) or 1.0, 1.0)
        for e, v in zip(entries, predicted, strict=True))
    loaded = readings_from_text(text, f"{name}.csv", board=board)
    assert [(r.quantity, r.at) for r in loaded] == [e.place for e in entries]


def test_every_readable_predicted_quantity_has_a_rule() -> None:
    # A quantity added to the registry without a catalogue rule fails here (and the
    # catalogue then raises KeyError rather than silently leaving it out).
    want = [q.name for q in REGISTRY.values() if q.readable and q.predicted]
    assert list(catalogued_quantities()) == want
    board = sample_board("line_receiver_cb")
    assert {e.quantity for e in readings_one_could_take(board)} == set(want)


# --------------------------------------------------- the consumers agree (self-consistency)
def test_self_consistency_next_reading_candidates_are_the_catalogue_not_yet_taken() -> None:
    board = sample_board("line_receiver_cb")
    rng = np.random.default_rng(11)
    truth = draw_truth(board, rng)
    plan = full_plan(board)
    # one reading spelt "b/gnd": still the node voltage at b
    plan = [("voltage", "b/gnd") if p == ("voltage", "b") else p for p in plan]
    readings = truth.read(plan, rng)
    fit = fit_board(board, readings)
    cands = candidate_readings(fit, frequencies=())
    assert cands == [e.key for e in readings_one_could_take(board)
                     if e.key not in {reading_key(q, at) for q, at in plan}]
    assert ("voltage", "b", None) not in cands
    assert ("gain", "", None) not in cands
    # by default, the gain at each low-band test frequency as well (and only the gain)
    lows = low_band_frequencies(fitted_response(fit))
    assert len(lows) >= 2
    assert candidate_readings(fit) == cands + [("gain", "", f) for f in lows]


def test_self_consistency_separating_candidates_are_the_catalogue_not_yet_taken() -> None:
    board = sample_board("preamp_ce")
    readings = [Reading("voltage", "c/gnd", 7.0, "V", 0.01), Reading("current", "VCC", 1e-3,
                                                                      "A", 1e-5)]
    obs = observations_from(readings)
    assert separating_candidates(board, obs) == [
        e.key for e in readings_one_could_take(board)
        if e.place not in {("voltage", "c"), ("current", "VCC")}]


def _capture_cases() -> list[tuple[str, bool, bool]]:
    """Every sample board with every small-signal choice its [signal] table allows."""
    cases = []
    for name in SAMPLE_BOARDS:
        signal = sample_board(name).signal
        choices = [(False, True), (True, False), (True, True)] if (
            signal.input and signal.output) else []
        cases += [(name, False, False)] + [(name, g, ir) for g, ir in choices]
    return cases


@pytest.mark.parametrize("name,gain,input_resistance", _capture_cases())
def test_self_consistency_capture_plan_is_the_catalogue_on_the_capture_bench(
    name: str, gain: bool, input_resistance: bool
) -> None:
    board = sample_board(name)
    asked = {q for q, on in (("gain", gain), ("input_resistance", input_resistance)) if on}
    want = [e.place for e in readings_one_could_take(board, bench=GUIDED_CAPTURE_BENCH)
            if e.kind is not QuantityKind.SMALL_SIGNAL or e.quantity in asked]
    plan = plan_readings(board, gain=gain, input_resistance=input_resistance)
    assert [p.place for p in plan] == want
    assert plan_dc_nodes(board) == [at for q, at in want if q == "voltage"]


@pytest.mark.parametrize("name", SAMPLE_BOARDS)
def test_self_consistency_simulated_readings_plan_is_the_capture_plan(name: str) -> None:
    board = sample_board(name)
    has_signal = bool(board.signal.input and board.signal.output)
    capture = plan_readings(board, gain=has_signal, input_resistance=has_signal)
    assert full_plan(board) == [p.place for p in capture]
    assert full_plan(board, small_signal=False) == [
        p.place for p in plan_readings(board)]


def test_self_consistency_simulated_bench_primes_the_dc_bench_readings() -> None:
    board = sample_board("sensor_preamp")
    bench = SimulatedBench(board, np.random.default_rng(0), noise=False)
    bench._prime()
    entries = readings_one_could_take(board, bench=DC_BENCH)
    assert sorted(bench._dc_cache) == sorted((e.at, "gnd") for e in entries
                                             if e.quantity == "voltage")
    assert list(bench._currents) == [e.at for e in entries if e.quantity == "current"]


# ------------------------------------------------------------------ no second list
def _pair_builders(tree: ast.AST) -> list[int]:
    """Lines where a loop or comprehension pairs a literal quantity name with its loop
    variable: ``[("voltage", n) for n in ...]``, ``Observation("current", ref, ...)`` in a
    ``for ref in ...`` body, ``cands.append(("resistance", ref))``."""
    quantity_names = set(catalogued_quantities())
    found = []

    def targets(node: ast.AST) -> set[str]:
        return {n.id for n in ast.walk(node) if isinstance(n, ast.Name)}

    def pairs_in(node: ast.AST, loop_vars: set[str]) -> list[int]:
        hits = []
        for sub in ast.walk(node):
            # a (quantity, at) pair, or a call that makes a reading of one; a longer
            # tuple is a value tied to it (a fault's own part reading, faults.py)
            if isinstance(sub, ast.Tuple) and len(sub.elts) == 2:
                items = sub.elts
            elif isinstance(sub, ast.Call) and len(sub.args) >= 2:
                items = sub.args
            else:
                continue
            first, second = items[0], items[1]
            if (isinstance(first, ast.Constant) and first.value in quantity_names
                    and isinstance(second, ast.Name) and second.id in loop_vars):
                hits.append(sub.lineno)
        return hits

    for node in ast.walk(tree):
        if isinstance(node, (ast.ListComp, ast.SetComp, ast.GeneratorExp, ast.DictComp)):
            loop_vars = set().union(*(targets(g.target) for g in node.generators))
            element = node.elt if not isinstance(node, ast.DictComp) else node.key
            found += pairs_in(element, loop_vars)
            if isinstance(node, ast.DictComp):
                found += pairs_in(node.value, loop_vars)
        elif isinstance(node, (ast.For, ast.AsyncFor)):
            loop_vars = targets(node.target)
            for stmt in node.body:
                found += pairs_in(stmt, loop_vars)
    return found


def test_no_module_outside_the_catalogue_builds_a_list_of_readings() -> None:
    offenders = []
    for path in sorted(PACKAGE.rglob("*.py")):
        if path.name == "catalogue.py" and path.parent.name == "inference":
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
        offenders += [f"{path.relative_to(PACKAGE.parent)}:{line}"
                      for line in _pair_builders(tree)]
    assert offenders == [], "build reading lists from readings_one_could_take: " + ", ".join(
        offenders)


def test_the_scan_finds_the_old_kind_of_list() -> None:
    # The scan above must catch the forms the old parallel lists had.
    old = (
        'cands = [("voltage", n) for n in board.nodes if n not in skip]\n'
        'obs = [Observation("current", ref, 0.0, 1.0) for ref in board.supplies]\n'
        'for ref in board.capacitors:\n    out.append(("capacitance", ref))\n'
        'ok = [Observation(q, at, 0.0, 1.0) for q, at in plan]\n'
        'also_ok = [("resistance", ref, 0.0) for ref in board.resistors]\n'
    )
    assert sorted(_pair_builders(ast.parse(old))) == [1, 2, 4]
