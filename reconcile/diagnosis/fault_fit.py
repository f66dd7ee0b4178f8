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
of one batch. The Jacobian is a forward difference in internal coordinates with the
one step rule, :func:`reconcile.inference.optimiser.difference_steps`; each
hypothesis keeps the DC operating point of its last evaluated point as the engine's
warm start.

Starts: each hypothesis starts from the best of a few seeds (the ``none`` fit, the
prior mean) by its initial objective. A wrong value (a widened prior) starts in
addition at every decade of its ±3-decade range, since its objective can have a
minimum per decade and which one is lowest shows only once the other parameters have
followed; after :data:`PRUNE_AFTER` iterations only the best :data:`KEEP_STARTS` go on.

No hypothesis is dropped: each is minimised until the core's convergence test holds
or :data:`MAX_ITERATIONS` run out. A fit stopped short (``status`` ``iteration-limit``
or ``stalled``, ``converged`` false) has an objective that is an upper bound of its
minimum, and is scored with it as such (:mod:`reconcile.diagnosis.scoring`).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from reconcile.engine import devices
from reconcile.model.board import Board
from reconcile.engine import DCState, solve_batch
from reconcile.engine.budget import chunks
from reconcile.diagnosis.faults import Fault
from reconcile.inference.fitting import NAN_PENALTY
from reconcile.inference.measure import SMALL_SIGNAL, MeasurementModel, Observation
from reconcile.inference.optimiser import CONVERGED, difference_steps, minimise
from reconcile.inference.priors import ParameterSpace
from reconcile.inference.threads import small_problem_threads

__all__ = ["FaultFit", "fit_faults", "predict_faults"]

MAX_ITERATIONS = 100
"""Levenberg–Marquardt iterations per hypothesis at most."""
GRID_HALF_DECADES = np.arange(-6, 7) * (0.5 * np.log(10.0))
"""ln-offsets scanned for a widened parameter: ±3 decades in half decades."""
DECADE_STARTS = np.arange(-3, 4) * np.log(10.0)
"""ln-offsets of the extra starts of a widened parameter: every decade within ±3."""
PRUNE_AFTER = 6
KEEP_STARTS = 2
"""After PRUNE_AFTER iterations only the KEEP_STARTS best starts of a hypothesis go on."""
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
    status: str  # converged | stalled | iteration-limit | no-operating-point
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
    ) -> None:
        self.faults = faults
        self.model = MeasurementModel(board, observations, space)
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
        self.kinds = [fp.kind for fp in self.space.parameters]
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
        return out

    # ---------------------------------------------------------------- engine
    def _initial(self, owner: np.ndarray) -> DCState | None:
        if not self.has_state.any():
            return None
        g = self.model.group
        fill = int(np.nonzero(self.has_state)[0][0])
        src = np.where(self.has_state[owner], owner, fill)
        v = self.state_v[src].reshape(len(owner) * g, -1)
        vj = self.state_vj[src].reshape(len(owner) * g, *self.state_vj.shape[2:])
        n = len(owner) * g
        return DCState(
            v=v, vj=vj, converged=np.ones(n, dtype=bool), iterations=np.zeros(n, dtype=np.int64)
        )

    def evaluate(
        self, x: np.ndarray, owner: np.ndarray, *, record: bool = False, small_signal: bool = True
    ):
        """Predictions (M, R) for internal vectors x (M, P) of hypotheses ``owner`` (M,),
        and the engine solution. ``record`` keeps each row's DC state as its owner's
        warm start. Within the memory budget the work is one engine call; beyond it,
        chunks of rows, and the solution is then not returned (None)."""
        step = self.model.rows_per_call()
        if len(x) > step:
            pred = [self.evaluate(x[sl], owner[sl], record=record, small_signal=small_signal)[0]
                    for sl in chunks(len(x), step)]
            return np.concatenate(pred), None
        g = self.model.group
        params = self.model.parameters(x)
        rows_owner = np.repeat(owner, g)
        changed: dict[str, np.ndarray] = {}
        for i in np.unique(owner):
            ovr = self.faults[int(i)].overrides
            if not ovr:
                continue
            rows = rows_owner == i
            for name, col, value in ovr:
                arr = changed.get(name)
                if arr is None:
                    arr = changed[name] = getattr(params, name).copy()
                arr[rows, col] = value
        if changed:
            params = replace(params, **changed)
        # Fault boards are extreme (a transistor in deep cut-off has rpi = 1/0): let the
        # engine's infinities through quietly; non-finite predictions are handled here.
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            sol = solve_batch(
                self.model.circuit, params, self._initial(owner), small_signal=small_signal
            )
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

    def jacobian(self, x: np.ndarray, f0: np.ndarray, owner: np.ndarray) -> np.ndarray:
        """Forward-difference Jacobian (M, R, P) at x (M, P) with predictions f0 (M, R),
        for as many rows at a time as the memory budget allows (M·P boards in all)."""
        m, p = x.shape
        per_call = max(1, self.model.rows_per_call() // max(p, 1))
        if m > per_call:
            return np.concatenate([self.jacobian(x[sl], f0[sl], owner[sl])
                                   for sl in chunks(m, per_call)])
        steps = difference_steps(self.kinds, x)  # (M, P)
        xs = np.repeat(x, p, axis=0)
        xs[np.arange(m * p), np.tile(np.arange(p), m)] += steps.ravel()
        pred, _ = self.evaluate(xs, np.repeat(owner, p), small_signal=self._needs_small_signal)
        jac = (pred.reshape(m, p, -1) - f0[:, None, :]) / steps[:, :, None]
        jac = np.where(np.isfinite(jac), jac, 0.0)
        jac = np.where(self.free[owner][:, None, :], jac.transpose(0, 2, 1), 0.0)
        return jac

    @property
    def _needs_small_signal(self) -> bool:
        return any(ob.quantity in SMALL_SIGNAL_KEYS for ob in self.model.observations)


def _seed_starts(
    group: _Group, seeds: list[np.ndarray], own_seeds: list[list[np.ndarray]] | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Starting points and the hypothesis each belongs to.

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
    for i, f in enumerate(group.faults):
        widened = [keys.index(k) for k, _ in f.widened]
        for seed in seeds + (own_seeds[i] if own_seeds else []):
            cands.append(seed)
            owners.append(i)
            for j in widened:
                for off in GRID_HALF_DECADES:
                    x = seed.copy()
                    x[j] = group.mu[i, j] + off
                    cands.append(x)
                    owners.append(i)
    xs = np.clip(np.array(cands), group.lower, group.upper)
    own = np.array(owners)
    pred, _ = group.evaluate(xs, own, record=False, small_signal=group._needs_small_signal)
    cost = group.cost(xs, pred, own)
    cost = np.where(np.isfinite(cost), cost, np.inf)
    starts, start_owner = [], []
    for i, f in enumerate(group.faults):
        rows = np.nonzero(own == i)[0]
        best = xs[int(rows[int(np.argmin(cost[rows]))])]
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
    return np.array(starts), np.array(start_owner)


def _prune_starts(start_owner: np.ndarray):
    """``after_iteration`` for :func:`reconcile.inference.optimiser.minimise`: once
    :data:`PRUNE_AFTER` iterations are done, only the :data:`KEEP_STARTS` best starts of
    each hypothesis go on (every hypothesis keeps its best start: none is dropped)."""
    pruned = np.zeros(len(start_owner), dtype=bool)
    done = [False]

    def after(state, active):
        if done[0] or state.iterations.max() < PRUNE_AFTER:
            return None
        done[0] = True
        for o in np.unique(start_owner):
            rows = np.nonzero(start_owner == o)[0]
            if len(rows) > KEEP_STARTS:
                pruned[rows[np.argsort(state.cost[rows])[KEEP_STARTS:]]] = True
        return np.flatnonzero(pruned & active)

    return after, pruned


def _minimise(group: _Group, x0: np.ndarray, max_iterations: int, start_owner: np.ndarray):
    """Every start of every hypothesis minimised together by the one batched core
    (:func:`reconcile.inference.optimiser.minimise`): the weighted readings stacked with
    the prior rows of the free parameters. Returns the :class:`Minimum` (``aux`` holds
    the predictions) and which starts were pruned."""
    inv_sd = np.where(group.free, 1.0 / group.sd, 0.0)

    def residuals(x, rows):
        pred, _ = group.evaluate(x, rows, record=True)
        prior = (x - group.mu[rows]) * inv_sd[rows]
        return np.concatenate([group.weighted(pred), prior], axis=1), pred

    def jacobian(x, rows, pred):
        jw = group.jacobian(x, pred, rows) / group.uncertainty[None, :, None]
        return np.concatenate([jw, inv_sd[rows][:, None, :] * np.eye(x.shape[1])], axis=1)

    after, pruned = _prune_starts(start_owner)
    found = minimise(residuals, jacobian, x0, group.lower, group.upper, free=group.free,
                     max_iterations=max_iterations, after_iteration=after)
    return found, pruned


@small_problem_threads()
def fit_faults(
    faults: list[Fault],
    observations: list[Observation],
    space: ParameterSpace,
    *,
    seeds: list[np.ndarray] | None = None,
    max_iterations: int = MAX_ITERATIONS,
    own_seeds: list[list[np.ndarray]] | None = None,
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
    for members in order.values():
        base = _Group(faults[members[0]].board, [faults[i] for i in members], observations, space)
        mine = [own_seeds[i] for i in members] if own_seeds else None
        x0, start_owner = _seed_starts(base, [np.asarray(s, dtype=float) for s in seeds], mine)
        group = base.expanded(start_owner)
        found, pruned = _minimise(group, x0, max_iterations, start_owner)
        x, jac, iterations = found.x, found.jacobian, found.iterations
        owner = np.arange(len(start_owner))
        pred, sol_all = group.evaluate(x, owner, small_signal=True)
        finite = np.all(np.isfinite(pred), axis=1)
        cost = group.cost(x, pred, owner)
        # Of a hypothesis's starts keep the best usable end point (a pruned start only
        # when it is all there is).
        usable = np.where(finite & ~pruned, cost, np.inf)
        picked = []
        for m in range(len(members)):
            rows = np.nonzero(start_owner == m)[0]
            pick = usable[rows] if np.isfinite(usable[rows]).any() else cost[rows]
            picked.append(int(rows[int(np.argmin(pick))]))
        # The engine solution of each picked row: from the call above when it fitted in
        # one, else the picked rows solved again in budget chunks.
        if sol_all is not None:
            sols = {k: (sol_all, k) for k in picked}
        else:
            sols = {}
            picked_rows = np.array(picked, dtype=np.intp)
            for sl in chunks(len(picked_rows), group.model.rows_per_call()):
                sub = picked_rows[sl]
                _, sol = group.evaluate(x[sub], sub, small_signal=True)
                for j, k in enumerate(sub):
                    sols[int(k)] = (sol, j)
        for m, i in enumerate(members):
            k = picked[m]
            status = "no-operating-point" if not finite[k] else str(found.status[k])
            sol, j = sols[k]
            out[i] = _result(group, k, x[k], pred[k], jac[k], cost[k], status,
                             int(iterations[k]), sol, j)
    return [o for o in out if o is not None]


def _result(group: _Group, k: int, x, pred, jac, cost, status, iterations, sol,
            j: int) -> FaultFit:
    """Hypothesis row ``k`` as a :class:`FaultFit`; ``sol`` is the engine solution in
    which it is the ``j``-th parameter vector."""
    free = group.free[k]
    jw = jac[:, free]  # weighted readings and prior rows
    a = jw.T @ jw
    try:
        cov = np.linalg.inv(a)
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(a)
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
        small_signal=ss,
        regions=regions,
        node_volts=volts,
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
        f0, _ = group.evaluate(x, owner, record=True)
        jm = group.jacobian(x, f0, owner)
        pred[members] = f0
        jac[members] = jm
    return pred, jac
