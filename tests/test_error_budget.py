"""The error budget: q(fitted) − target split into design, parts, devices and bench.

The shares are Shapley values (a standard result of cooperative game theory, from
memory): with players N = {parts, devices, bench} and v(S) the spec quantity of the
board with the groups in S at their fitted values and the rest at nominal,

    φ_i = Σ_{S ⊆ N∖{i}} |S|!·(|N|−|S|−1)!/|N|! · [v(S ∪ {i}) − v(S)],

equivalently the marginal contribution of i averaged over the |N|! orders in which the
groups can be substituted. The properties checked here:

* efficiency: Σ φ_i = v(N) − v(∅), so design + shares = fitted − target exactly;
* null player: a group whose fitted values equal nominal gets exactly 0;
* symmetry: the value depends only on the game, not on the players' labels (reordering
  the groups leaves every group's share unchanged), and a lone active group takes the
  whole difference;
* the order-average definition, computed here independently with the engine, gives the
  same numbers as the module's subset formula.
"""

from __future__ import annotations

import dataclasses
import itertools

import numpy as np
import pytest
from fit_support import draw_truth, quantity_stderr, sample_board

from reconcile.analysis import error_budget as mb
from reconcile.engine import compile_board, nominal_parameters, solve_batch
from reconcile.inference.fitting import FitResult, fit_board
from reconcile.inference.priors import ParameterSpace
from reconcile.inference.simulate import full_plan, simulate_readings

CASES = {
    "line_receiver_cb": (("resistance", "RE"),),
    "preamp_ce": (),
    "two_stage_npn_pnp": (),
}


@pytest.fixture(scope="module")
def fits() -> dict[str, FitResult]:
    out = {}
    for i, (case, extra) in enumerate(CASES.items()):
        board = sample_board(case)
        rng = np.random.default_rng([11, i])
        truth = draw_truth(board, rng)
        plan = full_plan(board) + list(extra)
        readings = truth.read(plan, rng)
        out[case] = fit_board(board, readings)
    return out


def _group_keys(fit: FitResult, group: str) -> list[int]:
    return [j for j, p in enumerate(fit.space.parameters) if mb._GROUP_OF[p.kind] == group]


def _nominal_internal(fit: FitResult) -> np.ndarray:
    return np.array([p.to_internal(p.nominal) for p in fit.space.parameters])


@pytest.mark.parametrize("case", list(CASES))
def test_design_plus_shares_equal_fitted_minus_target_shapley_efficiency(fits, case) -> None:
    fit = fits[case]
    budget = mb.error_budget(fit)
    assert budget is not None and set(budget.quantities) == set(fit.board.spec.targets)
    circuit = compile_board(fit.board)
    nominal_sol = solve_batch(circuit, nominal_parameters(circuit))
    fitted_sol = fit.predicted_solution().batch
    for name, b in budget.quantities.items():
        total = b.design + sum(b.shares.values())
        assert total == pytest.approx(b.fitted - b.target, rel=1e-12, abs=1e-12 * abs(b.target))
        assert b.total == b.fitted - b.target
        # the two ends of the budget are the drawn board and the fitted board
        assert b.nominal == pytest.approx(float(nominal_sol.quantity(name)[0]), rel=1e-9)
        assert b.fitted == pytest.approx(float(fitted_sol.quantity(name)[0]), rel=1e-9)
        assert b.design == pytest.approx(b.nominal - b.target, rel=1e-12)
        assert all(np.isfinite(v) and v >= 0.0 for v in b.share_stderr.values())


@pytest.mark.parametrize("case", list(CASES))
def test_shares_equal_order_average_definition_of_shapley_value(fits, case) -> None:
    """Independent computation: substitute the groups in each of the 3! orders, average
    the marginal contributions."""
    fit = fits[case]
    budget = mb.error_budget(fit)
    space = ParameterSpace(compile_board(fit.board), fit.space.parameters)
    nominal = _nominal_internal(fit)
    groups = {g: _group_keys(fit, g) for g in mb.GROUPS}
    orders = list(itertools.permutations(mb.GROUPS))
    rows = []
    for order in orders:
        x = nominal.copy()
        rows.append(x.copy())
        for g in order:
            x[groups[g]] = fit.x[groups[g]]
            rows.append(x.copy())
    sol = solve_batch(space.circuit, space.to_parameters(np.array(rows)))
    for name, b in budget.quantities.items():
        v = sol.quantity(name).reshape(len(orders), len(mb.GROUPS) + 1)
        phi = dict.fromkeys(mb.GROUPS, 0.0)
        for k, order in enumerate(orders):
            for step, g in enumerate(order):
                phi[g] += (v[k, step + 1] - v[k, step]) / len(orders)
        scale = abs(b.fitted - b.nominal) + 1e-12 * abs(b.nominal)
        for g in mb.GROUPS:
            assert b.shares[g] == pytest.approx(phi[g], abs=1e-9 * scale + 1e-12 * abs(b.nominal))


@pytest.mark.parametrize("null_group", mb.GROUPS)
def test_group_at_nominal_gets_zero_share_shapley_null_player(fits, null_group) -> None:
    fit = fits["preamp_ce"]
    x = fit.x.copy()
    idx = _group_keys(fit, null_group)
    x[idx] = _nominal_internal(fit)[idx]
    budget = mb.error_budget(dataclasses.replace(fit, x=x))
    for b in budget.quantities.values():
        assert b.shares[null_group] == pytest.approx(0.0, abs=1e-12 * abs(b.nominal))
        assert b.design + sum(b.shares.values()) == pytest.approx(b.fitted - b.target, rel=1e-12)


def test_lone_active_group_takes_whole_difference_shapley_symmetry(fits) -> None:
    """Two null players are interchangeable and get the same (zero) share; the one active
    group gets all of v(N) − v(∅)."""
    fit = fits["two_stage_npn_pnp"]
    x = _nominal_internal(fit)
    idx = _group_keys(fit, "devices")
    x[idx] = fit.x[idx]
    budget = mb.error_budget(dataclasses.replace(fit, x=x))
    for b in budget.quantities.values():
        assert b.shares["devices"] == pytest.approx(b.fitted - b.nominal, rel=1e-12)
        zero = pytest.approx(0.0, abs=1e-12 * abs(b.nominal))
        assert b.shares["parts"] == zero and b.shares["bench"] == zero


def test_relabelling_groups_leaves_shares_unchanged_shapley_symmetry(fits, monkeypatch) -> None:
    fit = fits["line_receiver_cb"]
    before = mb.error_budget(fit)
    monkeypatch.setattr(mb, "GROUPS", ("bench", "parts", "devices"))
    after = mb.error_budget(fit)
    for name, b in before.quantities.items():
        for g in ("parts", "devices", "bench"):
            assert after.quantities[name].shares[g] == pytest.approx(
                b.shares[g], abs=1e-12 * abs(b.nominal)
            )


@pytest.mark.parametrize(("ref", "factor"), [("RC", 1.08), ("RE1", 1.15)])
def test_single_wrong_resistor_puts_miss_in_parts(ref: str, factor: float) -> None:
    """A preamp built exactly as drawn except one resistor, read without noise: nearly all
    (≥ 95 %) of the gain's fitted − nominal difference is the parts share. The fitted
    difference itself matches the true board's within 3 propagated standard errors."""
    board = sample_board("preamp_ce")
    truth = board.with_resistor_ohms(ref, board.resistors[ref].ohms * factor)
    readings = simulate_readings(truth, full_plan(board))
    fit = fit_board(board, readings)
    b = mb.error_budget(fit).quantities["gain"]
    moved = b.fitted - b.nominal
    assert abs(b.shares["parts"] / moved - 1.0) <= 0.05, b.shares
    assert abs(b.shares["devices"]) + abs(b.shares["bench"]) <= 0.05 * abs(moved), b.shares
    circuit = compile_board(truth)
    true_gain = float(solve_batch(circuit, nominal_parameters(circuit)).quantity("gain")[0])
    assert abs(b.fitted - true_gain) <= 3.0 * quantity_stderr(fit, "gain")
