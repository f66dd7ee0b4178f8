"""Fit many fault hypotheses at once: a Levenberg–Marquardt loop over the sample axis.

Hypotheses that share a topology (every ``open``, ``short``, ``wrong-value`` and
``missing`` hypothesis of a board, and ``none``) differ only in parameter values, so
one engine call solves all of them: each hypothesis is a block of rows of one
:class:`~reconcile.engine.Parameters` batch, its fault applied as overrides
(:attr:`reconcile.faults.Fault.overrides`). A ``reversed`` transistor is a different
board and gets a group of its own.

The objective is the one :func:`reconcile.fitting.fit_board` minimises, per hypothesis:
the weighted residual of every reading, (predicted − measured)/u, stacked with one
prior row (x − prior mean)/prior sd per parameter the hypothesis leaves free. It is
minimised by the project's one batched Levenberg–Marquardt core,
:func:`reconcile.inference.optimiser.minimise` (its step, damping, bounds and
convergence test are stated there), every start of every hypothesis of the group a row
of one batch. Each hypothesis keeps the DC operating point of its last evaluated point
as the engine's warm start.

Jacobian: the measurement model's own (:meth:`MeasurementModel.raw_jacobian`), batched
over the rows and analytic in every row, from one engine pass at the accepted points
with each hypothesis applied to the engine parameters (an open's 1 TΩ, a missing
capacitor's 0 F, a shorted capacitor's 100 S leak: the sensitivities are taken on the
board as the hypothesis has it; a held part's column is zero, a wrong value's is its
resistor's own column). A reading the hypothesis decides (an open resistor's
resistance) has a zero row. A Jacobian costs one engine pass of M groups, the DC
sensitivities of their boards and, with small-signal readings, four complex solves per
board alone and frequency.

Starts: each hypothesis starts from the best of a few seeds (the ``none`` fit, the
prior mean) by its initial objective. A wrong value (a widened prior) starts in
addition at every decade of its ±3-decade range, since its objective can have a
minimum per decade and which one is lowest shows only once the other parameters have
followed; after :data:`PRUNE_AFTER` iterations only the best :data:`KEEP_STARTS` go on.
The best initial objective does not always lie on the quickest path: a hypothesis that
ends ``iteration-limit`` or ``stalled`` is fitted again from each seed it did not start
from, and keeps the lower end (:func:`_retry_stuck`).

No hypothesis is dropped. Each is minimised until the core's convergence test holds,
:data:`MAX_ITERATIONS` run out, or it is *bounded*: the one early stop. The core keeps
each row's Gauss–Newton floor, cost − gᵀA⁻¹g over its free parameters (A = JᵀJ with the
prior rows, positive definite): the lowest objective the linearised residuals reach
anywhere (exact for residuals linear in x; the Gauss–Newton model of Madsen, Nielsen &
Tingleff 2004, §3.1–3.2, from memory). For non-linear residuals it is an estimate, not
a bound, so it is divided by :data:`BOUND_SAFETY` and trusted only after
:data:`BOUND_AFTER` iterations and on :data:`BOUND_CONFIRM` iterations in a row: a
hypothesis whose floor ÷ BOUND_SAFETY stays more than :data:`BOUND_MARGIN` above the
best objective reached (by any row of the group, or the ``none`` fit given as
``reference_chi2``) is stopped with status ``bounded``. Its odds against the best are
then below exp(−50) by the linearised model with a factor of a hundred to spare. A fit
stopped short (``bounded``, ``iteration-limit`` or ``stalled``; ``converged`` false) has
an objective that is an upper bound of its minimum, and is scored with it as such
(:mod:`reconcile.diagnosis.scoring`).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from reconcile.engine import devices
from reconcile.model.board import Board
from reconcile.engine import BatchSolution, DCState, solve_batch
from reconcile.engine.dc import solve_dc
from reconcile.engine.budget import chunks, rows_per_chunk
from reconcile.diagnosis.faults import Fault
from reconcile.inference.fitting import NAN_PENALTY
from reconcile.inference.measure import (SMALL_SIGNAL, MeasurementModel, Observation,
                                        moved_to_first_order)
from reconcile.inference.dc_jacobian import apply_calibration
from reconcile.inference.signal_jacobian import signal_rows
from reconcile.inference.optimiser import CONVERGED, minimise
from reconcile.inference.priors import ParameterSpace
from reconcile.inference.threads import small_problem_threads

__all__ = ["FaultFit", "fit_faults", "predict_faults"]

MAX_ITERATIONS = 100
"""Levenberg–Marquardt iterations per hypothesis at most."""
GRID_HALF_DECADES = np.arange(-6, 7) * (0.5 * np.log(10.0))
"""ln-offsets scanned for a widened parameter: ±3 decades in half decades."""
DECADE_STARTS = np.arange(-3, 4) * np.log(10.0)
"""ln-offsets of the extra starts of a widened parameter: every decade within ±3."""
PRUNE_AFTER = 3
KEEP_STARTS = 2
"""After PRUNE_AFTER iterations only the KEEP_STARTS best starts of a hypothesis go on.
Compared with 6, on the project's single-fault sweep (the 50 diagnoses of
``tests/test_diagnosis.py::test_injected_single_faults_found``, 2026-12-04): the same
leader and the same top three in all 50, the leaders' χ² within 2·10⁻⁴, one runner-up's
lower (RE2 wrong-value on the preamp: 386.6 against 408.5); the sharp-readings
benchmark the same four misses, the two-fault benchmark the same ranks (30 and 31 of
32); 11 % less CPU on the sweep."""
BOUNDED = "bounded"
"""Status of a hypothesis stopped by the Gauss–Newton floor (module docstring)."""
BOUND_AFTER = 6
"""Iterations a hypothesis runs before the floor may stop it. Replayed on the project's
single-fault sweep (the 50 diagnoses of
``tests/test_diagnosis.py::test_injected_single_faults_found``, 2026-12-04), each
diagnosis run once with the early stop off and once with 6: 738 fits stopped, and every
one of them ends, when let run, at least 396 above its diagnosis' best objective; the
same 50 leaders at the same χ². The sharp-readings and two-fault benchmarks keep their
top-1 and top-3 figures (92 / 96 % and 30 / 31 of 32). The sweep takes 31 s of CPU
with 6, 36 s with 12 (before, the value here) and 71 s without the early stop."""
BOUND_CONFIRM = 3
"""Consecutive iterations the floor must say so."""
BOUND_SAFETY = 100.0
"""The floor is divided by this before it is compared: it is the minimum of the
linearised model, not of the objective, and on a plateau it can lie far above the
objective's minimum (a reversed transistor's fit: floor 4·10⁵ after 12 iterations, end
value 2.9·10⁴). Replayed on the project's single-fault sweep (the 48 diagnoses of
``tests/test_diagnosis.py::test_injected_single_faults_found``, run with the early stop
off, 3 524 fits): with 100 the rule stops 736 fits and spares 47 % of the iterations,
and every stopped fit ends at least 599 above the best objective; with 10 one fit that
ends as its group's best would have been stopped."""
BOUND_MARGIN = 100.0
"""A bounded hypothesis's floor lies this far above the best objective reached: its
posterior odds against the best are below exp(−50) (a complexity term of a few units
aside), so refining it changes no probability."""
#: the small-signal quantities the measurement model predicts (from the registry)
SMALL_SIGNAL_KEYS = SMALL_SIGNAL


@dataclass(frozen=True)
class FaultFit:
    """The best fit of one hypothesis.

    ``x``, ``prior_mean`` and ``prior_sd`` are over the whole parameter space (internal
    coordinates); ``free`` marks the parameters the hypothesis fits, and
    ``covariance`` (free × free) is the linearised posterior inv(JᵀJ) of the whole
    weighted system, as in :func:`reconcile.fitting.fit_board`. ``converged`` is True
    when the optimiser's convergence test held (``status`` ``converged``); otherwise
    ``chi_square`` is an upper bound of the hypothesis's minimum.
    ``small_signal``, ``regions`` and ``node_volts`` describe the fitted board alone (no
    meter attached).
    """

    fault: Fault
    space: ParameterSpace = field(repr=False)
    free: np.ndarray
    x: np.ndarray
    prior_mean: np.ndarray
    prior_sd: np.ndarray
    covariance: np.ndarray
    predicted: np.ndarray
    normalized_residual: np.ndarray
    chi_square: float
    converged: bool
    iterations: int
    status: str  # converged | stalled | iteration-limit | bounded | no-operating-point
    small_signal: dict[str, float]
    regions: dict[str, str]
    node_volts: dict[str, float]

    @property
    def free_keys(self) -> list[str]:
        return [k for k, f in zip(self.space.keys, self.free, strict=True) if f]

    def value(self, key: str) -> float:
        """A fitted parameter in external units."""
        j = self.space.index(key)
        return float(self.space.parameters[j].to_external(self.x[j]))

    def stderr(self, key: str) -> float:
        """Standard error of a free parameter in external units."""
        j = self.space.index(key)
        k = int(np.sum(self.free[:j]))
        sd = float(np.sqrt(max(self.covariance[k, k], 0.0)))
        return abs(self.space.parameters[j].external_slope(self.x[j])) * sd

    def full_covariance(self) -> np.ndarray:
        """Covariance over the whole space, zero for the parameters the fault fixes."""
        p = self.space.size
        out = np.zeros((p, p))
        idx = np.nonzero(self.free)[0]
        out[np.ix_(idx, idx)] = self.covariance
        return out


class _Group:
    """Hypotheses on one board topology, evaluated together."""

    def __init__(
        self,
        board: Board,
        faults: list[Fault],
        observations: list[Observation],
        space: ParameterSpace,
        model: MeasurementModel | None = None,
    ) -> None:
        self.faults = faults
        #: the board's measurement model; batches of one topology share it (the fits
        #: read no state of its own: they solve and differentiate through it)
        self.model = MeasurementModel(board, observations, space) if model is None else model
        self.space = self.model.space
        keys = self.space.keys
        h, p = len(faults), self.space.size
        free = [[k not in f.fixed for k in keys] for f in faults]
        self.free = np.array(free, dtype=bool).reshape(h, p)
        self.mu = np.tile(self.space.prior_mean, (h, 1))
        self.sd = np.tile(self.space.prior_sd, (h, 1))
        for i, f in enumerate(faults):
            for key, sd in f.widened:
                self.sd[i, keys.index(key)] = sd
        self.lower, self.upper = self.space.lower, self.space.upper
        self.measured = self.model.measured
        self.uncertainty = self.model.uncertainty
        #: whether some reading is small-signal (predictions need the AC solution)
        self.has_signal = bool(signal_rows(self.model))
        obs_index = {(ob.quantity, ob.at): k for k, ob in enumerate(observations)}
        self.reading_fix = [
            [(obs_index[(q, at)], v) for q, at, v in f.part_readings if (q, at) in obs_index]
            for f in faults
        ]
        g = self.model.group
        size = self.model.circuit.n_nodes + 1
        n_t = len(self.model.circuit.transistor_refs)
        self.state_v = np.zeros((h, g, size))
        self.state_vj = np.zeros((h, g, n_t, 2))
        self.has_state = np.zeros(h, dtype=bool)
        #: where each warm start was solved, and dV/dx of its board alone at the last
        #: Jacobian (None until one is taken): the next start is moved to first order
        self.state_x = np.zeros((h, self.space.size))
        self.state_dv: np.ndarray | None = None

    def expanded(self, index: np.ndarray) -> _Group:
        """The same group with its hypotheses repeated or reordered as ``index`` says
        (one row per start of a multi-start fit); the engine model is shared."""
        out = object.__new__(_Group)
        out.__dict__.update(self.__dict__)
        out.faults = [self.faults[int(i)] for i in index]
        out.free, out.mu, out.sd = self.free[index], self.mu[index], self.sd[index]
        out.reading_fix = [self.reading_fix[int(i)] for i in index]
        out.state_v, out.state_vj = self.state_v[index], self.state_vj[index]
        out.has_state = self.has_state[index]
        out.state_x = self.state_x[index]
        out.state_dv = None if self.state_dv is None else self.state_dv[index]
        return out

    # ---------------------------------------------------------------- engine
    def _initial(self, owner: np.ndarray, x: np.ndarray) -> DCState | None:
        """Warm starts of rows ``owner`` at internal x (M, P): each row's last solved
        operating point, moved to first order by dV/dx of its last Jacobian
        (:func:`reconcile.inference.measure.moved_to_first_order`; a row of an owner
        not yet solved takes another's point unmoved), the junction voltages as
        solved."""
        if not self.has_state.any():
            return None
        g = self.model.group
        fill = int(np.nonzero(self.has_state)[0][0])
        src = np.where(self.has_state[owner], owner, fill)
        v = self.state_v[src]
        if self.state_dv is not None:
            dx = np.where(self.has_state[owner][:, None], x - self.state_x[src], 0.0)
            v = moved_to_first_order(v, self.state_dv[src], dx)
        v = v.reshape(len(owner) * g, -1)
        vj = self.state_vj[src].reshape(len(owner) * g, *self.state_vj.shape[2:])
        n = len(owner) * g
        return DCState(
            v=v, vj=vj, converged=np.ones(n, dtype=bool), iterations=np.zeros(n, dtype=np.int64)
        )

    def _with_faults(self, params, owner: np.ndarray):
        """``params`` with each row's hypothesis applied (its engine overrides), ``owner``
        (one per row of ``params``) saying whose row it is."""
        changed: dict[str, np.ndarray] = {}
        for i in np.unique(owner):
            ovr = self.faults[int(i)].overrides
            if not ovr:
                continue
            rows = owner == i
            for name, col, value in ovr:
                arr = changed.get(name)
                if arr is None:
                    arr = changed[name] = getattr(params, name).copy()
                arr[rows, col] = value
        return replace(params, **changed) if changed else params

    def _solve(self, x: np.ndarray, owner: np.ndarray, small_signal: bool):
        """The engine solution of internal vectors x (M, P) of hypotheses ``owner``: M
        groups of boards (the board alone and one per probe), warm-started from each
        owner's last operating point; small-signal results for the boards alone only
        (all a prediction reads). Fault boards are extreme (a transistor in deep cut-off
        has rpi = 1/0): the engine's infinities pass quietly; callers handle non-finite
        predictions."""
        g = self.model.group
        # the hypothesis changes the boards, then the meters go on (an ammeter stays in
        # series with a held resistor)
        rows_owner = np.repeat(owner, g)
        params = self.model.parameters(x, lambda p: self._with_faults(p, rows_owner))
        rows = np.arange(len(x)) * g if small_signal else False
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            initial = self._initial(owner, x)
            if initial is None and g > 1 and len(x) > 1:
                initial = self._from_boards_alone(params, len(x))
            return solve_batch(self.model.circuit, params, initial, small_signal=rows)

    def _from_boards_alone(self, params, m: int) -> DCState:
        """Starts for M groups with no operating point of their own yet (the scan of
        the starting points): each group's board alone solved first, and every board of
        the group started from it, so a probe board refines the point its board alone
        has reached instead of walking there from another group's (the engine's own
        seed for a cold batch is its first sample, which for a scan across decades of
        a part lies far from most)."""
        g = self.model.group
        alone = solve_dc(self.model.circuit, params.take(slice(0, m * g, g)))
        return DCState(v=np.repeat(alone.v, g, axis=0), vj=np.repeat(alone.vj, g, axis=0),
                       converged=np.repeat(alone.converged, g),
                       iterations=np.zeros(m * g, dtype=np.int64))

    def evaluate(
        self, x: np.ndarray, owner: np.ndarray, *, record: bool = False, small_signal: bool = True
    ):
        """Predictions (M, R) for internal vectors x (M, P) of hypotheses ``owner`` (M,),
        and the engine solution (with the small-signal results of the boards alone when
        a reading needs them or ``small_signal`` asks). ``record`` keeps each row's DC state as its owner's
        warm start. Within the memory budget the work is one engine call; beyond it,
        chunks of rows, and the solution is then not returned (None)."""
        step = self.model.rows_per_call()
        if len(x) > step:
            pred = [self.evaluate(x[sl], owner[sl], record=record, small_signal=small_signal)[0]
                    for sl in chunks(len(x), step)]
            return np.concatenate(pred), None
        g = self.model.group
        sol = self._solve(x, owner, small_signal or self.has_signal)
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            pred = self.model.predict(x, solution=sol)
        for i in np.unique(owner):
            fixes = self.reading_fix[int(i)]
            if fixes:
                rows = owner == i
                for k, value in fixes:
                    pred[rows, k] = value
        if record:
            ok = sol.converged.reshape(len(owner), g).all(axis=1)
            if ok.any():
                v = sol.state.v.reshape(len(owner), g, -1)
                vj = sol.state.vj.reshape(len(owner), g, *self.state_vj.shape[2:])
                self.state_v[owner[ok]] = v[ok]
                self.state_vj[owner[ok]] = vj[ok]
                self.state_x[owner[ok]] = x[ok]
                self.has_state[owner[ok]] = True
        return pred, sol

    # ------------------------------------------------------------- objective
    def weighted(self, pred: np.ndarray) -> np.ndarray:
        r = (pred - self.measured) / self.uncertainty
        return np.where(np.isfinite(r), r, NAN_PENALTY)

    def cost(self, x: np.ndarray, pred: np.ndarray, owner: np.ndarray) -> np.ndarray:
        r = self.weighted(pred)
        prior = np.where(self.free[owner], (x - self.mu[owner]) / self.sd[owner], 0.0)
        return np.sum(r**2, axis=1) + np.sum(prior**2, axis=1)

    def _keep_derivatives(self, owner: np.ndarray, dv: np.ndarray) -> None:
        """dV/dx of rows ``owner``'s boards alone, for their next warm starts."""
        if self.state_dv is None:
            self.state_dv = np.zeros((len(self.faults), *dv.shape[1:]))
        self.state_dv[owner] = np.where(np.isfinite(dv), dv, 0.0)

    def jacobian(self, x: np.ndarray, f0: np.ndarray, owner: np.ndarray,
                 solution: BatchSolution | None = None) -> np.ndarray:
        """The Jacobian (M, R, P) of the predictions at x (M, P), f0 (M, R) being the
        predictions there (their owners' operating points at x are the warm start).

        The measurement model's own rows (:meth:`MeasurementModel.raw_jacobian`),
        analytic, from one engine pass at x with each hypothesis' overrides in the
        engine parameters (a held part's column is zero, a widened part's is its
        resistor's column). A reading the hypothesis decides (``part_readings``) has a
        zero row. Rows at a time as the memory budget allows. ``solution``, if given, is
        the engine solution at x (M groups), spared solving again."""
        m, p = x.shape
        per_call = max(1, self.model.rows_per_call())
        if m > per_call:
            return np.concatenate([self.jacobian(x[sl], f0[sl], owner[sl])
                                   for sl in chunks(m, per_call)])
        sol = self._solve(x, owner, small_signal=False) if solution is None else solution
        with np.errstate(all="ignore"):
            jac, dv = self.model.raw_jacobian(x, sol)
            apply_calibration(self.model, x, f0, jac)
        self._keep_derivatives(owner, dv)
        for i in np.unique(owner):
            fixed = [k for k, _ in self.reading_fix[int(i)]]
            if fixed:
                jac[np.ix_(owner == i, fixed)] = 0.0
        jac = np.where(np.isfinite(jac), jac, 0.0)
        return np.where(self.free[owner][:, None, :], jac, 0.0)


def _seed_starts(
    group: _Group, seeds: list[np.ndarray], own_seeds: list[list[np.ndarray]] | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Starting points, the hypothesis each belongs to, and which seed each hypothesis
    starts from (its index in ``seeds``, then its own seeds).

    Every hypothesis starts from its best seed by initial objective (for a widened
    parameter, over a half-decade grid too). One with a widened parameter (a wrong
    value) also starts at every whole decade of that parameter within its bounds: across
    decades the objective can have several minima, and which is lowest shows only once
    the other parameters have followed (a bias divider's resistor ten times too high
    needs another beta than one at the drawn value). :func:`_lm` prunes these extra
    starts after :data:`PRUNE_AFTER` iterations.
    """
    keys = group.space.keys
    cands: list[np.ndarray] = []
    owners: list[int] = []
    origin: list[int] = []  # the seed (index into seeds, then own seeds) of each candidate
    for i, f in enumerate(group.faults):
        widened = [keys.index(k) for k, _ in f.widened]
        for n, seed in enumerate(seeds + (own_seeds[i] if own_seeds else [])):
            cands.append(seed)
            owners.append(i)
            origin.append(n)
            for j in widened:
                for off in GRID_HALF_DECADES:
                    x = seed.copy()
                    x[j] = group.mu[i, j] + off
                    cands.append(x)
                    owners.append(i)
                    origin.append(n)
    xs = np.clip(np.array(cands), group.lower, group.upper)
    own = np.array(owners)
    pred, _ = group.evaluate(xs, own, record=False, small_signal=False)
    cost = group.cost(xs, pred, own)
    cost = np.where(np.isfinite(cost), cost, np.inf)
    starts, start_owner, chosen = [], [], []
    for i, f in enumerate(group.faults):
        rows = np.nonzero(own == i)[0]
        top = int(rows[int(np.argmin(cost[rows]))])
        best = xs[top]
        chosen.append(origin[top])
        starts.append(best)
        start_owner.append(i)
        for key, _ in f.widened:
            j = keys.index(key)
            for off in DECADE_STARTS:
                x = best.copy()
                x[j] = np.clip(group.mu[i, j] + off, group.lower[j], group.upper[j])
                if abs(x[j] - best[j]) > 0.5 * np.log(10.0):
                    starts.append(x)
                    start_owner.append(i)
    return np.array(starts), np.array(start_owner), chosen


def _stops(start_owner: np.ndarray, reference: float):
    """``after_iteration`` for :func:`reconcile.inference.optimiser.minimise`, and the
    masks of the rows it stopped: pruned starts and bounded hypotheses.

    - Once :data:`PRUNE_AFTER` iterations are done, only the :data:`KEEP_STARTS` best
      starts of each hypothesis go on (each keeps its best start).
    - A row is *bounded* (stopped, status :data:`BOUNDED`) once, after at least
      :data:`BOUND_AFTER` iterations and on :data:`BOUND_CONFIRM` iterations in a row,
      its Gauss–Newton floor divided by :data:`BOUND_SAFETY` lies more than
      :data:`BOUND_MARGIN` above the best objective any row or ``reference`` has
      reached (module docstring)."""
    pruned = np.zeros(len(start_owner), dtype=bool)
    bounded = np.zeros(len(start_owner), dtype=bool)
    streak = np.zeros(len(start_owner), dtype=np.int64)
    done = [False]

    def after(state, active):
        stop = np.zeros(len(start_owner), dtype=bool)
        if not done[0] and state.iterations.max() >= PRUNE_AFTER:
            done[0] = True
            for o in np.unique(start_owner):
                rows = np.nonzero(start_owner == o)[0]
                if len(rows) > KEEP_STARTS:
                    pruned[rows[np.argsort(state.cost[rows])[KEEP_STARTS:]]] = True
            stop |= pruned & active
        best = min(reference, float(np.min(state.cost)))
        far = active & ~stop & (state.iterations >= BOUND_AFTER) & (
            state.floor / BOUND_SAFETY > best + BOUND_MARGIN)
        streak[:] = np.where(far, streak + 1, 0)
        newly = far & (streak >= BOUND_CONFIRM)
        bounded[newly] = True
        return np.flatnonzero(stop | newly)

    return after, pruned, bounded


def _minimise(group: _Group, x0: np.ndarray, max_iterations: int, start_owner: np.ndarray,
              reference: float):
    """Every start of every hypothesis minimised together by the one batched core
    (:func:`reconcile.inference.optimiser.minimise`): the weighted readings stacked with
    the prior rows of the free parameters. Returns the :class:`Minimum` (``aux`` holds
    the predictions; a bounded row's status is :data:`BOUNDED`) and which starts were
    pruned."""
    inv_sd = np.where(group.free, 1.0 / group.sd, 0.0)

    last: dict = {}

    def residuals(x, rows):
        pred, sol = group.evaluate(x, rows, record=True, small_signal=False)
        last.update(rows=rows, x=x, solution=sol)
        prior = (x - group.mu[rows]) * inv_sd[rows]
        return np.concatenate([group.weighted(pred), prior], axis=1), pred

    def jacobian(x, rows, pred):
        sol = _solution_of(group, last, x, rows)
        jw = group.jacobian(x, pred, rows, sol) / group.uncertainty[None, :, None]
        return np.concatenate([jw, inv_sd[rows][:, None, :] * np.eye(x.shape[1])], axis=1)

    after, pruned, bounded = _stops(start_owner, reference)
    found = minimise(residuals, jacobian, x0, group.lower, group.upper, free=group.free,
                     max_iterations=max_iterations, after_iteration=after)
    found.status[bounded] = BOUNDED
    return found, pruned


def _solution_of(group: _Group, last: dict, x: np.ndarray, rows: np.ndarray):
    """The engine solution of rows ``rows`` at x, taken from the last residual
    evaluation when it solved exactly those points (the core asks for the Jacobians of
    the steps it just accepted), else None."""
    sol = last.get("solution")
    if sol is None:
        return None
    where = {int(r): i for i, r in enumerate(last["rows"])}
    pos = np.array([where.get(int(r), -1) for r in rows], dtype=np.intp)
    if (pos < 0).any() or not np.array_equal(last["x"][pos], x):
        return None
    g = group.model.group
    return sol.take_dc((pos[:, None] * g + np.arange(g)[None, :]).ravel())


@small_problem_threads()
def fit_faults(
    faults: list[Fault],
    observations: list[Observation],
    space: ParameterSpace,
    *,
    seeds: list[np.ndarray] | None = None,
    max_iterations: int = MAX_ITERATIONS,
    own_seeds: list[list[np.ndarray]] | None = None,
    reference_chi2: float = np.inf,
    retry: bool = True,
) -> list[FaultFit]:
    """Fit every hypothesis in ``faults`` to the observations.

    Parameters
    ----------
    faults
        Hypotheses; those that share a board object are fitted in one batch.
    observations
        What was read (:func:`reconcile.measure.observations_from`).
    space
        The full parameter space of the drawn board (each hypothesis fits the keys it
        does not fix).
    seeds
        Internal starting vectors over the whole space (default: the prior mean).
    max_iterations
        Levenberg–Marquardt iterations per hypothesis.
    own_seeds
        Extra starting vectors per hypothesis (in the order of ``faults``), tried
        besides ``seeds`` (a pair starts from its two single faults' fits too).
    reference_chi2
        The best objective known from outside these hypotheses (the ``none`` fit's),
        against which a hypothesis may be bounded (:data:`BOUND_MARGIN`).
    retry
        With several ``seeds``, a hypothesis that ran out of iterations or stalled is
        fitted again from each seed on its own (:func:`_retry_stuck`), and keeps the
        better end.

    Returns
    -------
    list of FaultFit
        In the order of ``faults``.
    """
    seeds = seeds if seeds else [space.prior_mean]
    order: dict[int, list[int]] = {}
    for i, f in enumerate(faults):
        order.setdefault(id(f.board), []).append(i)
    out: list[FaultFit | None] = [None] * len(faults)
    seed_of: dict[int, int] = {}  # the seed each hypothesis started from
    for same in order.values():
        model = MeasurementModel(faults[same[0]].board, observations, space)
        best = reference_chi2  # the lowest objective this topology's batches reached
        for members in _batches(same, faults, model):
            base = _Group(faults[members[0]].board, [faults[i] for i in members], observations,
                          space, model)
            mine = [own_seeds[i] for i in members] if own_seeds else None
            x0, start_owner, chosen = _seed_starts(
                base, [np.asarray(s, dtype=float) for s in seeds], mine)
            seed_of.update(zip(members, chosen, strict=True))
            group = base.expanded(start_owner)
            found, pruned = _minimise(group, x0, max_iterations, start_owner, best)
            x, jac, iterations = found.x, found.jacobian, found.iterations
            pred, cost, finite, sols = _end_points(group, x, start_owner, pruned)
            # Of a hypothesis's starts keep the best usable end point (a pruned start only
            # when it is all there is).
            usable = np.where(finite & ~pruned, cost, np.inf)
            picked = []
            for m in range(len(members)):
                rows = np.nonzero(start_owner == m)[0]
                pick = usable[rows] if np.isfinite(usable[rows]).any() else cost[rows]
                picked.append(int(rows[int(np.argmin(pick))]))
            # The engine solution of each picked row: from the calls above when they fitted
            # in one, else the picked rows solved again in budget chunks.
            missing = np.array([k for k in picked if k not in sols], dtype=np.intp)
            for sl in chunks(len(missing), group.model.rows_per_call()):
                sub = missing[sl]
                _, sol = group.evaluate(x[sub], sub, small_signal=True)
                for j, k in enumerate(sub):
                    sols[int(k)] = _alone(group, sol, j)
            for m, i in enumerate(members):
                k = picked[m]
                status = "no-operating-point" if not finite[k] else str(found.status[k])
                out[i] = _result(group, k, x[k], pred[k], jac[k], cost[k], status,
                                 int(iterations[k]), sols[k])
            best = min(best, float(np.min(cost[picked])))
    done = [o for o in out if o is not None]
    if retry and len(seeds) > 1:
        done = _retry_stuck(done, [seed_of[i] for i in range(len(done))], observations,
                            space, seeds, max_iterations, reference_chi2)
    return done


def _batches(members: list[int], faults: list[Fault], model: MeasurementModel
             ) -> list[list[int]]:
    """Hypotheses of one topology in batches whose rows' held state fits a quarter of the
    memory budget: every start of a hypothesis is a row, and a row holds its Jacobian
    (readings × parameters, in the optimiser and as the group's last), dV/dx of its
    board alone and the operating points of its boards (8 bytes each). On the boards
    this tool is for, one batch; on a 16-stage cascade three. A later batch may stop its
    hypotheses against the best objective an earlier batch of the topology reached
    (:data:`BOUND_MARGIN`), as they would have been stopped fitted together. ``model``
    is the topology's measurement model."""
    size = model.circuit.n_nodes + 1
    n_r, n_p = len(model.observations), model.space.size
    per_row = 8 * (2 * n_r * n_p + size * n_p + model.group * size + 4 * n_p)
    room = rows_per_chunk(per_row, share=0.25)
    out: list[list[int]] = [[]]
    rows = 0
    for i in members:
        starts = 1 + len(DECADE_STARTS) * len(faults[i].widened)
        if out[-1] and rows + starts > room:
            out.append([])
            rows = 0
        out[-1].append(i)
        rows += starts
    return out


STUCK = ("iteration-limit", "stalled")
"""End states of a hypothesis that say only that its minimum lies at or below its χ²."""


def _retry_stuck(fits: list[FaultFit], seed_of: list[int], observations, space, seeds,
                 max_iterations, reference_chi2) -> list[FaultFit]:
    """Each hypothesis of ``fits`` that ended :data:`STUCK` fitted again from each of the
    other ``seeds`` (not the one it started from, ``seed_of``), keeping whichever end is
    lower. A hypothesis starts from the seed with the lowest initial objective, and that
    is not always the one whose path reaches the minimum within the iterations: with
    sharp readings a hypothesis started from the ``none`` fit can crawl to a χ² of
    hundreds where one started from the drawing converges to a few."""
    out = list(fits)
    for n, seed in enumerate(seeds):
        again_of = [i for i, ft in enumerate(fits) if ft.status in STUCK and seed_of[i] != n]
        if not again_of:
            continue
        again = fit_faults([fits[i].fault for i in again_of], observations, space,
                           seeds=[seed], max_iterations=max_iterations,
                           reference_chi2=reference_chi2, retry=False)
        for i, ft in zip(again_of, again, strict=True):
            if ft.chi_square < out[i].chi_square:
                out[i] = ft
    return out


def _end_points(group: _Group, x: np.ndarray, start_owner: np.ndarray, pruned: np.ndarray):
    """Predictions, objectives and finite-prediction flags at the end points the pick
    of :func:`fit_faults` can use, and the engine solutions of those evaluated in one
    call (row → (solution, position)). The starts that went on are evaluated; a pruned
    start only where every start of its hypothesis that went on has no operating point
    (each row's solve is its own, so the others' figures are as if all were solved);
    the rest keep NaN predictions and an infinite objective."""
    n = len(start_owner)
    pred = np.full((n, len(group.measured)), np.nan)
    cost = np.full(n, np.inf)
    sols: dict[int, _Alone] = {}

    def run(rows: np.ndarray) -> None:
        if not len(rows):
            return
        p, sol = group.evaluate(x[rows], rows, small_signal=True)
        pred[rows], cost[rows] = p, group.cost(x[rows], p, rows)
        if sol is not None:
            sols.update({int(k): _alone(group, sol, j) for j, k in enumerate(rows)})

    run(np.flatnonzero(~pruned))
    finite = np.all(np.isfinite(pred), axis=1)
    lacking = [o for o in np.unique(start_owner) if not finite[(start_owner == o) & ~pruned].any()]
    run(np.flatnonzero(pruned & np.isin(start_owner, lacking)))
    return pred, cost, np.all(np.isfinite(pred), axis=1), sols


@dataclass(frozen=True)
class _Alone:
    """What a result keeps of its engine solution: the board alone's small-signal
    values, its transistors' regions and its node voltages (so the solutions of a
    diagnosis's many rows, probe boards and Newton matrices included, are let go as
    soon as they are read)."""

    small_signal: dict[str, float]
    regions: dict[str, str]
    node_volts: dict[str, float]


def _alone(group: _Group, sol: BatchSolution, j: int) -> _Alone:
    """The board alone of the ``j``-th parameter vector of ``sol``, as a result keeps it."""
    row = j * group.model.group  # the board alone, no probe attached
    circuit = group.model.circuit
    ss = {}
    if sol.small_signal is not None:
        ss = {q: float(getattr(sol.small_signal, q)[row]) for q in SMALL_SIGNAL_KEYS}
    regions = {
        ref: devices.REGIONS[int(sol.region[row, t])]
        for t, ref in enumerate(circuit.transistor_refs)
    }
    floating = set(circuit.dc_floating.tolist())
    volts = {
        name: float(sol.node_v[row, i])
        for i, name in enumerate(circuit.node_names)
        if i not in floating
    }
    return _Alone(ss, regions, volts)


def _result(group: _Group, k: int, x, pred, jac, cost, status, iterations,
            alone: _Alone) -> FaultFit:
    """Hypothesis row ``k`` as a :class:`FaultFit`; ``alone`` is what its engine
    solution says of the board alone."""
    free = group.free[k]
    jw = jac[:, free]  # weighted readings and prior rows
    a = jw.T @ jw
    try:
        cov = np.linalg.inv(a)
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(a)
    return FaultFit(
        fault=group.faults[k],
        space=group.space,
        free=free.copy(),
        x=x.copy(),
        prior_mean=group.mu[k].copy(),
        prior_sd=group.sd[k].copy(),
        covariance=cov,
        predicted=pred.copy(),
        normalized_residual=(pred - group.measured) / group.uncertainty,
        chi_square=float(cost),
        converged=status == CONVERGED,
        iterations=iterations,
        status=status,
        small_signal=alone.small_signal,
        regions=alone.regions,
        node_volts=alone.node_volts,
    )


def predict_faults(
    fits: list[FaultFit], observations: list[Observation]
) -> tuple[np.ndarray, np.ndarray]:
    """Predictions (K, C) of other observations at each fit's best point, and their
    Jacobians (K, C, P) over the whole space (zero columns for fixed parameters)."""
    k, c = len(fits), len(observations)
    p = fits[0].space.size
    pred = np.empty((k, c))
    jac = np.zeros((k, c, p))
    order: dict[int, list[int]] = {}
    for i, ft in enumerate(fits):
        order.setdefault(id(ft.fault.board), []).append(i)
    for members in order.values():
        group = _Group(
            fits[members[0]].fault.board, [fits[i].fault for i in members], observations,
            fits[members[0]].space,
        )
        x = np.array([fits[i].x for i in members])
        owner = np.arange(len(members))
        f0, _ = group.evaluate(x, owner, record=True, small_signal=False)
        jm = group.jacobian(x, f0, owner)
        pred[members] = f0
        jac[members] = jm
    return pred, jac
