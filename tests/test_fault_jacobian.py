"""The hypothesis fits' Jacobian (diagnosis/fault_fit.py) against high-precision references.

Outside reference: mpmath (arbitrary-precision arithmetic). The DC readings of the
eight-part benchmark board are predicted again at 34 significant digits under each
hypothesis, through :class:`tests.test_measurement_jacobian.Reference` (Kirchhoff's
current law and the contract's device equations solved by Newton's iteration in mpmath,
the voltmeter attached as the contract says): the hypothesis is applied there as its
own definition says (docs/formats.md, diagnosis faults; an open resistor held at 1 TΩ,
a short at 10 mΩ, a shorted capacitor's 100 S across it), and every analytic row of the
batched Jacobian is compared with a central difference of step 1e-12 to 1e-6 of that
reading's largest derivative. The hypotheses' own parameter spaces are covered: a held
part has a zero column, a wrong value's widened part its resistor column, and a reading
the hypothesis decides (the open resistor's resistance) a zero row.

The small-signal rows (forward differences of the boards alone) are compared with a
central difference of the same group's own predictions: a self_consistency check of
the step and of the hypothesis being applied to the perturbed boards.
"""

from __future__ import annotations

import mpmath as mp
import numpy as np
from benchmarks.bench_diagnosis import BENCH_PLAN, bench_board

from reconcile.diagnosis.fault_fit import _Group
from reconcile.diagnosis.faults import single_faults
from reconcile.engine import compile_board
from reconcile.inference.dc_jacobian import analytic_rows
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
            if name == "resistor_ohms":
                self.held[group.space.index(group.model.circuit.resistor_refs[col])] = value
            for mpb in self.boards:
                if name in mpb.vals:  # capacitances do not enter the DC equations
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


def test_hypothesis_jacobian_matches_mpmath_and_its_own_differences_self_consistency():
    group = _group()
    assert sorted(f.label for f in group.faults) == sorted(LABELS)
    rng = np.random.default_rng(5)
    owner = np.arange(len(group.faults))
    x = np.clip(group.mu + 0.5 * group.sd * rng.standard_normal(group.mu.shape),
                group.lower, group.upper)
    f0, _ = group.evaluate(x, owner, record=True, small_signal=False)
    jac = group.jacobian(x, f0, owner)
    rows = analytic_rows(group.model)
    assert not rows.all()  # gain, input and output resistance are differences
    alone = group._solve(x, owner, small_signal=False).state.v
    g = group.model.group
    for i, fault in enumerate(group.faults):
        ref = FaultReference(group, i, x[i], alone[i * g:(i + 1) * g]).columns(x[i])
        ref[:, ~group.free[i]] = 0.0
        for k, _ in group.reading_fix[i]:
            ref[k] = 0.0
            assert not jac[i, k].any(), fault.label  # the hypothesis decides it
        for k in np.flatnonzero(rows):
            scale = np.max(np.abs(ref[k]))
            err = np.max(np.abs(jac[i, k] - ref[k]))
            assert err <= REL_TOL * max(scale, 1e-300), (fault.label, k, err / scale)
        held = [group.space.index(key) for key in fault.fixed]
        assert not jac[i][:, held].any(), fault.label
    # small-signal rows: central differences of the group's own predictions
    h = 1e-5
    central = np.empty_like(jac)
    for j in range(x.shape[1]):
        xp, xm = x.copy(), x.copy()
        xp[:, j] += h
        xm[:, j] -= h
        central[:, :, j] = (group.evaluate(xp, owner)[0] - group.evaluate(xm, owner)[0]) / (2 * h)
    central = np.where(group.free[:, None, :], central, 0.0)
    for k in np.flatnonzero(~rows):
        scale = np.max(np.abs(central[:, k]), axis=1, keepdims=True)
        assert np.all(np.abs(jac[:, k] - central[:, k]) <= 1e-4 * scale + 1e-300), k
