"""Fit many fault hypotheses at once: a Levenberg–Marquardt loop over the sample axis.

Hypotheses that share a topology (every ``open``, ``short``, ``wrong-value`` and
``missing`` hypothesis of a board, and ``none``) differ only in parameter values, so
one engine call solves all of them: each hypothesis is a block of rows of one
:class:`~reconcile.engine.Parameters` batch, its fault applied as overrides
(:attr:`reconcile.faults.Fault.overrides`). A ``reversed`` transistor is a different
board and gets a group of its own.

The objective is the one :func:`reconcile.fitting.fit_board` minimises, per hypothesis:
the weighted residual of every reading, (predicted − measured)/u, stacked with one
prior row (x − prior mean)/prior sd per parameter the hypothesis leaves free. The
minimiser is Levenberg–Marquardt with Marquardt's diagonal scaling, Nielsen's damping
update and the step projected onto the hard bounds (Marquardt 1963; Madsen, Nielsen &
Tingleff, "Methods for non-linear least squares problems", 2004, §3.2; from memory).
The Jacobian is a forward difference in internal coordinates with the steps
:meth:`reconcile.measure.MeasurementModel.jacobian` uses; a hypothesis whose step was
rejected keeps its Jacobian, so each iteration costs one engine call for the trial
points and one for the Jacobians of the accepted ones. Each hypothesis keeps the DC
operating point of its last accepted point as the engine's warm start.

A hypothesis has converged when the Newton decrement gᵀA⁻¹g (the χ² a full
Gauss–Newton step would still gain) is below :data:`DECREMENT_TOL`, when an accepted
step gains almost nothing, or when no step is accepted however strongly damped.

Starts: each hypothesis starts from the best of a few seeds (the ``none`` fit, the
prior mean) by its initial objective. A wrong value (a widened prior) starts in
addition at every decade of its ±3-decade range, since its objective can have a
minimum per decade and which one is lowest shows only once the other parameters have
followed; after :data:`PRUNE_AFTER` iterations only the best :data:`KEEP_STARTS` go on.

Hopeless hypotheses (χ² more than :data:`ABANDON_MARGIN` above the best any hypothesis
has reached, after :data:`ABANDON_AFTER` iterations) are stopped: their odds are below
exp(−5000) whatever their minimum.
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
from reconcile.inference.priors import ParameterSpace
from reconcile.inference.threads import small_problem_threads

__all__ = ["FaultFit", "fit_faults", "predict_faults"]

MAX_ITERATIONS = 100
LAMBDA_START = 1e-3
LAMBDA_DOWN = 3.0
LAMBDA_MAX = 1e10
COST_ABS_TOL = 1e-5
COST_REL_TOL = 1e-9
DECREMENT_TOL = 1e-3
"""A hypothesis is at its minimum when a full Gauss–Newton step would lower its χ² by
less than this (the Newton decrement; far below what moves a probability)."""
APPROXIMATE_DECREMENT = 1.0
"""A fit stopped by its iteration limit still counts, as ``approximate``, when a full
Gauss–Newton step would lower its χ² by less than this: its χ² is then within about
that much of its minimum, a pessimistic score by a factor of at most exp(0.5)."""
ABANDON_AFTER = 12
ABANDON_MARGIN = 1e4
"""After ABANDON_AFTER iterations a hypothesis whose χ² is still more than ABANDON_MARGIN
above the best χ² reached by any hypothesis is stopped: its posterior odds against the
best are below exp(−5000) whatever its minimum, so refining it changes nothing."""
GRID_HALF_DECADES = np.arange(-6, 7) * (0.5 * np.log(10.0))
"""ln-offsets scanned for a widened parameter: ±3 decades in half decades."""
DECADE_STARTS = np.arange(-3, 4) * np.log(10.0)
"""ln-offsets of the extra starts of a widened parameter: every decade within ±3."""
PRUNE_AFTER = 6
KEEP_STARTS = 2
"""After PRUNE_AFTER iterations only the KEEP_STARTS best starts of a hypothesis go on."""
DERIVATIVE_STEP = 1e-6
TEMPERATURE_STEP_K = 1e-4
#: the small-signal quantities the measurement model predicts (from the registry)
SMALL_SIGNAL_KEYS = SMALL_SIGNAL


@dataclass(frozen=True)
class FaultFit:
    """The best fit of one hypothesis.

    ``x``, ``prior_mean`` and ``prior_sd`` are over the whole parameter space (internal
    coordinates); ``free`` marks the parameters the hypothesis fits, and
    ``covariance`` (free × free) is the linearised posterior inv(JᵀJ) of the whole
    weighted system, as in :func:`reconcile.fitting.fit_board`. ``converged`` is True
    for ``status`` ``converged`` and ``approximate`` (see :data:`APPROXIMATE_DECREMENT`);
    otherwise ``chi_square`` is an upper bound of the hypothesis's minimum.
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
    status: str  # converged | approximate | abandoned | iteration-limit | no-operating-point
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
        self.steps = np.full(p, DERIVATIVE_STEP)
        for j, fp in enumerate(self.space.parameters):
            if fp.kind == "temperature":
                self.steps[j] = TEMPERATURE_STEP_K
            elif fp.kind == "supply":
                self.steps[j] = DERIVATIVE_STEP * max(1.0, abs(fp.prior_mean))
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
        xs = np.repeat(x, p, axis=0)
        xs[np.arange(m * p), np.tile(np.arange(p), m)] += np.tile(self.steps, m)
        pred, _ = self.evaluate(xs, np.repeat(owner, p), small_signal=self._needs_small_signal)
        jac = (pred.reshape(m, p, -1) - f0[:, None, :]) / self.steps[None, :, None]
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


@dataclass
class _LMState:
    """The batched Levenberg–Marquardt state, one row per start (updated in place)."""

    x: np.ndarray
    f: np.ndarray
    cost: np.ndarray
    jac: np.ndarray
    lam: np.ndarray
    nu: np.ndarray
    active: np.ndarray
    converged: np.ndarray
    abandoned: np.ndarray
    iterations: np.ndarray
    last_decrement: np.ndarray


def _lm_start(group: _Group, x0: np.ndarray) -> _LMState:
    h = x0.shape[0]
    owner = np.arange(h)
    x = np.clip(x0, group.lower, group.upper)
    f, _ = group.evaluate(x, owner, record=True)
    return _LMState(
        x=x, f=f, cost=group.cost(x, f, owner), jac=group.jacobian(x, f, owner),
        lam=np.full(h, LAMBDA_START), nu=np.full(h, 2.0), active=np.ones(h, dtype=bool),
        converged=np.zeros(h, dtype=bool), abandoned=np.zeros(h, dtype=bool),
        iterations=np.zeros(h, dtype=np.int64), last_decrement=np.full(h, np.inf),
    )


def _normal_equations(group: _Group, st: _LMState, idx: np.ndarray):
    """Gauss–Newton matrix, gradient and damped matrix of rows ``idx`` (priors included;
    fixed parameters take no step)."""
    p = st.x.shape[1]
    eye = np.eye(p)
    free = group.free[idx]
    jw = st.jac[idx] / group.uncertainty[None, :, None]
    r = group.weighted(st.f[idx])
    inv_var = np.where(free, 1.0 / group.sd[idx] ** 2, 0.0)
    a = np.einsum("mri,mrj->mij", jw, jw) + inv_var[:, :, None] * eye
    grad = np.einsum("mri,mr->mi", jw, r) + inv_var * (st.x[idx] - group.mu[idx])
    diag = np.einsum("mii->mi", a)
    damp = a + (st.lam[idx][:, None] * np.where(free, diag, 0.0))[:, :, None] * eye
    damp = damp + np.where(free, 0.0, 1.0)[:, :, None] * eye  # fixed: δ = 0
    grad = np.where(free, grad, 0.0)
    return free, a, grad, damp


def _newton_decrement(group: _Group, x: np.ndarray, free, a, grad) -> np.ndarray:
    """gᵀA⁻¹g: the χ² a full Gauss–Newton step would still gain. A parameter held at a
    bound by its gradient takes no part in it."""
    eye = np.eye(x.shape[1])
    span = group.upper - group.lower
    pinned = ((x - group.lower <= 1e-9 * span) & (grad > 0)) | (
        (group.upper - x <= 1e-9 * span) & (grad < 0)
    )
    moving = free & ~pinned
    g_m = np.where(moving, grad, 0.0)
    undamped = np.where(moving[:, :, None] & moving[:, None, :], a, 0.0)
    undamped = undamped + np.where(moving, 0.0, 1.0)[:, :, None] * eye
    try:
        newton = np.linalg.solve(undamped, g_m[..., None])[..., 0]
        return np.einsum("mi,mi->m", g_m, newton)
    except np.linalg.LinAlgError:
        return np.full(len(x), np.inf)


def _lm_step(group: _Group, st: _LMState, idx: np.ndarray, a, grad, damp):
    """One damped step of rows ``idx``: accept or reject, update the damping; returns
    (accepted, gain small enough to stop)."""
    try:
        step = -np.linalg.solve(damp, grad[..., None])[..., 0]
    except np.linalg.LinAlgError:
        step = -np.einsum("mij,mj->mi", np.linalg.pinv(damp), grad)
    trial = np.clip(st.x[idx] + step, group.lower, group.upper)
    step = trial - st.x[idx]
    predicted = -(2.0 * np.einsum("mi,mi->m", grad, step)
                  + np.einsum("mi,mij,mj->m", step, a, step))
    ft, _ = group.evaluate(trial, idx, record=True)
    ct = group.cost(trial, ft, idx)
    st.iterations[idx] += 1
    ok = np.isfinite(ct) & (ct < st.cost[idx])
    gain = np.where(ok, st.cost[idx] - ct, 0.0)
    # Damping update of Nielsen (1999), as in Madsen, Nielsen & Tingleff, "Methods
    # for non-linear least squares problems" (2004), eq. 3.16 (from memory).
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = np.where(predicted > 0, gain / predicted, 0.0)
    acc = idx[ok]
    st.x[acc], st.f[acc], st.cost[acc] = trial[ok], ft[ok], ct[ok]
    shrink = np.maximum(1.0 / LAMBDA_DOWN, 1.0 - (2.0 * rho[ok] - 1.0) ** 3)
    st.lam[acc] = np.maximum(st.lam[acc] * shrink, 1e-12)
    st.nu[acc] = 2.0
    rej = idx[~ok]
    st.lam[rej] *= st.nu[rej]
    st.nu[rej] *= 2.0
    small = ok & (gain <= COST_ABS_TOL + COST_REL_TOL * ct)
    stuck = ~ok & (st.lam[idx] > LAMBDA_MAX)
    done = idx[small | stuck]
    st.converged[done] = True
    st.active[done] = False
    return ok, small


def _prune_starts(st: _LMState, start_owner: np.ndarray) -> None:
    """Keep the :data:`KEEP_STARTS` best starts of each hypothesis; abandon the rest."""
    for o in np.unique(start_owner):
        rows = np.nonzero(start_owner == o)[0]
        if len(rows) > KEEP_STARTS:
            drop = rows[np.argsort(st.cost[rows])[KEEP_STARTS:]]
            st.abandoned[drop] = True
            st.active[drop] = False
            st.converged[drop] = False


def _abandon_hopeless(st: _LMState, reference: float) -> None:
    best = min(reference, float(np.min(st.cost)))
    hopeless = st.active & (st.cost > best + ABANDON_MARGIN) & (st.iterations >= ABANDON_AFTER)
    st.abandoned |= hopeless
    st.active &= ~hopeless


def _lm(
    group: _Group,
    x0: np.ndarray,
    max_iterations: int,
    reference: float = np.inf,
    start_owner: np.ndarray | None = None,
):
    """Batched Levenberg–Marquardt; returns x, predictions, Jacobians, costs, converged
    and abandoned flags and iteration counts (one per hypothesis). ``reference`` is the
    best χ² known from outside the group (the ``none`` fit); ``start_owner`` says which
    rows are starts of the same hypothesis (pruned to :data:`KEEP_STARTS`, the others
    reported as abandoned)."""
    h = x0.shape[0]
    start_owner = np.arange(h) if start_owner is None else start_owner
    pruned = False
    st = _lm_start(group, x0)
    for _ in range(max_iterations):
        idx = np.nonzero(st.active)[0]
        if not len(idx):
            break
        free, a, grad, damp = _normal_equations(group, st, idx)
        decrement = _newton_decrement(group, st.x[idx], free, a, grad)
        st.last_decrement[idx] = decrement
        at_min = decrement <= DECREMENT_TOL
        st.converged[idx[at_min]] = True
        st.active[idx[at_min]] = False
        keep = ~at_min
        idx, grad, damp, a = idx[keep], grad[keep], damp[keep], a[keep]
        if not len(idx):
            break
        ok, small = _lm_step(group, st, idx, a, grad, damp)
        if not pruned and st.iterations[idx].max() >= PRUNE_AFTER:
            pruned = True
            _prune_starts(st, start_owner)
        if st.iterations[idx].max() >= ABANDON_AFTER:
            _abandon_hopeless(st, reference)
        refresh = idx[ok & ~small & st.active[idx]]
        if len(refresh):
            st.jac[refresh] = group.jacobian(st.x[refresh], st.f[refresh], refresh)
    return (st.x, st.f, st.jac, st.cost, st.converged, st.abandoned, st.iterations,
            st.last_decrement)


@small_problem_threads()
def fit_faults(
    faults: list[Fault],
    observations: list[Observation],
    space: ParameterSpace,
    *,
    seeds: list[np.ndarray] | None = None,
    max_iterations: int = MAX_ITERATIONS,
    reference_chi2: float = np.inf,
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
    reference_chi2
        The best χ² known beforehand (the ``none`` fit's), against which hopeless
        hypotheses are abandoned (:data:`ABANDON_MARGIN`).
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
        x, f, jac, cost, converged, abandoned, iterations, decrement = _lm(
            group, x0, max_iterations, reference_chi2, start_owner
        )
        owner = np.arange(len(start_owner))
        pred, sol_all = group.evaluate(x, owner, small_signal=True)
        finite = np.all(np.isfinite(pred), axis=1)
        cost = group.cost(x, pred, owner)
        # Of a hypothesis's starts keep the best usable end point.
        usable = np.where(finite & ~abandoned, cost, np.inf)
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
            if not finite[k]:
                status = "no-operating-point"
            elif converged[k]:
                status = "converged"
            elif abandoned[k]:
                status = "abandoned"
            elif decrement[k] <= APPROXIMATE_DECREMENT:
                status = "approximate"
            else:
                status = "iteration-limit"
            sol, j = sols[k]
            out[i] = _result(group, k, x[k], pred[k], jac[k], cost[k], status,
                             int(iterations[k]), sol, j)
    return [o for o in out if o is not None]


def _result(group: _Group, k: int, x, pred, jac, cost, status, iterations, sol,
            j: int) -> FaultFit:
    """Hypothesis row ``k`` as a :class:`FaultFit`; ``sol`` is the engine solution in
    which it is the ``j``-th parameter vector."""
    free = group.free[k]
    jw = jac[:, free] / group.uncertainty[:, None]
    a = jw.T @ jw + np.diag(1.0 / group.sd[k, free] ** 2)
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
        converged=status in ("converged", "approximate"),
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
