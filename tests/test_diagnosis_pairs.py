"""Tests for two-fault diagnosis (``reconcile.diagnosis.pairs`` and ``diagnose``'s
``max_faults``).

Outside references: Bayes' theorem with independent faults (the prior odds of two
faults against none are the product of each one's odds, common practice for
independent events); the contract's JSON shape (``docs/formats.md`` §6); common
practice for bench faults. Truth is drawn within tolerance (``tests/fit_support``) and
the faults injected by means independent of the hypotheses' own modelling
(``test_diagnosis._inject``). The accuracy sweep is in ``test_diagnosis_sweep.py``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from fit_support import draw_truth, sample_board
from test_diagnosis import _inject, _readings

from reconcile.diagnosis.diagnose import diagnose
from reconcile.diagnosis.faults import single_faults
from reconcile.diagnosis.pairs import combine, pair_candidates
from reconcile.diagnosis.scoring import hypothesis_weight
from reconcile.diagnosis.weights import DEFAULT_FAULT_WEIGHTS
from reconcile.errors import InputError
from reconcile.inference.simulate import full_plan
from reconcile.jsonout import dumps


def _two_fault_case(seed: int = 41):
    board = sample_board("line_receiver_cb")
    rng = np.random.default_rng(seed)
    truth = draw_truth(board, rng)
    faulty = _inject(_inject(truth.board, "RC", "wrong-value", 2.2), "C_B", "missing")
    return board, _readings(faulty, truth.temperature_k, full_plan(board), rng)


def test_pair_is_searched_by_default_when_no_single_fault_explains() -> None:
    """RC 2.2x its value and C_B missing: the default (K = 2, since no single fault
    is consistent) finds the pair, consistent, with its fitted value near the truth."""
    board, readings = _two_fault_case()
    diag = diagnose(board, readings)
    assert diag.max_faults == 2
    assert diag.explained and diag.top.consistent
    assert diag.by_label("C_B missing + RC wrong-value") is diag.top
    rc = next(f for f in diag.top.faults if f["ref"] == "RC")
    assert rc["value"] == pytest.approx(2.2 * board.resistors["RC"].ohms, rel=0.1)
    assert diag.summary.startswith("no single fault explains the readings; most likely")
    assert diag.pair_search is not None and diag.pair_search.fitted >= 1
    assert diag.pair_search.fitted <= diag.pair_search.candidates


def test_max_faults_one_keeps_single_faults() -> None:
    board, readings = _two_fault_case()
    diag = diagnose(board, readings, max_faults=1)
    assert diag.max_faults == 1 and diag.pair_search is None
    assert all(h.n_faults <= 1 for h in diag.hypotheses)


@pytest.mark.parametrize("bad", [0, 3, True, 1.5])
def test_bad_max_faults_is_an_input_error(bad) -> None:
    board, readings = _two_fault_case()
    with pytest.raises(InputError, match="--max-faults.*max faults must be 1 or 2"):
        diagnose(board, readings, max_faults=bad)


def test_pair_json_follows_the_contract() -> None:
    """docs/formats.md §6: ``faults`` lists each fault; single faults keep the flat
    keys; ``none`` has ``faults: []``; every hypothesis has ``testable``."""
    board, readings = _two_fault_case()
    out = diagnose(board, readings).to_dict()
    for h in out["hypotheses"]:
        assert isinstance(h["testable"], bool)
        assert all(set(f) == {"ref", "fault", "value"} for f in h["faults"])
        if h["fault"] == "none":
            assert h["faults"] == []
        elif h["fault"] == "pair":
            assert len(h["faults"]) == 2 and h["ref"] is None and h["value"] is None
        else:
            assert h["faults"] == [{"ref": h["ref"], "fault": h["fault"], "value": h["value"]}]
    top = out["hypotheses"][0]
    assert {(f["ref"], f["fault"]) for f in top["faults"]} == {
        ("RC", "wrong-value"), ("C_B", "missing")}
    assert out["max_faults"] == 2 and out["pair_search"]["rule"]
    assert dumps(out).startswith('{"hypotheses": [')


def test_pair_prior_weight_is_the_product_of_odds() -> None:
    """Independent faults: P(X and Y)/P(none) = (w_X/w_none)(w_Y/w_none) (Bayes with
    independent events, common practice)."""
    board = sample_board("line_receiver_cb")
    singles = single_faults(board)
    by = {(f.ref, f.kind): f for f in singles}
    pair = combine(by[("RC", "wrong-value")], by[("C_B", "missing")], board, {})
    w = DEFAULT_FAULT_WEIGHTS
    want = w["none"] * (w["wrong-value"] / w["none"]) * ((w["missing"] + w["open"]) / w["none"])
    assert hypothesis_weight(pair, w) == pytest.approx(want)
    assert pair.label == "RC wrong-value + C_B missing"
    assert set(pair.fixed) == {"C_B"} and {k for k, _ in pair.widened} == {"RC"}


def test_pair_candidates_are_two_different_parts() -> None:
    board = sample_board("line_receiver_cb")
    singles = single_faults(board)
    pairs = pair_candidates(board, singles)
    assert all(singles[i].ref != singles[j].ref for i, j in pairs)
    assert all("none" not in (singles[i].kind, singles[j].kind) for i, j in pairs)
    n = len(singles) - 1
    per_part = [sum(1 for f in singles if f.ref == ref) for ref in
                (*board.resistors, *board.capacitors, *board.transistors)]
    same_part = sum(k * (k - 1) // 2 for k in per_part)
    assert len(pairs) <= math.comb(n, 2) - same_part
    assert len(pairs) >= math.comb(n, 2) - same_part - 10  # a few same-node shorts at most


def test_invisible_fault_is_not_testable() -> None:
    """A fault no reading sees is not testable; the visible fault is."""
    board = sample_board("line_receiver_cb")
    rng = np.random.default_rng(51)
    truth = draw_truth(board, rng)
    faulty = _inject(truth.board, "RC", "wrong-value", 10.0)
    diag = diagnose(board, _readings(faulty, truth.temperature_k, full_plan(board), rng))
    assert diag.top.label == "RC wrong-value" and diag.top.testable and diag.decisive
    clean = diagnose(board, _readings(truth.board, truth.temperature_k, full_plan(board), rng))
    assert not clean.hypothesis("RB_IN", "open").testable
    assert not clean.decisive or clean.top.fault == "none"
