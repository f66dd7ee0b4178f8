"""One batched Levenberg–Marquardt minimiser: many independent least-squares problems at once.

Every batched maximum a posteriori fit that is not the single-board lmfit fit (the fault
hypotheses of :mod:`reconcile.diagnosis.fault_fit`, the devices of a jig in
:mod:`reconcile.lot.jig_fit`) minimises a sum of squares ‖r(x)‖² per row of a batch: the
weighted residual of each reading stacked with one prior row per free parameter. Rows
are independent problems on a leading axis; they share the parameter layout (P) and the
residual length (N). The caller supplies two evaluations, always for the rows still
being minimised only:

- ``residuals(x, rows) -> (r, aux)``: the weighted residuals r (M, N), finite (a caller
  maps a failed prediction to a large finite penalty), and any per-row array ``aux``
  (M, ...) it wants back with the accepted point (the predictions);
- ``jacobian(x, rows, aux) -> J`` (M, N, P): ∂r/∂x at accepted points, ``aux`` being what
  ``residuals`` returned there (finite differences need not evaluate the base again;
  :func:`difference_steps` is the one step rule for them).

The method, one rule for every caller:

- **Step.** (A + λ·diag A) δ = −g with A = JᵀJ and g = Jᵀr, Marquardt's diagonal scaling
  (Marquardt 1963), over the free parameters that are not held at a bound by their
  gradient (an active set: a pinned parameter takes no part in the step of the others).
- **Bounds.** The trial point is the step projected onto the box [lower, upper].
- **Damping.** Nielsen's update (Madsen, Nielsen & Tingleff, "Methods for non-linear
  least squares problems", 2004, §3.2 eq. 3.16, from memory): an accepted step (lower
  sum of squares) multiplies λ by max(1/3, 1 − (2ρ − 1)³), ρ being the gain over the
  gain the linear model predicted, and resets ν = 2; a rejected step multiplies λ by ν
  and doubles ν.
- **Convergence.** One test: the Newton decrement gᵀA⁻¹g over the moving parameters —
  the sum of squares a full Gauss–Newton step would still gain — at most
  :data:`DECREMENT_TOL`. A row whose damping passes :data:`LAMBDA_MAX` without an
  accepted step has ``stalled``; one still above the tolerance after ``max_iterations``
  has hit the ``iteration-limit``. For both, the sum of squares reached is an upper
  bound of the row's minimum (every accepted step lowers it), never a value to be taken
  as the minimum.
- **Floor.** Each iteration also keeps the row's Gauss–Newton floor, cost − gᵀA⁻¹g over
  all its free parameters: the minimum of the linearised residuals ‖r + Jδ‖² over every
  δ (bounds ignored). It is exact for residuals linear in x and an estimate otherwise;
  a caller may use it, with a safety factor of its own, to stop a row that cannot
  matter (:mod:`reconcile.diagnosis.fault_fit`, ``bounded``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from reconcile.engine.budget import chunks, rows_per_chunk

__all__ = [
    "CONVERGED",
    "ITERATION_LIMIT",
    "STALLED",
    "Minimum",
    "difference_steps",
    "minimise",
]

DECREMENT_TOL = 1e-3
"""A row is at its minimum when a full Gauss–Newton step would lower its sum of squares
(a χ² in every caller) by less than this: far below what moves a probability."""
LAMBDA_START = 1e-3
LAMBDA_MAX = 1e10
LAMBDA_MIN = 1e-12
DERIVATIVE_STEP = 1e-6
"""Forward-difference step in internal coordinates (logarithms of values), per unit."""
TEMPERATURE_STEP_K = 1e-4
"""Forward-difference step of a temperature (kelvin, a linear coordinate)."""

CONVERGED, STALLED, ITERATION_LIMIT = "converged", "stalled", "iteration-limit"


def difference_steps(kinds, x: np.ndarray, step: float = DERIVATIVE_STEP) -> np.ndarray:
    """The one forward-difference step rule: a step per parameter at the point(s) x
    (..., P), the same shape as x.

    ``kinds`` (P,) are the parameter kinds of :mod:`reconcile.inference.priors`: a
    logarithmic coordinate (resistors, capacitors, device parameters, calibration
    factors) moves by ``step`` (:data:`DERIVATIVE_STEP`), a temperature (kelvin) by
    :data:`TEMPERATURE_STEP_K`, a supply (volts, a linear coordinate) by the relative
    step times max(1, |x|). The measurement model's small-signal columns, the
    hypothesis fits and the jig fits all take their steps here."""
    x = np.asarray(x, dtype=float)
    kinds = np.asarray(list(kinds), dtype=object)
    out = np.where(kinds == "temperature", TEMPERATURE_STEP_K, step)
    supply = kinds == "supply"
    return np.where(supply, step * np.maximum(1.0, np.abs(x)), out + 0.0 * x)


@dataclass
class Minimum:
    """Where each row ended: arrays over the rows (M,).

    ``x`` (M, P), ``residual`` (M, N), ``jacobian`` (M, N, P) and ``aux`` at the last
    accepted point; ``cost`` = ‖residual‖²; ``status`` one of :data:`CONVERGED`,
    :data:`STALLED`, :data:`ITERATION_LIMIT`; ``decrement`` the last Newton decrement;
    ``floor`` the last Gauss–Newton floor (module docstring; −inf before the first).
    """

    x: np.ndarray
    residual: np.ndarray
    jacobian: np.ndarray
    aux: np.ndarray
    cost: np.ndarray
    status: np.ndarray
    iterations: np.ndarray
    decrement: np.ndarray
    floor: np.ndarray

    @property
    def converged(self) -> np.ndarray:
        return self.status == CONVERGED


Residuals = Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray]]
Jacobian = Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray]


class _Rows:
    """The state of every row, updated in place."""

    def __init__(self, residuals: Residuals, jacobian: Jacobian, x0, lower, upper, free):
        m, p = x0.shape
        self.residuals, self.jacobian = residuals, jacobian
        self.lower, self.upper = lower, upper
        self.free = np.ones((m, p), dtype=bool) if free is None else np.asarray(free, bool)
        rows = np.arange(m)
        self.x = np.clip(np.array(x0, dtype=float), lower, upper)
        self.r, self.aux = residuals(self.x, rows)
        self.cost = _cost(self.r)
        self.jac = np.zeros((m, self.r.shape[1], p))
        _refresh(self, rows)
        self.lam = np.full(m, LAMBDA_START)
        self.nu = np.full(m, 2.0)
        self.status = np.full(m, ITERATION_LIMIT, dtype=object)
        self.active = np.ones(m, dtype=bool)
        self.iterations = np.zeros(m, dtype=np.int64)
        self.decrement = np.full(m, np.inf)
        self.floor = np.full(m, -np.inf)

    def stop(self, idx: np.ndarray, status: str) -> None:
        self.status[idx] = status
        self.active[idx] = False


def _cost(r: np.ndarray) -> np.ndarray:
    c = np.sum(r * r, axis=1)
    return np.where(np.isfinite(c), c, np.inf)


def _moving(st: _Rows, idx: np.ndarray, grad: np.ndarray) -> np.ndarray:
    """Free parameters of rows ``idx`` not held at a bound by their gradient."""
    x = st.x[idx]
    span = np.maximum(st.upper - st.lower, 1e-300)
    at_low = (x - st.lower <= 1e-9 * span) & (grad > 0)
    at_high = (st.upper - x <= 1e-9 * span) & (grad < 0)
    return st.free[idx] & ~at_low & ~at_high


def _solve(matrix: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    try:
        return np.linalg.solve(matrix, rhs[..., None])[..., 0]
    except np.linalg.LinAlgError:
        return np.einsum("mij,mj->mi", np.linalg.pinv(matrix), rhs)


def _restricted(a: np.ndarray, moving: np.ndarray) -> np.ndarray:
    """``a`` over the moving parameters, identity elsewhere (those take no step)."""
    eye = np.eye(a.shape[1])
    out = np.where(moving[:, :, None] & moving[:, None, :], a, 0.0)
    return out + np.where(moving, 0.0, 1.0)[:, :, None] * eye


def _step(st: _Rows, idx, a, grad, moving):
    """The damped step of rows ``idx``: (A + λ·diag A) δ = −g over the moving parameters."""
    diag = np.einsum("mii->mi", a)
    scale = np.where(moving, np.maximum(diag, 1e-12 * diag.max(axis=1, keepdims=True)), 0.0)
    damped = _restricted(a, moving) + (st.lam[idx][:, None] * scale)[:, :, None] * np.eye(a.shape[1])
    return np.where(moving, -_solve(damped, np.where(moving, grad, 0.0)), 0.0)


def _normal_bytes(p: int, n_residuals: int) -> int:
    """Peak working memory of one row's normal equations in :func:`_steps`: about six
    P × P arrays (JᵀJ, its symmetrised and restricted copies, the damped matrix and the
    solver's copy) and the residual-by-parameter transpose's product, 8 bytes each."""
    return 8 * (6 * p * p + 2 * n_residuals * p + 16 * p)


def _steps(st: _Rows, idx: np.ndarray):
    """For rows ``idx``: which meet the convergence test, and for the others the trial
    points and the decrease the linear model predicts (their decrement and Gauss–Newton
    floor recorded on the way)."""
    jac, r = st.jac[idx], st.r[idx]
    jac_t = jac.transpose(0, 2, 1)
    a = jac_t @ jac  # JᵀJ by BLAS, a few times faster than the equivalent einsum
    a = 0.5 * (a + a.transpose(0, 2, 1))  # exactly symmetric, as the einsum's was
    grad = (jac_t @ r[:, :, None])[:, :, 0]
    moving = _moving(st, idx, grad)
    g_m = np.where(moving, grad, 0.0)
    decrement = np.einsum("mi,mi->m", g_m, _solve(_restricted(a, moving), g_m))
    st.decrement[idx] = decrement
    free = st.free[idx]
    g_f = np.where(free, grad, 0.0)
    st.floor[idx] = st.cost[idx] - np.einsum("mi,mi->m", g_f, _solve(_restricted(a, free), g_f))
    done = decrement <= DECREMENT_TOL
    keep = ~done
    sub, a, grad, moving = idx[keep], a[keep], grad[keep], moving[keep]
    trial = np.clip(st.x[sub] + _step(st, sub, a, grad, moving), st.lower, st.upper)
    step = trial - st.x[sub]
    predicted = -(2.0 * np.einsum("mi,mi->m", grad, step) + np.einsum("mi,mij,mj->m", step, a, step))
    return done, trial, predicted


def _refresh(st: _Rows, rows: np.ndarray) -> None:
    """The caller's Jacobian of ``rows`` at their current points."""
    if len(rows):
        st.jac[rows] = np.where(st.free[rows][:, None, :],
                                st.jacobian(st.x[rows], rows, st.aux[rows]), 0.0)


def _iterate(st: _Rows, idx: np.ndarray) -> None:
    """One iteration of the active rows ``idx``: convergence test, step, damping, and the
    Jacobians for the next one (see the module docstring). The normal matrices and the
    steps are worked out in chunks of rows within the memory budget (each row's own;
    :func:`_normal_bytes`), the trial points' residuals in one call."""
    p = st.x.shape[1]
    trials, predicted, kept = [], [], []
    for sl in chunks(len(idx), rows_per_chunk(_normal_bytes(p, st.r.shape[1]), share=0.25)):
        sub = idx[sl]
        done, trial, pred = _steps(st, sub)
        st.stop(sub[done], CONVERGED)
        trials.append(trial)
        predicted.append(pred)
        kept.append(sub[~done])
    idx = np.concatenate(kept)
    if not len(idx):
        return
    trial = np.concatenate(trials)
    predicted = np.concatenate(predicted)
    r_t, aux_t = st.residuals(trial, idx)
    c_t = _cost(r_t)
    st.iterations[idx] += 1
    ok = c_t < st.cost[idx]
    gain = np.where(ok, st.cost[idx] - c_t, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = np.where(predicted > 0, gain / predicted, 0.0)
    acc = idx[ok]
    st.x[acc], st.r[acc], st.cost[acc], st.aux[acc] = trial[ok], r_t[ok], c_t[ok], aux_t[ok]
    st.lam[acc] = np.maximum(st.lam[acc] * np.maximum(1.0 / 3.0, 1.0 - (2.0 * rho[ok] - 1.0) ** 3),
                             LAMBDA_MIN)
    st.nu[acc] = 2.0
    rej = idx[~ok]
    st.lam[rej] *= st.nu[rej]
    st.nu[rej] *= 2.0
    st.stop(rej[st.lam[rej] > LAMBDA_MAX], STALLED)
    _refresh(st, acc)


def minimise(
    residuals: Residuals,
    jacobian: Jacobian,
    x0: np.ndarray,
    lower: np.ndarray,
    upper: np.ndarray,
    *,
    free: np.ndarray | None = None,
    max_iterations: int = 100,
    after_iteration: Callable[[Minimum, np.ndarray], np.ndarray | None] | None = None,
) -> Minimum:
    """Minimise ‖r(x)‖² for every row of ``x0`` (M, P) within [lower, upper] (P,).

    ``free`` (M, P) marks the parameters each row may move (default: all).
    ``after_iteration(state, active)``, if given, is called after every iteration with
    the current :class:`Minimum` and the active mask; it may return rows to stop (a
    caller dropping the weaker of several starts of one problem), which keep status
    :data:`ITERATION_LIMIT`. See the module docstring for the method.
    """
    st = _Rows(residuals, jacobian, np.atleast_2d(x0), np.asarray(lower, float),
               np.asarray(upper, float), free)
    for _ in range(max_iterations):
        idx = np.flatnonzero(st.active)
        if not len(idx):
            break
        _iterate(st, idx)
        if after_iteration is not None:
            drop = after_iteration(_minimum(st), st.active.copy())
            if drop is not None and len(drop):
                st.active[drop] = False
    return _minimum(st)


def _minimum(st: _Rows) -> Minimum:
    return Minimum(x=st.x, residual=st.r, jacobian=st.jac, aux=st.aux, cost=st.cost,
                   status=st.status, iterations=st.iterations, decrement=st.decrement,
                   floor=st.floor)
