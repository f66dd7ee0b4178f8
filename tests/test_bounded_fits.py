"""The hypothesis fits' one early stop (``bounded``, reconcile/diagnosis/fault_fit.py).

Outside reference: Bayes' theorem (posterior odds = prior odds × likelihood ratio,
common practice): a hypothesis stopped early is scored with the χ² it reached, an upper
bound of its minimum, so its probability can only be understated, and it is kept and
labelled, never dropped. The check that a bounded fit ends far above the best is a
self_consistency check of the rule against our own fits.
"""

from __future__ import annotations

import numpy as np
from benchmarks.bench_diagnosis import BENCH_PLAN, bench_board

from reconcile.diagnosis.diagnose import diagnose
from reconcile.diagnosis.fault_fit import BOUND_MARGIN, BOUNDED
from reconcile.inference.simulate import simulate_readings


def test_bounded_fits_are_kept_labelled_and_far_from_the_best_self_consistency():
    board = bench_board()
    readings = simulate_readings(board.with_resistor_ohms("RE", 100.0), BENCH_PLAN,
                                 rng=np.random.default_rng(8))
    diag = diagnose(board, readings)
    assert diag.top.label == "RE wrong-value"
    assert len(diag.hypotheses) == 21  # none dropped
    bounded = [h for h in diag.hypotheses if h.fit.status == BOUNDED]
    assert bounded
    for h in bounded:
        out = h.to_dict()
        assert out["status"] == "bounded" and out["converged"] is False
        assert "upper bound" in h.note
        assert h.chi_square > diag.top.chi_square + BOUND_MARGIN
        assert h.probability < 1e-20
