"""Missing capacitors told apart with one low-band gain reading added to the usual ones.

The fault sweep of ``test_diagnosis.py`` (its boards, truths, fault injection and what
counts as right), restricted to missing capacitors: every capacitor of every board of
the sweep, one truth each (seeds of their own, not the main sweep's); the five that
move the usual readings least (the hard ones: where the usual readings leave most to
the low band) are read at the usual plan plus the gain at the drawn board's low corner
(root-found by the engine) and diagnosed. Kept to five diagnoses for the suite's time.
When it was written, the usual readings alone already put all eleven faults first
(three truths each, 33 of 33): the low-band gain is not what tells a missing capacitor
here; this holds that it does not confuse the diagnosis either. The readings are simulated by our own engine and diagnosed with it, so
this is a self-consistency check; what it relies on from outside is Bayes' theorem
(common practice) and the rule that a missing part is told by the readings it moves.
"""

from __future__ import annotations

import numpy as np
import pytest
from fit_support import draw_truth
from test_diagnosis import BOARDS, _board, _inject, _rank, _readings

from reconcile.diagnosis.diagnose import diagnose
from reconcile.engine.solution import solve

SEED = 4242
TOP1_AT_LEAST = 0.95
CASES = 5
"""Diagnoses run (the suite's time: about 1.5 s of CPU each)."""


def _low_band_gain(board) -> tuple[str, str, float]:
    """The gain at the drawn board's low corner, rounded as a generator is set."""
    low = float(np.ravel(solve(board).corners.low_corner)[0])
    return ("gain", "", float(f"{low:.2g}"))


def _shift(board, truth, faulty, plan) -> float:
    """How far the fault moves the usual readings, in their standard uncertainties."""
    clean = _readings(truth.board, truth.temperature_k, plan, None)
    broken = _readings(faulty, truth.temperature_k, plan, None)
    return max(abs(a.value - b.value) / b.uncertainty for a, b in zip(clean, broken,
                                                                      strict=True))


def _hardest_cases() -> list[tuple]:
    """Every missing capacitor of the sweep's boards, one truth each, the
    :data:`CASES` that the usual readings show least first (where a low-band gain has
    most to add; a missing output capacitor silences the output at every frequency)."""
    cases = []
    for b, name in enumerate(BOARDS):
        board, plan = _board(name)
        for c, ref in enumerate(board.capacitors):
            rng = np.random.default_rng([SEED, b, c])
            truth = draw_truth(board, rng)
            faulty = _inject(truth.board, ref, "missing")
            cases.append((_shift(board, truth, faulty, plan), name, ref, truth, faulty, rng))
    assert len(cases) == 11  # 3 + 3 + 3 + 2 capacitors
    cases.sort(key=lambda case: case[0])
    return cases[:CASES]


@pytest.mark.slow  # five diagnoses, about 1.5 s of CPU each
def test_missing_capacitors_top1_with_a_low_band_gain_self_consistency() -> None:
    ranks = []
    for _shift_sigma, name, ref, truth, faulty, rng in _hardest_cases():
        board, plan = _board(name)
        readings = _readings(faulty, truth.temperature_k, plan + [_low_band_gain(board)], rng)
        diag = diagnose(board, readings)
        ranks.append((name, ref, _rank(diag, ref, "missing"), diag.top.label))
    top1 = sum(r[2] == 1 for r in ranks) / len(ranks)
    assert top1 >= TOP1_AT_LEAST, [r for r in ranks if r[2] != 1]
