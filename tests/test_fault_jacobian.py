"""The hypothesis fits' Jacobian (diagnosis/fault_fit.py) against high-precision references.

Outside reference: mpmath (arbitrary-precision arithmetic). Every reading of the
eight-part benchmark board, DC and small-signal, is predicted again at 34 significant
digits under each hypothesis, through :class:`tests.test_measurement_jacobian.Reference`
(Kirchhoff's current law and the contract's device equations solved by Newton's
iteration in mpmath, the voltmeter attached as the contract says; the small-signal
network built and solved there in mpmath): the hypothesis is applied there as its own
definition says (docs/formats.md, diagnosis faults; an open resistor held at 1 TΩ, a
short at 10 mΩ, a shorted capacitor's 100 S across it, a missing capacitor's 0 F), and
every row of the batched Jacobian is compared with a central difference of step 1e-12
to 1e-6 of that reading's largest derivative. The hypotheses' own parameter spaces are
covered: a held part has a zero column, a wrong value's widened part its resistor
column, and a reading the hypothesis decides (the open resistor's resistance) a zero
row.
"""

from __future__ import annotations

import mpmath as mp
import numpy as np
import pytest
from benchmarks.bench_diagnosis import BENCH_PLAN, bench_board

from reconcile.diagnosis.fault_fit import _Group
from reconcile.diagnosis.faults import single_faults
from reconcile.engine import compile_board
from reconcile.inference.measure import observations_from
from reconcile.inference.priors import build_space
from reconcile.inference.simulate import simulate_readings
from tests.test_measurement_jacobian import REL_TOL, Reference

LABELS = ("none", "RE open", "RC short", "R2 wrong-value", "CE short", "C_OUT missing")


class FaultReference(Reference):
    """:class:`Reference` with one hypothesis applied: its held resistors at their
    fault values, a shorted capacitor's conductance across it."""

    def __init__(self, group: _Group, row: int, x: np.ndarray, v0: np.ndarray) -> None:
        super().__init__(group.model, x)
        self.v0 = v0
        fault = group.faults[row]
        self.held = {}
        for name, col, value in fault.overrides:
            circuit = group.model.circuit
            refs = {"resistor_ohms": circuit.resistor_refs,
                    "capacitor_farads": circuit.capacitor_refs}.get(name)
            if refs is not None and refs[col] in group.space.keys:
                self.held[group.space.index(refs[col])] = value
            for mpb in self.boards:
                mpb.vals[name][col] = mp.mpf(value)

    def external(self, xm):
        out = super().external(xm)
        for j, value in self.held.items():
            out[j] = mp.mpf(value)
        return out


def _group():
    board = bench_board()
    readings = simulate_readings(board.with_resistor_ohms("RE", 100.0), BENCH_PLAN,
                                 rng=np.random.default_rng(8))
    readings += simulate_readings(board, [("resistance", "RE")])
    space = build_space(compile_board(board))
    faults = [f for f in single_faults(board) if f.label in LABELS]
    return _Group(board, faults, observations_from(readings), space)


@pytest.mark.slow
def test_hypothesis_jacobian_matches_mpmath():
    """mpmath reference: every row (DC and small-signal) of every hypothesis, at a
    random point of each hypothesis' own space."""
    group = _group()
    assert sorted(f.label for f in group.faults) == sorted(LABELS)
    assert group.has_signal  # gain, input and output resistance are read
    rng = np.random.default_rng(5)
    owner = np.arange(len(group.faults))
    x = np.clip(group.mu + 0.5 * group.sd * rng.standard_normal(group.mu.shape),
                group.lower, group.upper)
    f0, _ = group.evaluate(x, owner, record=True, small_signal=False)
    jac = group.jacobian(x, f0, owner)
    alone = group._solve(x, owner, small_signal=False).state.v
    g = group.model.group
    for i, fault in enumerate(group.faults):
        ref = FaultReference(group, i, x[i], alone[i * g:(i + 1) * g]).columns(x[i])
        ref[:, ~group.free[i]] = 0.0
        for k, _ in group.reading_fix[i]:
            ref[k] = 0.0
            assert not jac[i, k].any(), fault.label  # the hypothesis decides it
        for k in range(ref.shape[0]):
            scale = np.max(np.abs(ref[k]))
            err = np.max(np.abs(jac[i, k] - ref[k]))
            assert err <= REL_TOL * max(scale, 1e-300), (fault.label, k, err / scale)
        held = [group.space.index(key) for key in fault.fixed]
        assert not jac[i][:, held].any(), fault.label
