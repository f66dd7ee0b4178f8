"""The project's two-fault sweep: boards with two injected faults that no single fault
explains, diagnosed with pairs.

    python tests/benchmarks/bench_two_faults.py [BOARDS]
    python -m tests.benchmarks two_faults

prints one JSON object: how many boards were drawn and kept, top-1 and top-3 (the true
pair first, or among the first three), the seconds per diagnosis, and each miss. Not a
unit test: a pair diagnosis takes seconds, and the sweep takes minutes.

The boards (invented) are the sample designs and the eight-part test board of
``bench_diagnosis``. Each case is a board as it might be built (parts drawn within
tolerance, ``tests/fit_support.draw_truth``) with two faults of mixed kinds on two
different parts, injected by the same means as the single-fault sweep of
``tests/test_diagnosis.py`` (an open as 100 GΩ, a short as a 20 mΩ bridge, a missing
capacitor as 1 fF, a decade slip, a transistor turned round), independent of the
hypotheses' own modelling, and read with the default uncertainties and seeded noise.

Kept are the cases the readings show as two faults: each fault moves some reading by
``VISIBLE_SIGMA`` standard uncertainties on its own, and the best single-fault
hypothesis has χ² above ``n + SINGLE_MARGIN·√(2n)`` for n readings (far outside the χ²
distribution of a hypothesis that explains them). Where one fault explains the
readings, it is the honest answer, and the case is counted apart (``explained_by_one``).
A pair counts as right when its two faults are the injected two, a capacitor's ``open``
and ``missing`` being one fault and a short of any part between the same two nodes the
same short.
"""

from __future__ import annotations

import json
import math
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE.parent) not in sys.path:  # tests/, for the sweep's helpers
    sys.path.insert(0, str(HERE.parent))

DESIGNS = ("line_receiver_cb", "preamp_ce", "two_stage_npn_pnp", "bench")
SINGLE_MARGIN = 5.0
DEFAULT_BOARDS = 32
MAX_DRAWS = 6


def _short_nodes(board, ref: str, kind: str) -> frozenset[str] | None:
    if kind != "short":
        return None
    part = board.resistors.get(ref) or board.capacitors.get(ref)
    return frozenset(part.nodes)


def _same_fault(board, injected: tuple[str, str], named: dict) -> bool:
    ref, kind = injected
    if named["ref"] == ref and (named["fault"] == kind or {kind, named["fault"]} == {
            "missing", "open"} and ref in board.capacitors):
        return True
    nodes = _short_nodes(board, ref, kind)
    return nodes is not None and nodes == _short_nodes(board, named["ref"], named["fault"])


def _is_pair(board, h, injected: list[tuple[str, str]]) -> bool:
    if h.n_faults != 2:
        return False
    a, b = h.faults
    return ((_same_fault(board, injected[0], a) and _same_fault(board, injected[1], b))
            or (_same_fault(board, injected[0], b) and _same_fault(board, injected[1], a)))


def _case(name: str, seed: int):
    """One drawn two-fault case: (board, plan, injected, truth, faulty, rng) or None when
    a fault is not visible on its own."""
    import test_diagnosis as sweep
    from fit_support import draw_truth

    board, plan = sweep._board(name)
    faults = sweep._all_faults(board)
    rng = np.random.default_rng([seed, 2])
    i, j = rng.choice(len(faults), size=2, replace=False)
    (ref1, kind1, f1), (ref2, kind2, f2) = faults[i], faults[j]
    if ref1 == ref2:
        return None
    truth = draw_truth(board, rng)
    clean = sweep._readings(truth.board, truth.temperature_k, plan, None)
    for ref, kind, factor in ((ref1, kind1, f1), (ref2, kind2, f2)):
        one = sweep._readings(sweep._inject(truth.board, ref, kind, factor),
                              truth.temperature_k, plan, None)
        shift = max(abs(a.value - b.value) / b.uncertainty for a, b in zip(clean, one))
        if not shift >= sweep.VISIBLE_SIGMA:
            return None
    faulty = sweep._inject(sweep._inject(truth.board, ref1, kind1, f1), ref2, kind2, f2)
    return board, plan, [(ref1, kind1), (ref2, kind2)], truth, faulty, rng


def run(n_boards: int = DEFAULT_BOARDS) -> dict[str, Any]:
    import test_diagnosis as sweep

    from reconcile.diagnosis.diagnose import diagnose

    kept, explained, drawn, seconds, misses = [], 0, 0, [], []
    seed = 0
    while len(kept) < n_boards and drawn < MAX_DRAWS * n_boards:
        name = DESIGNS[seed % len(DESIGNS)]
        case = _case(name, 5000 + seed)
        seed += 1
        if case is None:
            continue
        drawn += 1
        board, plan, injected, truth, faulty, rng = case
        readings = sweep._readings(faulty, truth.temperature_k, plan, rng)
        start = time.perf_counter()
        diag = diagnose(board, readings, max_faults=2)
        seconds.append(time.perf_counter() - start)
        n = diag.n_readings
        best_single = min(h.chi_square for h in diag.hypotheses if h.n_faults <= 1)
        if best_single <= n + SINGLE_MARGIN * math.sqrt(2 * n):
            explained += 1
            continue
        rank = next((k for k, h in enumerate(diag.hypotheses, 1)
                     if _is_pair(board, h, injected)), None)
        kept.append(rank)
        if rank != 1:
            misses.append({"board": name, "injected": [" ".join(f) for f in injected],
                           "rank": rank, "top": diag.top.label})
    k = len(kept)
    return {
        "boards_drawn": drawn,
        "explained_by_one": explained,
        "boards_kept": k,
        "top1": round(sum(r == 1 for r in kept) / k, 3) if k else None,
        "top3": round(sum(r is not None and r <= 3 for r in kept) / k, 3) if k else None,
        "targets": {"top1": 0.80, "top3": 0.95, "boards": 30},
        "seconds_per_diagnosis": {
            "median": round(float(np.median(seconds)), 2) if seconds else None,
            "max": round(max(seconds), 2) if seconds else None,
        },
        "misses": misses,
    }


if __name__ == "__main__":
    print(json.dumps(run(int(sys.argv[1]) if len(sys.argv) > 1 else DEFAULT_BOARDS), indent=2))
