"""Back-solve the built board from its readings: a maximum a posteriori fit.

The only module that imports lmfit. The objective is the weighted residual of every
reading, (predicted − measured)/u, stacked with one prior row per free parameter,
(x − prior mean)/prior sd (see :mod:`reconcile.priors`). lmfit's ``least_squares``
method (scipy's trust-region reflective, with the hard bounds native) minimises it; the
Jacobian is the measurement model's (:meth:`MeasurementModel.jacobian`): analytic for the
DC readings, from the solve the residuals already made at that point, and forward
differences of the board alone for small-signal readings.
``scale_covar=False``: the uncertainties are real, so the covariance is inv(JᵀJ) of the
whole weighted system, unscaled — the linearised posterior.

Consistency: under the model, the total objective χ² (readings and prior rows) follows a
χ² distribution with as many degrees of freedom as there are readings (each prior row
is balanced by its parameter). The verdict uses that distribution's upper tail.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from reconcile.model.board import Board
from reconcile.model.kinds import Verdict
from reconcile.engine import compile_board
from reconcile.inference.calibration import calibration_parameters
from reconcile.inference.measure import MeasurementModel, ambient_from, observations_from
from reconcile.inference.priors import ParameterSpace, build_space
from reconcile.data.readings import Reading
from reconcile.inference.threads import small_problem_threads

SUSPECT_SIGMA = 3.0
P_CONSISTENT = 0.01
P_INCONSISTENT = 0.001
NAN_PENALTY = 1e4


@dataclass(frozen=True)
class Estimate:
    """A fitted parameter in external units (ohm, F, V, A, K, or plain)."""

    key: str
    value: float
    stderr: float
    nominal: float
    unit: str
    informed_by: str
    prior_sd_ratio: float  # posterior sd / prior sd (internal coordinates)
    tolerance_low: float | None
    tolerance_high: float | None
    at_bound: bool

    @property
    def in_tolerance(self) -> bool | None:
        if self.tolerance_low is None or self.tolerance_high is None:
            return None
        return bool(self.tolerance_low <= self.value <= self.tolerance_high)

    def to_dict(self) -> dict:
        return {
            "value": self.value,
            "stderr": self.stderr,
            "nominal": self.nominal,
            "unit": self.unit,
            "informed_by": self.informed_by,
            "in_tolerance": self.in_tolerance,
            "low": self.tolerance_low,
            "high": self.tolerance_high,
            "at_bound": self.at_bound,
        }


@dataclass(frozen=True)
class ReadingFit:
    quantity: str
    at: str
    measured: float
    predicted: float
    uncertainty: float
    normalized_residual: float
    frequency: float | None = None  # Hz; None for the board's [signal] frequency

    @property
    def suspect(self) -> bool:
        return bool(abs(self.normalized_residual) > SUSPECT_SIGMA)

    def to_dict(self) -> dict:
        return {
            "quantity": self.quantity,
            "at": self.at,
            "frequency": self.frequency,
            "measured": self.measured,
            "predicted": self.predicted,
            "uncertainty": self.uncertainty,
            "normalized_residual": self.normalized_residual,
            "suspect": self.suspect,
        }


@dataclass(frozen=True)
class FitResult:
    """What was built, as far as the readings tell."""

    board: Board
    model: MeasurementModel = field(repr=False)
    x: np.ndarray  # internal MAP vector
    covariance: np.ndarray  # internal coordinates
    parameters: dict[str, Estimate]
    readings: list[ReadingFit]
    chi_square: float
    dof: int
    p_value: float
    success: bool
    evaluations: int
    message: str
    calibration: dict[str, Estimate] = field(default_factory=dict)

    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    def report(self, console=None) -> None:
        """Print what ``reconcile fit`` prints (a rich console, default stdout)."""
        from reconcile.present.show import show

        show(self, console)

    @property
    def space(self) -> ParameterSpace:
        return self.model.space

    @property
    def verdict(self) -> Verdict:
        if not self.success:
            return "not-converged"
        if self.p_value >= P_CONSISTENT:
            return "consistent"
        if self.p_value >= P_INCONSISTENT:
            return "doubtful"
        return "inconsistent"

    @property
    def suspects(self) -> list[ReadingFit]:
        return [r for r in self.readings if r.suspect]

    @property
    def correlations(self) -> np.ndarray:
        sd = np.sqrt(np.diag(self.covariance))
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.covariance / np.outer(sd, sd)

    def predicted_solution(self):
        """The solve block of the fitted board."""
        from reconcile.engine import solve_batch
        from reconcile.engine.solution import BoardSolution, board_warnings

        circuit = compile_board(self.board)
        space = ParameterSpace(circuit, self.space.parameters)
        params = space.to_parameters(self.x[None, :])
        batch = solve_batch(circuit, params)
        return BoardSolution(self.board, batch, warnings=board_warnings(self.board, batch))

    def to_dict(self) -> dict:
        keys = self.space.keys
        corr = self.correlations
        strong = []
        for i in range(len(keys)):
            for j in range(i + 1, len(keys)):
                if abs(corr[i, j]) >= 0.5:
                    strong.append({"a": keys[i], "b": keys[j], "r": float(corr[i, j])})
        return {
            "parameters": {k: e.to_dict() for k, e in self.parameters.items()},
            "calibration": {k: _calibration_dict(e) for k, e in self.calibration.items()},
            "readings": [r.to_dict() for r in self.readings],
            "chi_square": self.chi_square,
            "dof": self.dof,
            "p_value": self.p_value,
            "verdict": self.verdict,
            "suspects": [f"{r.quantity}@{r.at}" if r.at else r.quantity for r in self.suspects],
            "correlations": {"keys": keys, "matrix": corr.tolist(), "strong": strong},
            "predicted": self.predicted_solution().to_dict(),
            "evaluations": self.evaluations,
        }


@small_problem_threads(scipy=True)
def fit_board(
    board: Board,
    readings: list[Reading],
    *,
    model_meter: bool = True,
    fixed: tuple[str, ...] = (),
    widened: tuple[tuple[str, float], ...] = (),
    start: np.ndarray | None = None,
    space: ParameterSpace | None = None,
) -> FitResult:
    """Fit the built board to its readings (maximum a posteriori, lmfit).

    Parameters
    ----------
    model_meter
        Predict voltage readings with the voltmeter attached (default). Off only to show
        what ignoring meter loading does.
    fixed
        Parameter keys to hold at nominal.
    widened
        ``(key, internal prior sd)`` of parameters fitted with a wider prior (an
        assumed wrong value, as diagnosis fits it).
    start
        Internal starting vector (default: the prior mean).
    space
        A prepared parameter space (diagnosis passes modified priors).
    """
    from reconcile.inference.chi_square import upper_tail

    obs = observations_from(readings, board)
    if space is None:
        ambient, ambient_u = ambient_from(readings)
        space = build_space(
            compile_board(board), ambient_k=ambient, ambient_sd_k=ambient_u, fixed=fixed,
            calibration=calibration_parameters(readings),
        )
    if widened:
        wide = dict(widened)
        space = ParameterSpace(space.circuit, tuple(
            dataclasses.replace(fp, prior_sd=wide[fp.key]) if fp.key in wide else fp
            for fp in space.parameters))
    model = MeasurementModel(board, obs, space, model_meter=model_meter)
    space = model.space
    meas = model.measured
    unc = model.uncertainty
    mu, sd = space.prior_mean, space.prior_sd
    lo, hi = space.lower, space.upper
    x0 = np.clip(mu if start is None else np.asarray(start, float), lo + 1e-12, hi - 1e-12)

    x, result, evaluations = _minimise(model, x0)
    pred0, cov = _posterior(model, x)
    post_sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    z = (pred0 - meas) / unc
    chi_data = float(np.nansum(z**2))
    chi_prior = float(np.sum(((x - mu) / sd) ** 2))
    chi2 = chi_data + chi_prior
    dof = len(obs)
    p_value = upper_tail(chi2, dof) if dof > 0 else 1.0
    estimates = _estimates(space, x, post_sd)
    factors = {fp.key: estimates.pop(fp.key) for fp in space.parameters if fp.kind == "calibration"}
    fits = [
        ReadingFit(ob.quantity, ob.at, ob.measured, float(pred0[k]), float(unc[k]), float(z[k]),
                   ob.frequency)
        for k, ob in enumerate(obs)
    ]
    converged = bool(result.success) and bool(np.all(np.isfinite(pred0)))
    return FitResult(
        board=board,
        model=model,
        x=x,
        covariance=cov,
        parameters=estimates,
        readings=fits,
        chi_square=chi2,
        dof=dof,
        p_value=p_value if math.isfinite(p_value) else 0.0,
        success=converged,
        evaluations=evaluations,
        message=str(result.message),
        calibration=factors,
    )


def _calibration_dict(e: Estimate) -> dict:
    """An instrument range's fitted calibration factor (docs/formats.md §4)."""
    return {
        "value": e.value,
        "stderr": e.stderr,
        "prior_sd": e.stderr / e.prior_sd_ratio if e.prior_sd_ratio > 0 else None,
        "informed_by": e.informed_by,
    }


def _minimise(model: MeasurementModel, x0: np.ndarray):
    """The MAP point by lmfit's least_squares from ``x0``: (x, lmfit result, model
    evaluations)."""
    import lmfit

    space = model.space
    meas, unc = model.measured, model.uncertainty
    mu, sd = space.prior_mean, space.prior_sd
    lo, hi = space.lower, space.upper
    params = lmfit.Parameters()
    names = [f"p{j}" for j in range(space.size)]
    for j, name in enumerate(names):
        params.add(name, value=float(x0[j]), min=float(lo[j]), max=float(hi[j]))

    def vector(p) -> np.ndarray:
        return np.array([p[n].value for n in names])

    counter = {"n": 0}

    def residual(p) -> np.ndarray:
        x = vector(p)
        counter["n"] += 1
        pred = model.predict(x[None, :])[0]
        r = (pred - meas) / unc
        r = np.where(np.isfinite(r), r, NAN_PENALTY)
        return np.concatenate([r, (x - mu) / sd])

    def jacobian(p) -> np.ndarray:
        x = vector(p)
        counter["n"] += space.size + 1
        _, jac = model.jacobian(x)
        jac = np.where(np.isfinite(jac), jac, 0.0) / unc[:, None]
        return np.concatenate([jac, np.diag(1.0 / sd)], axis=0)

    minimizer = lmfit.Minimizer(residual, params, scale_covar=False)
    result = minimizer.minimize(
        method="least_squares", jac=jacobian, x_scale="jac", ftol=1e-10, xtol=1e-10, gtol=1e-10
    )
    return vector(result.params), result, counter["n"]


def _posterior(model: MeasurementModel, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Predicted readings at ``x`` and the linearised posterior covariance there."""
    unc, sd = model.uncertainty, model.space.prior_sd
    pred0, jac = model.jacobian(x)
    j_w = np.concatenate([np.where(np.isfinite(jac), jac, 0.0) / unc[:, None], np.diag(1.0 / sd)])
    try:
        cov = np.linalg.inv(j_w.T @ j_w)
    except np.linalg.LinAlgError:
        cov = np.linalg.pinv(j_w.T @ j_w)
    return pred0, cov


def _estimates(space: ParameterSpace, x: np.ndarray, post_sd: np.ndarray) -> dict[str, Estimate]:
    """Each parameter's estimate in its own unit, with what informed it."""
    sd, lo, hi = space.prior_sd, space.lower, space.upper
    estimates: dict[str, Estimate] = {}
    span = hi - lo
    for j, fp in enumerate(space.parameters):
        value = float(fp.to_external(x[j]))
        slope = fp.external_slope(x[j])
        ratio = float(post_sd[j] / sd[j])
        at_bound = bool(x[j] - lo[j] < 1e-6 * span[j] or hi[j] - x[j] < 1e-6 * span[j])
        estimates[fp.key] = Estimate(
            key=fp.key,
            value=value,
            stderr=float(abs(slope) * post_sd[j]),
            nominal=fp.nominal,
            unit=fp.unit,
            informed_by="readings" if ratio < 0.5 else "prior",
            prior_sd_ratio=ratio,
            tolerance_low=fp.tolerance_low,
            tolerance_high=fp.tolerance_high,
            at_bound=at_bound,
        )
    return estimates
