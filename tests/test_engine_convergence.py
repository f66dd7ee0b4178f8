"""The DC solver on hard boards: deep saturation, cut-off, a reversed transistor,
extreme IS and temperatures, direct-coupled stages, big Monte Carlo batches, and the
gmin / source stepping fallbacks.

Outside reference for every answer: Kirchhoff's current law, checked at every node with
a sum written here from the solved node voltages and terminal currents (to 1e-12 A);
and the contract's region rule (formats.md: a junction is forward-biased above 0.4 V).
A batched answer must also equal the answer for the same sample solved on its own, and
each fallback path the unpatched answer: those comparisons of the engine with itself are
self-consistency checks, named so.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from boards import capacitor, device, divider_stage, resistor, supply, table, transistor

from reconcile.engine import devices
from reconcile.model.board import GND, Board
from reconcile.model.board_loader import board_from_text, load_board
from reconcile.engine import compile_board, dc, nominal_parameters, solve_batch
from reconcile.errors import SolveError
from reconcile.engine.solution import solve

SAMPLE_DATA = Path(__file__).resolve().parents[1] / "sample_data"
KCL_TOL_A = 1e-12


def kcl_error(board: Board, sol) -> np.ndarray:
    """Largest |sum of currents leaving a free node| per sample, from Ohm's law on the
    node voltages and the transistor terminal currents (Kirchhoff's current law)."""
    n = sol.n_samples
    leaving = {node: np.zeros(n) for node in board.nodes}
    leaving[GND] = np.zeros(n)

    def v(node: str) -> np.ndarray:
        return sol.voltage(node)

    for k, r in enumerate(board.resistors.values()):
        a, b = r.nodes
        i = (v(a) - v(b)) / sol.params.resistor_ohms[:, k]
        leaving[a] += i
        leaving[b] -= i
    for k, q in enumerate(board.transistors.values()):
        leaving[q.c] += sol.ic[:, k]
        leaving[q.b] += sol.ib[:, k]
        leaving[q.e] += sol.ie[:, k]
    supplied = {s.node for s in board.supplies.values()}
    free = [node for node in board.nodes if node not in supplied]
    if not free:
        return np.zeros(n)
    return np.max(np.abs(np.stack([leaving[node] for node in free])), axis=0)


def solve_one(board: Board, temperature: float | None = None):
    circuit = compile_board(board)
    sol = solve_batch(circuit, nominal_parameters(circuit, 1, temperature=temperature))
    assert bool(sol.converged[0])
    assert float(kcl_error(board, sol)[0]) <= KCL_TOL_A
    return sol


def region(sol, k: int = 0) -> str:
    return devices.REGIONS[int(sol.region[0, k])]


def stage(
    *,
    vcc: float = 12.0,
    r1: str = "68k",
    r2: str | None = "15k",
    rc: str = "6k8",
    re_: str = "1k5",
    is_: str = "8f",
    beta: float = 180,
    va: str = "80",
    temperature: str = "25 C",
    swap_ce: bool = False,
) -> Board:
    """A divider-biased npn stage as board-file text (R2 left out when None)."""
    return board_from_text(
        table("conditions", temperature=temperature)
        + divider_stage(vcc=vcc, r1=r1, r2=r2, rc=rc, re=re_, swap_ce=swap_ce,
                        device_params={"IS": is_, "beta": beta, "VA": va})
    )


HARD_BOARDS = {
    # name: (board, expected region of Q1 or None where the 0.4 V rule is not the point)
    "saturated-large-rc": (stage(vcc=5.0, r1="10k", r2="10k", rc="100k", re_="470"), "saturation"),
    "saturated-base-driven-hard": (stage(r1="1k", r2=None, rc="10k", re_="10"), "saturation"),
    "saturated-no-emitter-resistor": (stage(r1="4k7", r2=None, rc="1k", re_="1R"), "saturation"),
    "cutoff-base-at-emitter-potential": (
        stage(r1="1M", r2="1R", rc="4k7", re_="1R"), "cutoff"),
    "cutoff-divider-low": (stage(vcc=24.0, r1="1M", r2="10k"), "cutoff"),
    # VBC ~ -17.8 V with VA = inf: the reverse conductance is subnormal (once made
    # 1/(dIC/dVCE) overflow with a RuntimeWarning); ro must come out infinite
    "cutoff-subnormal-reverse-conductance": (
        stage(vcc=18.0, r1="10k", r2="100R", rc="100R", re_="100R", is_="1p", beta=20,
              va="inf"), "cutoff"),
    "reversed-transistor": (stage(swap_ce=True), "reverse-active"),
    "reversed-heavy-drive": (stage(swap_ce=True, r1="10k", r2=None, rc="100"), "reverse-active"),
    "tiny-IS": (stage(is_="1e-20"), "forward-active"),
    "huge-IS": (stage(is_="1e-9"), None),
    "hot-125C": (stage(temperature="125 C"), "forward-active"),
    "cold-minus-40C": (stage(temperature="-40 C"), "forward-active"),
    "hot-saturated": (stage(temperature="125 C", vcc=5.0, r1="10k", r2="10k", rc="100k"),
                      "saturation"),
    "cold-beta-10": (stage(temperature="-40 C", beta=10, va="inf"), "forward-active"),
    "low-supply-1V": (stage(vcc=1.0), None),
    "high-supply-100V": (stage(vcc=100.0, r1="680k", r2="15k", rc="68k", re_="15k"),
                         "forward-active"),
}


@pytest.mark.parametrize("name", list(HARD_BOARDS))
def test_hard_boards_converge_and_satisfy_kcl(name: str) -> None:
    # Reference: Kirchhoff's current law at every free node (to 1e-12 A) and the
    # contract's 0.4 V region rule.
    board, expected = HARD_BOARDS[name]
    sol = solve_one(board)
    if expected is not None:
        assert region(sol) == expected
    # the batched path (seeded from sample 0) gives the same answer for copies
    circuit = compile_board(board)
    many = solve_batch(circuit, nominal_parameters(circuit, 8))
    assert bool(np.all(many.converged))
    np.testing.assert_allclose(many.node_v, np.repeat(sol.node_v, 8, axis=0), rtol=1e-9, atol=1e-12)


def test_huge_is_device_conducts_below_the_region_threshold() -> None:
    # Reference: the contract's device equations: with IS = 1 nA a junction carries
    # a milliamp at VBE = VT*ln(IC/IS) ~ 0.36 V, which the contract's 0.4 V rule calls
    # cut-off; the engine must still find the conducting solution (KCL holds).
    sol = solve_one(HARD_BOARDS["huge-IS"][0])
    assert float(sol.ic[0, 0]) > 1e-4
    assert float(sol.vbe[0, 0]) < devices.REGION_THRESHOLD_V
    assert region(sol) == "cutoff"


@pytest.mark.parametrize("temperature_k", [233.15, 398.15])
def test_temperature_override_matches_board_temperature_self_consistency(
    temperature_k: float,
) -> None:
    # Self-consistency check (two ways to set the temperature): IS(T) and VT = kT/q at
    # the junction temperature; solving at T via the override and via the board's
    # [conditions] must agree exactly.
    celsius = f"{temperature_k - 273.15:.2f} C"
    a = solve_one(stage(), temperature=temperature_k)
    b = solve_one(stage(temperature=celsius))
    np.testing.assert_allclose(a.node_v, b.node_v, rtol=1e-12)


DIRECT_COUPLED = {
    "sample-npn-pnp": load_board(SAMPLE_DATA / "two_stage_npn_pnp.toml"),
    "darlington": board_from_text(
        supply("VCC", "vcc", 12)
        + resistor("R1", "vcc", "b1", "1M") + resistor("R2", "b1", "gnd", "470k")
        + resistor("RC", "vcc", "c", "1k") + resistor("RE", "e2", "gnd", "1k")
        + transistor("Q1", "c", "b1", "b2", "dev") + transistor("Q2", "c", "b2", "e2", "dev")
        + resistor("RB2", "b2", "gnd", "100k")
        + device("dev", IS="8f", beta=180, VA="80")
    ),
    "three-stage-npn-pnp-npn": board_from_text(
        supply("VCC", "vcc", 15)
        + resistor("R1", "vcc", "b1", "100k") + resistor("R2", "b1", "gnd", "12k")
        + resistor("RC1", "vcc", "c1", "10k") + resistor("RE1", "e1", "gnd", "1k")
        + resistor("RE2", "vcc", "e2", "3k3") + resistor("RC2", "c2", "gnd", "4k7")
        + resistor("RE3", "e3", "gnd", "2k2")
        + transistor("Q1", "c1", "b1", "e1", "n")
        + transistor("Q2", "c2", "c1", "e2", "p", polarity="pnp")
        + transistor("Q3", "vcc", "c2", "e3", "n")
        + device("n", IS="8f", beta=180, VA="80") + device("p", IS="12f", beta=140, VA="60")
    ),
    "current-mirror-diode-connected": board_from_text(
        supply("VCC", "vcc", 9)
        + resistor("RREF", "vcc", "m", "8k2") + resistor("RC", "vcc", "c2", "4k7")
        + transistor("Q1", "m", "m", "gnd", "n") + transistor("Q2", "c2", "m", "gnd", "n")
        + device("n", IS="8f", beta=180, VA="80")
    ),
}


@pytest.mark.parametrize("name", list(DIRECT_COUPLED))
def test_direct_coupled_boards(name: str) -> None:
    # Reference: Kirchhoff's current law at every node (to 1e-12 A).
    board = DIRECT_COUPLED[name]
    sol = solve_one(board)
    assert np.all(np.isfinite(sol.node_v))
    if name.startswith("current-mirror"):
        # Reference: the contract's device equations for two matched transistors at one
        # VBE: IC2/IC1 = (1 - VBC2/VA)/(1 - VBC1/VA) (reverse junctions negligible).
        vbc = sol.vbe[0] - sol.vce[0]
        ratio = (1.0 - vbc[1] / 80.0) / (1.0 - vbc[0] / 80.0)
        assert float(sol.ic[0, 1] / sol.ic[0, 0]) == pytest.approx(ratio, rel=1e-9)


# --------------------------------------------------------------- Monte Carlo
def _monte_carlo(n: int, seed: int = 20240611):
    """The sample preamp with 20 % (one sigma, clipped) spread on every resistor, the
    supply, beta, VA and a factor-of-two spread on IS."""
    board = load_board(SAMPLE_DATA / "preamp_ce.toml")
    circuit = compile_board(board)
    p = nominal_parameters(circuit, n)
    rng = np.random.default_rng(seed)

    def spread(x: np.ndarray, rel: float) -> np.ndarray:
        return x * np.clip(1.0 + rel * rng.standard_normal(x.shape), 0.2, 3.0)

    p = p.with_values(
        resistor_ohms=spread(p.resistor_ohms, 0.2),
        supply_volts=spread(p.supply_volts, 0.2),
        beta=spread(p.beta, 0.2),
        VA=spread(p.VA, 0.2),
        IS=p.IS * 2.0 ** rng.standard_normal(p.IS.shape),
    )
    return board, circuit, p


def _compare_alone(circuit, p, sol, picks) -> None:
    """Each picked sample solved on its own (N = 1, cold start) equals the batch."""
    for i in picks:
        one = solve_batch(circuit, p.take(slice(i, i + 1)))
        assert bool(one.converged[0])
        np.testing.assert_allclose(one.node_v[0], sol.node_v[i], rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(one.ic[0], sol.ic[i], rtol=1e-9, atol=1e-18)
        for name in ("gain", "input_resistance", "output_resistance"):
            np.testing.assert_allclose(
                one.quantity(name)[0], sol.quantity(name)[i], rtol=1e-9, err_msg=name
            )


@pytest.fixture(scope="module")
def monte_carlo_2000():
    board, circuit, p = _monte_carlo(2000)
    return board, circuit, p, solve_batch(circuit, p)


def test_monte_carlo_batch_converges_and_satisfies_kcl(monte_carlo_2000) -> None:
    # Reference: Kirchhoff's current law (to 1e-12 A) for all 2000 samples, and the
    # batched answer equals the same sample solved alone (N = 1, cold start) to 1e-9
    # for the 100 samples that needed the most Newton iterations plus 100 at random
    # (every sample is compared in the slow test below).
    board, circuit, p, sol = monte_carlo_2000
    assert bool(np.all(sol.converged))
    assert float(np.max(kcl_error(board, sol))) <= KCL_TOL_A
    regions = {devices.REGIONS[int(c)] for c in sol.region[:, 0]}
    assert "forward-active" in regions and len(regions) >= 2  # the spread reaches saturation
    hardest = np.argsort(sol.state.iterations)[-100:]
    rng = np.random.default_rng(7)
    _compare_alone(circuit, p, sol, np.unique(np.concatenate([hardest, rng.choice(2000, 100)])))


@pytest.mark.slow
def test_monte_carlo_every_sample_matches_its_own_solve_self_consistency(monte_carlo_2000) -> None:
    # Self-consistency check: each of the 2000 samples solved alone (N = 1, cold
    # start), to 1e-9.
    # About 5 s: 2000 single solves.
    _, circuit, p, sol = monte_carlo_2000
    _compare_alone(circuit, p, sol, range(p.n_samples))


# ------------------------------------------------------------------ fallbacks
class _Spy:
    """Wrap a function, count its calls and optionally rewrite what it returns."""

    def __init__(self, fn, rewrite=None) -> None:
        self.fn, self.rewrite, self.calls = fn, rewrite, 0

    def __call__(self, *args, **kwargs):
        self.calls += 1
        out = self.fn(*args, **kwargs)
        return self.rewrite(out) if self.rewrite else out


FALLBACK_BOARDS = ["saturated-large-rc", "reversed-transistor", "hot-125C", "cutoff-divider-low"]


@pytest.mark.parametrize("name", FALLBACK_BOARDS)
def test_gmin_stepping_path_self_consistency(name: str, monkeypatch) -> None:
    # Self-consistency check: the unpatched solution (KCL-checked elsewhere); with the
    # warm and cold Newton
    # limited to one iteration every sample must go through gmin stepping.
    board = HARD_BOARDS[name][0]
    want = solve_one(board)
    spy = _Spy(dc._gmin_stepping)
    source = _Spy(dc._source_stepping)
    monkeypatch.setattr(dc, "WARM_ITERATIONS", 1)
    monkeypatch.setattr(dc, "COLD_ITERATIONS", 1)
    monkeypatch.setattr(dc, "_gmin_stepping", spy)
    monkeypatch.setattr(dc, "_source_stepping", source)
    got = solve_one(board)
    assert spy.calls == 1 and source.calls == 0
    np.testing.assert_allclose(got.node_v, want.node_v, rtol=1e-9, atol=1e-12)


def _all_failed(out):
    ok, v, vj, iters = out
    return np.zeros_like(ok), v, vj, iters


@pytest.mark.parametrize("name", FALLBACK_BOARDS)
def test_source_stepping_path_self_consistency(name: str, monkeypatch) -> None:
    # Self-consistency check: the unpatched solution (KCL-checked elsewhere); cold
    # Newton cut to one iteration
    # and gmin stepping made to fail, so only source stepping can find the answer.
    board = HARD_BOARDS[name][0]
    want = solve_one(board)
    gmin = _Spy(dc._gmin_stepping, rewrite=_all_failed)
    source = _Spy(dc._source_stepping)
    monkeypatch.setattr(dc, "COLD_ITERATIONS", 1)
    monkeypatch.setattr(dc, "_gmin_stepping", gmin)
    monkeypatch.setattr(dc, "_source_stepping", source)
    got = solve_one(board)
    assert gmin.calls == 1 and source.calls == 1
    np.testing.assert_allclose(got.node_v, want.node_v, rtol=1e-9, atol=1e-12)


def test_source_stepping_a_whole_batch_self_consistency(monkeypatch) -> None:
    # Self-consistency check: every sample of a spread batch forced through source
    # stepping (warm and cold Newton cut to one iteration, gmin stepping made to fail),
    # each on its own ramp within one batched Newton call per round, lands on the
    # batch's unpatched solution; reference: KCL at every node.
    board, circuit, p = _monte_carlo(64, seed=5)
    want = solve_batch(circuit, p)
    source = _Spy(dc._source_stepping)
    monkeypatch.setattr(dc, "WARM_ITERATIONS", 1)
    monkeypatch.setattr(dc, "COLD_ITERATIONS", 1)
    monkeypatch.setattr(dc, "_gmin_stepping", _Spy(dc._gmin_stepping, rewrite=_all_failed))
    monkeypatch.setattr(dc, "_source_stepping", source)
    got = solve_batch(circuit, p)
    # two calls: the seed sample a large batch is started from, then the whole batch
    assert source.calls == 2 and bool(np.all(got.converged))
    assert float(np.max(kcl_error(board, got))) <= KCL_TOL_A
    np.testing.assert_allclose(got.node_v, want.node_v, rtol=1e-9, atol=1e-12)


def test_warm_start_failures_fall_back_to_cold_start_self_consistency(monkeypatch) -> None:
    # Self-consistency check: each sample solved alone; reference: KCL. With one warm
    # iteration allowed, a spread
    # batch (seeded from sample 0) fails the warm start and is restarted cold.
    board, circuit, p = _monte_carlo(64, seed=3)
    want = solve_batch(circuit, p)
    monkeypatch.setattr(dc, "WARM_ITERATIONS", 1)
    gmin = _Spy(dc._gmin_stepping)
    monkeypatch.setattr(dc, "_gmin_stepping", gmin)
    got = solve_batch(circuit, p)
    assert bool(np.all(got.converged)) and gmin.calls == 0
    assert float(np.max(kcl_error(board, got))) <= KCL_TOL_A
    np.testing.assert_allclose(got.node_v, want.node_v, rtol=1e-9, atol=1e-12)


def test_no_solution_is_reported_not_returned(monkeypatch) -> None:
    # Reference: the contract's error rules: when every method fails the engine flags
    # the sample (converged False, small signal NaN) and solve() raises SolveError.
    board = HARD_BOARDS["saturated-large-rc"][0]
    for limit in ("WARM_ITERATIONS", "COLD_ITERATIONS", "STEP_ITERATIONS"):
        monkeypatch.setattr(dc, limit, 1)
    monkeypatch.setattr(dc, "_source_stepping", _Spy(dc._source_stepping, rewrite=_all_failed))
    circuit = compile_board(board)
    sol = solve_batch(circuit, nominal_parameters(circuit, 1))
    assert not bool(sol.converged[0])
    with pytest.raises(SolveError):
        solve(board)


CAPACITOR_ONLY_SIGNAL_NODES = (
    divider_stage(vcc=12, r1="68k", r2="15k", rc="6k8", re="1k5",
                  device_params={"IS": "8f", "beta": 180, "VA": "80"})
    + capacitor("C_IN", "in", "b", "4u7") + capacitor("CE", "e", "gnd", "100u")
    + capacitor("C_OUT", "c", "out", "2u2")
    + table("signal", input="in", output="out", load_ohms="47k")
)


def test_signal_nodes_reached_only_through_capacitors() -> None:
    # Reference: the contract ("the generator and load_ohms exist only in small signal
    # (boards couple them through capacitors)"): such a board must solve, and give the
    # same answer as the board with 1 Tohm bleed resistors on its in and out nodes
    # (these once made the DC matrix singular). Such nodes have no DC voltage (None).
    got = solve(board_from_text(CAPACITOR_ONLY_SIGNAL_NODES)).to_dict()
    assert got["nodes"]["in"] is None and got["nodes"]["out"] is None
    bleeds = (
        '\n[resistors.RB_IN]\nnodes = ["in", "gnd"]\nohms = "1e12"\n'
        '[resistors.RB_OUT]\nnodes = ["out", "gnd"]\nohms = "1e12"\n'
    )
    want = solve(board_from_text(CAPACITOR_ONLY_SIGNAL_NODES + bleeds)).to_dict()
    for node in ("b", "c", "e"):
        assert got["nodes"][node] == pytest.approx(want["nodes"][node], rel=1e-9)
    for key in ("gain", "input_resistance", "output_resistance"):
        assert got["small_signal"][key] == pytest.approx(want["small_signal"][key], rel=1e-6)
