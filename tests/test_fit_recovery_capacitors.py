"""Recovery of the capacitors that set a board's low corner from gain readings in three
bands, plus the DC readings of a capture (a self-consistency check of the engine: the
truths are read and fitted by the same model).

For two invented sample boards, "true" boards are drawn as in ``test_fit_recovery.py``
(resistors, supplies within tolerance; devices from their prior). The capacitor that
sets the low corner (at least half of it by the short-circuit time-constant shares of
``solve --sweep``, the usual hand estimate: Sedra & Smith, "Microelectronic Circuits",
from memory) is drawn inside its tolerance in half of the boards and outside it (1.25 to
2 times the tolerance away, either side) in the other half; the other capacitors stay
within tolerance. Each truth is read at the capture's DC places, and its gain at half the
nominal low corner, at ``[signal] frequency`` and at 1 MHz (the sample devices give no
ft or c_mu, so the high band is flat), with seeded Gaussian noise of each reading's
default uncertainty, then fitted.

Check: the fitted value lies within 2 reported standard errors of the truth in at least
90 % of all boards (the issue's requirement). 24 boards per sample board keep it lean;
the margin is small (seeds tried: 0.917 to 0.938 covered at 24 per board, 0.90 to 0.917
at 30), so a drop here is a real loss of coverage, not noise to reseed away.
Where the margin goes: with truths inside the tolerance, C_IN of the line receiver is
covered as a Gaussian posterior should be (over 60-board runs, sd of (fit − truth)/stderr
0.95 to 1.05, within 2σ in 0.95 to 0.97); a truth outside the prior is pulled towards
the drawing by it (about 0.18σ per 10 % off, noise-free), as a prior must, which costs
the outside half some coverage. The sd of 1.3 to 1.4 seen on this test's 12 inside
boards is the scatter of a 12-sample sd (about ±0.2), not a stderr too small.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from fit_support import draw_truth, sample_board

from reconcile.engine import compile_board, nominal_parameters, solve_batch
from reconcile.engine.sweep import sweep
from reconcile.inference.fitting import fit_board
from reconcile.inference.simulate import full_plan

pytestmark = pytest.mark.slow  # 48 fits, about 6 s of CPU

BOARDS = ("line_receiver_cb", "two_stage_npn_pnp")
BOARDS_PER_CASE = 24
SEED = 20261203
SHAPING_SHARE = 0.5
HIGH_BAND_HZ = 1e6


def _corner_capacitors(board) -> tuple[float, set[str]]:
    circuit = compile_board(board)
    result = sweep(solve_batch(circuit, nominal_parameters(circuit)).linear,
                   np.array([10.0, 1e3])).to_dict()
    shaping = {ref for ref, s in result["low_corner_shares"].items()
               if s["share"] >= SHAPING_SHARE}
    return float(result["low_corner"]), shaping


def _truth(board, shaping: set[str], outside: bool, rng: np.random.Generator):
    truth = draw_truth(board, rng)
    built = truth.board
    for ref, cap in board.capacitors.items():
        if outside and ref in shaping:
            off = rng.uniform(1.25, 2.0) * cap.tolerance * rng.choice([-1.0, 1.0])
        else:
            off = rng.uniform(-1.0, 1.0) * cap.tolerance
        built = built.replace_part(dataclasses.replace(built.capacitors[ref],
                                                       farads=cap.farads * (1.0 + off)))
    return dataclasses.replace(truth, board=built)


def _covered(name: str, rng: np.random.Generator) -> list[bool]:
    board = sample_board(name)
    low_corner, shaping = _corner_capacitors(board)
    assert shaping, f"{name}: no capacitor sets the low corner"
    plan = full_plan(board) + [("gain", "", low_corner / 2.0), ("gain", "", HIGH_BAND_HZ)]
    out = []
    for i in range(BOARDS_PER_CASE):
        truth = _truth(board, shaping, outside=i % 2 == 1, rng=rng)
        fit = fit_board(board, truth.read(plan, rng))
        for ref in sorted(shaping):
            est = fit.parameters[ref]
            assert est.informed_by == "readings"
            out.append(abs(est.value - truth.board.capacitors[ref].farads) <= 2.0 * est.stderr)
    return out


def test_self_consistency_corner_capacitors_recovered_from_three_band_gains() -> None:
    rng = np.random.default_rng(SEED)
    covered = [ok for name in BOARDS for ok in _covered(name, rng)]
    assert len(covered) == len(BOARDS) * BOARDS_PER_CASE
    assert np.mean(covered) >= 0.90, f"covered {np.mean(covered):.3f}"
