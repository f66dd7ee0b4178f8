"""Fit many transistors measured one after another in the same jig, all at once.

A jig is a board file with one transistor socket; the readings file repeats the jig's
readings for each device under test, named in its ``device`` column. Per device the
free parameters are the socket transistor's log10 IS and ln beta (and n where the
device table gives it a range), in the internal coordinates and with the priors of
:mod:`reconcile.priors` (from the jig's device table). Everything else is the jig and
is held fixed, shared by all devices:

- the jig's parts at their drawn values, except a resistor measured out of circuit:
  a ``resistance`` reading with a blank ``device`` sets that part's value;
- the junction temperature at the ambient: the mean of the ``temperature`` readings
  (blank device or not), else the board's ``[conditions]`` temperature.

A joint fit of the jig parts across devices is not made: the readings of one device
cannot tell RB's tolerance from that device's beta, and a shared fit would make every
device's estimate depend on all the others. The jig parts' own uncertainty therefore is
a systematic error common to the lot (it shifts every beta alike) and is not in the
per-device standard errors.

The fit is maximum a posteriori, the same objective as :func:`reconcile.fitting.fit_board`
(weighted residuals stacked with prior rows), minimised by the project's one batched
Levenberg–Marquardt core (:func:`reconcile.inference.optimiser.minimise`), the devices
its rows: each iteration evaluates every still-active device's trial point in one
:meth:`reconcile.measure.MeasurementModel.predict` call, and the forward-difference
Jacobians of the accepted ones (D·P parameter vectors) in another. A device the core
stops short of its convergence test is reported as not converged. Standard errors come
from inv(JᵀJ) of each device's weighted system, prior rows included (the linearised
posterior, as in :mod:`reconcile.fitting`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from reconcile.model.board import Board
from reconcile.engine import compile_board
from reconcile.errors import InputError, InputErrors
from reconcile.inference.fitting import NAN_PENALTY
from reconcile.inference.measure import MeasurementModel, Observation
from reconcile.inference.optimiser import difference_steps, minimise
from reconcile.inference.priors import ParameterSpace, build_space
from reconcile.data.readings import Reading, standard_uncertainty
from reconcile.inference.threads import small_problem_threads

MAX_ITERATIONS = 60
"""Levenberg–Marquardt iterations per device at most."""


@dataclass(frozen=True)
class JigFit:
    """Per-device MAP fits of one jig, arrays over the device axis (D,).

    ``x`` (D, P) internal coordinates in the order of ``keys``; ``covariance``
    (D, P, P); ``measured``, ``predicted``, ``uncertainty`` (D, R) over
    ``observations`` (NaN where a device lacks that reading); ``objective`` the whole
    minimised sum (readings plus prior rows); ``chi_square`` the readings' χ² alone on
    ``dof``, the device's readings less the parameters they inform, and ``p_value`` its
    upper tail: the verdict convention of :mod:`reconcile.inference.readings_verdict`,
    the same as a board's fit.
    """

    board: Board
    socket: str
    devices: tuple[str, ...]
    space: ParameterSpace
    keys: tuple[str, ...]
    observations: tuple[tuple[str, str], ...]
    x: np.ndarray
    covariance: np.ndarray
    measured: np.ndarray
    predicted: np.ndarray
    uncertainty: np.ndarray
    objective: np.ndarray
    chi_square: np.ndarray
    dof: np.ndarray
    p_value: np.ndarray
    converged: np.ndarray
    at_bound: np.ndarray
    iterations: np.ndarray
    engine_calls: int
    temperature_k: float

    def column(self, name: str) -> int | None:
        """Index of ``IS``, ``beta`` or ``n`` in ``keys``, or None if not fitted."""
        key = f"{self.socket}.{name}"
        return self.keys.index(key) if key in self.keys else None


def socket_of(board: Board, socket: str | None) -> str:
    """The transistor ref of the device under test (``socket``, else the jig's only one)."""
    refs = list(board.transistors)
    if socket is not None:
        if socket not in board.transistors:
            listing = ", ".join(refs) or "none"
            raise InputError(
                f"no transistor {socket!r} in the jig; its transistors are {listing}",
                path=board.source_path, key="socket",
            )
        return socket
    if len(refs) != 1:
        raise InputError(
            f"the jig has {len(refs)} transistors ({', '.join(refs) or 'none'}); name the "
            "socket of the device under test",
            path=board.source_path, key="socket",
        )
    return refs[0]


def _split(board: Board, readings: list[Reading]):
    """Shared settings (ambient, measured jig parts) and per-device readings."""
    if not any(r.device for r in readings):
        raise InputError("the readings file names no device under test (the device column "
                         "is missing or blank)")
    temps: list[Reading] = []
    measured: dict[str, float] = {}
    per_device: dict[str, list[Reading]] = {}
    errors: list[InputError] = []
    for r in readings:
        if r.quantity == "temperature":
            temps.append(r)
            continue
        if not r.device:
            if r.quantity == "resistance" and r.at in board.resistors:
                measured[r.at] = r.value
                continue
            errors.append(InputError(
                f"{r.quantity} reading at {r.at or '-'} has no device: in a lot file only "
                "temperature and the jig's out-of-circuit resistance readings may leave "
                "the device column blank", line=r.line,
            ))
            continue
        per_device.setdefault(r.device, []).append(r)
    if errors:
        raise InputErrors(errors)
    ambient = None
    if temps:
        u = np.array([standard_uncertainty(t) for t in temps])
        w = 1.0 / u**2
        ambient = float(np.sum(w * np.array([t.value for t in temps])) / np.sum(w))
    return ambient, measured, per_device


def jig_board(board: Board, ambient_k: float | None, measured: dict[str, float]) -> Board:
    """The jig as fitted: measured resistors in, temperature at the ambient."""
    out = board
    for ref, ohms in measured.items():
        out = out.with_resistor_ohms(ref, ohms)
    if ambient_k is not None:
        out = dataclasses.replace(out, temperature=ambient_k)
    return out


def _layout(per_device: dict[str, list[Reading]]):
    """Union of the devices' readings as observation keys; (D, R) value and u arrays."""
    keys: list[tuple[str, str, int]] = []
    seen: dict[tuple[str, str, int], int] = {}
    rows: list[list[tuple[int, Reading]]] = []
    for items in per_device.values():
        count: dict[tuple[str, str], int] = {}
        placed = []
        for r in items:
            base = (r.quantity, r.at)
            k = (*base, count.get(base, 0))
            count[base] = k[2] + 1
            if k not in seen:
                seen[k] = len(keys)
                keys.append(k)
            placed.append((seen[k], r))
        rows.append(placed)
    meas = np.full((len(rows), len(keys)), np.nan)
    unc = np.full((len(rows), len(keys)), np.nan)
    for d, placed in enumerate(rows):
        for col, r in placed:
            meas[d, col] = r.value
            unc[d, col] = standard_uncertainty(r)
    return keys, meas, unc


@small_problem_threads()
def fit_jig(
    board: Board,
    readings: list[Reading],
    *,
    socket: str | None = None,
    max_iterations: int = MAX_ITERATIONS,
) -> JigFit:
    """Fit every device of a jig readings file (see the module docstring).

    Parameters
    ----------
    board
        The jig (a board file with the socket transistor and its device table, whose
        ``IS``/``beta`` (and ``n``) ranges are the priors).
    readings
        Readings with a ``device`` column, loaded against ``board``.
    socket
        The transistor ref of the socket (default: the jig's only transistor).
    max_iterations
        Levenberg–Marquardt iterations at most; a device still improving then is
        reported as not converged.

    Raises
    ------
    InputError
        No device named, a reading other than temperature or a jig resistance without a
        device, or no socket can be chosen.
    """
    ref = socket_of(board, socket)
    ambient, measured, per_device = _split(board, readings)
    jig = jig_board(board, ambient, measured)
    circuit = compile_board(jig)
    wanted = (f"{ref}.IS", f"{ref}.beta", f"{ref}.n")
    everything = build_space(circuit)
    fixed = tuple(k for k in everything.keys if k not in wanted)
    space = build_space(circuit, fixed=fixed)
    obs_keys, meas, unc = _layout(per_device)
    observations = [Observation(q, at, 0.0, 1.0) for q, at, _ in obs_keys]
    model = MeasurementModel(jig, observations, space)
    space = model.space
    inv_u = np.where(np.isfinite(unc), 1.0 / np.where(np.isfinite(unc), unc, 1.0), 0.0)
    target = np.where(np.isfinite(meas), meas, 0.0)
    mu, lo, hi = space.prior_mean, space.lower, space.upper
    n_dev = meas.shape[0]
    calls = [0]
    residuals, jacobian = _weighted_model(model, inv_u, target, calls)
    x = np.clip(np.repeat(mu[None, :], n_dev, axis=0), lo, hi)
    found = minimise(residuals, jacobian, x, lo, hi, max_iterations=max_iterations)
    x, f, jw, iterations = found.x, found.aux, found.jacobian, found.iterations
    failed = np.any(np.isfinite(meas) & ~np.isfinite(f), axis=1)
    cost = np.where(failed, np.nan, found.cost)
    converged = found.converged & ~failed

    a = np.einsum("mkp,mkq->mpq", jw, jw)
    try:
        cov = np.linalg.inv(a)
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(a)
    verdicts = _verdicts(f, meas, inv_u, x, space, cov)
    span = hi - lo
    at_bound = np.any((x - lo < 1e-6 * span) | (hi - x < 1e-6 * span), axis=1)
    predicted = np.where(np.isfinite(meas), f, np.nan)
    return JigFit(
        board=jig, socket=ref, devices=tuple(per_device), space=space,
        keys=tuple(space.keys), observations=tuple((q, at) for q, at, _ in obs_keys),
        x=x, covariance=cov, measured=meas, predicted=predicted, uncertainty=unc,
        objective=cost, chi_square=np.array([v.chi_square for v in verdicts]),
        dof=np.array([v.dof for v in verdicts]), p_value=np.array([v.p_value for v in verdicts]),
        converged=converged,
        at_bound=at_bound, iterations=iterations, engine_calls=calls[0],
        temperature_k=float(jig.temperature),
    )


def _verdicts(f, meas, inv_u, x, space: ParameterSpace, cov) -> list:
    """Each device's :class:`~reconcile.inference.readings_verdict.ReadingsChiSquare` from
    the normalised residuals of the readings it has."""
    from reconcile.inference.readings_verdict import readings_chi_square

    out = []
    for i in range(meas.shape[0]):
        has = np.isfinite(meas[i])
        with np.errstate(invalid="ignore"):
            z = (f[i, has] - meas[i, has]) * inv_u[i, has]
        z = np.where(np.isfinite(z), z, np.inf)
        out.append(readings_chi_square(z, x[i], space.prior_mean, space.prior_sd, cov[i]))
    return out


def _weighted_model(model: MeasurementModel, inv_u: np.ndarray, target: np.ndarray, calls):
    """``residuals(x, rows)`` and ``jacobian(x, rows, predicted)`` of devices ``rows`` at
    internal vectors x (M, P) for :func:`reconcile.inference.optimiser.minimise`: the
    weighted residual of each reading the device has (zero where it lacks one; a failed
    prediction as :data:`reconcile.inference.fitting.NAN_PENALTY`) stacked with the prior
    rows, and its forward-difference Jacobian with the one step rule
    (:func:`reconcile.inference.optimiser.difference_steps`). ``calls[0]`` counts engine
    calls."""
    space = model.space
    mu, sd, n_par = space.prior_mean, space.prior_sd, space.size
    kinds = [fp.kind for fp in space.parameters]

    def residuals(rows: np.ndarray, x: np.ndarray):
        calls[0] += 1
        f0 = model.predict(x)
        w = inv_u[rows]
        with np.errstate(invalid="ignore"):
            r = np.where(w > 0, (f0 - target[rows]) * w, 0.0)
        r = np.where(np.isfinite(r), r, NAN_PENALTY)
        return np.concatenate([r, (x - mu) / sd], axis=1), f0

    def jacobian(rows: np.ndarray, x: np.ndarray, f0: np.ndarray):
        m = x.shape[0]
        h = difference_steps(kinds, x)  # (M, P)
        xs = np.repeat(x[:, None, :], n_par, axis=1)
        xs[:, np.arange(n_par), np.arange(n_par)] += h
        calls[0] += 1
        pred = model.predict(xs.reshape(m * n_par, n_par)).reshape(m, n_par, -1)
        jac = (pred - f0[:, None, :]) / h[:, :, None]  # (M, P, R)
        jw = np.transpose(jac, (0, 2, 1)) * inv_u[rows][:, :, None]
        jw = np.where(np.isfinite(jw), jw, 0.0)
        prior = np.broadcast_to(np.diag(1.0 / sd), (m, n_par, n_par))
        return np.concatenate([jw, prior], axis=1)

    return (lambda x, rows: residuals(rows, x)), (lambda x, rows, f0: jacobian(rows, x, f0))
