"""Back-solve the built board from its readings: a maximum a posteriori fit.

The objective (:mod:`reconcile.inference.lmfit_problem`) is the weighted residual of
every reading, (predicted − measured)/u, stacked with one prior row per free parameter,
(x − prior mean)/prior sd (see :mod:`reconcile.inference.priors`), over lmfit
Parameters named from the keys (``Q1.IS`` → ``Q1_IS``; the mapping is
``FitResult.names``). lmfit's ``least_squares`` method (scipy's trust-region reflective,
with the hard bounds native) minimises it, with the measurement model's Jacobian
(:meth:`MeasurementModel.jacobian`: analytic in every row, DC and small-signal) as
``Dfun``. ``scale_covar=False``: the uncertainties
are real, so lmfit's own covariance, inv(JᵀJ) of the whole weighted system at the
solution, unscaled, is the linearised posterior. Only where lmfit gives none (a singular
JᵀJ) is it recomputed here, by pseudo-inverse, and ``FitResult.covariance_source`` says
so. The ``MinimizerResult`` is kept on the result (``FitResult.minimizer_result``).

Consistency (:mod:`reconcile.inference.readings_verdict`): the verdict uses the
readings' χ² alone, on the readings less the parameters they inform (the effective
number of parameters); the prior penalty is reported beside it.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np

from reconcile.model.board import Board
from reconcile.model.kinds import Verdict
from reconcile.engine import compile_board
from reconcile.inference.calibration import calibration_parameters
from reconcile.inference.lmfit_problem import NAN_PENALTY, LmfitProblem
from reconcile.inference.measure import MeasurementModel, ambient_from, observations_from
from reconcile.inference.parameter_names import ParameterNames
from reconcile.inference.priors import ParameterSpace, build_space
from reconcile.inference.readings_verdict import ReadingsChiSquare, readings_chi_square
from reconcile.data.readings import Reading
from reconcile.inference.threads import small_problem_threads

SUSPECT_SIGMA = 3.0
P_CONSISTENT = 0.01
P_INCONSISTENT = 0.001

__all__ = ["NAN_PENALTY", "Estimate", "FitResult", "ReadingFit", "fit_board"]


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
    chi_square: float  # the readings' χ² (the verdict's)
    dof: float  # readings − effective parameters
    p_value: float
    success: bool
    evaluations: int
    message: str
    calibration: dict[str, Estimate] = field(default_factory=dict)
    prior_penalty: float = 0.0  # Σ ((x − prior mean)/prior sd)², beside the verdict
    prior_p_value: float = 1.0  # the penalty's χ² upper tail on the effective parameters
    effective_parameters: float = 0.0  # the parameters the readings inform, tr(H)
    covariance_source: str = "lmfit"  # or "recomputed" where lmfit gave none
    names: ParameterNames | None = field(default=None, repr=False, compare=False)
    """Parameter key ↔ lmfit name (``names.name_of["Q1.IS"] == "Q1_IS"``)."""
    minimizer_result: object | None = field(default=None, repr=False, compare=False)
    """lmfit's ``MinimizerResult`` (its ``params`` in internal coordinates, named by
    :attr:`names`), for notebooks."""
    problem: LmfitProblem | None = field(default=None, repr=False, compare=False)

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
    def objective(self) -> float:
        """The whole MAP objective at the fit: the readings' χ² plus the prior penalty."""
        return self.chi_square + self.prior_penalty

    @property
    def parts_plausible(self) -> bool:
        """Whether the fitted values sit within their priors as far as chance allows
        (``prior_p_value`` at least ``P_INCONSISTENT``); reported beside the verdict."""
        return bool(self.prior_p_value >= P_INCONSISTENT)

    @property
    def readings_count(self) -> int:
        return len(self.readings)

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
        """The solve block of the fitted board (solved once, then kept: the JSON, the
        next reading and the plots all ask for it)."""
        kept = self.__dict__.get("_predicted_solution")
        if kept is None:
            kept = self.__dict__["_predicted_solution"] = self._solve_fitted()
        return kept

    def _solve_fitted(self):
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
            "readings_count": self.readings_count,
            "effective_parameters": self.effective_parameters,
            "prior_penalty": self.prior_penalty,
            "prior_p_value": self.prior_p_value,
            "parts_plausible": self.parts_plausible,
            "covariance_source": self.covariance_source,
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
    lo, hi = space.lower, space.upper
    x0 = space.prior_mean if start is None else np.asarray(start, float)
    x0 = np.clip(x0, lo + 1e-12, hi - 1e-12)

    problem = LmfitProblem(model)
    result = _minimise(problem, x0)
    x = problem.vector(result.params)
    cov, source = _covariance(problem, result, x)
    pred0 = problem.prediction_at(x)
    z = (pred0 - model.measured) / model.uncertainty
    stats = readings_chi_square(z, x, space.prior_mean, space.prior_sd, cov)
    estimates = _estimates(space, x, np.sqrt(np.clip(np.diag(cov), 0.0, None)))
    factors = {fp.key: estimates.pop(fp.key) for fp in space.parameters if fp.kind == "calibration"}
    fits = [
        ReadingFit(ob.quantity, ob.at, ob.measured, float(pred0[k]),
                   float(model.uncertainty[k]), float(z[k]), ob.frequency)
        for k, ob in enumerate(obs)
    ]
    converged = bool(result.success) and bool(np.all(np.isfinite(pred0)))
    return FitResult(
        board=board, model=model, x=x, covariance=cov, parameters=estimates, readings=fits,
        **_verdict_fields(stats), success=converged, evaluations=problem.evaluations,
        message=str(result.message), calibration=factors, covariance_source=source,
        names=problem.names, minimizer_result=result, problem=problem,
    )


def _verdict_fields(stats: ReadingsChiSquare) -> dict:
    return {"chi_square": stats.chi_square, "dof": stats.dof, "p_value": stats.p_value,
            "prior_penalty": stats.prior_penalty, "prior_p_value": stats.prior_p_value,
            "effective_parameters": stats.effective_parameters}


def _calibration_dict(e: Estimate) -> dict:
    """An instrument range's fitted calibration factor (docs/formats.md §4)."""
    return {
        "value": e.value,
        "stderr": e.stderr,
        "prior_sd": e.stderr / e.prior_sd_ratio if e.prior_sd_ratio > 0 else None,
        "informed_by": e.informed_by,
    }


def _minimise(problem: LmfitProblem, x0: np.ndarray):
    """The MAP point by lmfit's least_squares from ``x0``: lmfit's ``MinimizerResult``."""
    return problem.minimizer.minimize(
        method="least_squares", params=problem.parameters(x0), x_scale="jac",
        ftol=1e-10, xtol=1e-10, gtol=1e-10,
    )


def _covariance(problem: LmfitProblem, result, x: np.ndarray) -> tuple[np.ndarray, str]:
    """lmfit's covariance (``scale_covar=False``) and ``"lmfit"``; where lmfit gives
    none (JᵀJ singular), the pseudo-inverse of JᵀJ at ``x`` and ``"recomputed"``, also
    written to the Parameters' ``stderr`` (which a profile needs)."""
    if result.covar is not None and np.all(np.isfinite(result.covar)):
        return np.array(result.covar, dtype=float), "lmfit"
    j_w = problem.weighted_jacobian(x)
    cov = np.linalg.pinv(j_w.T @ j_w)
    for j, name in enumerate(problem.names.names):
        result.params[name].stderr = float(np.sqrt(max(cov[j, j], 0.0)))
    result.covar = cov
    return cov, "recomputed"


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
