"""The MAP objective as an lmfit problem: named Parameters, residual and Jacobian.

The objective is the weighted residual of every reading, (predicted − measured)/u,
stacked with one prior row per free parameter, (x − prior mean)/prior sd. Each lmfit
Parameter is one free parameter in internal coordinates (log for resistors and
capacitors, log10 for IS: :mod:`reconcile.inference.priors`), named from its key by
:mod:`reconcile.inference.parameter_names` (``Q1.IS`` → ``Q1_IS``), with the hard bounds
as its ``min`` and ``max``. The Jacobian is the measurement model's
(:meth:`MeasurementModel.jacobian`: analytic for DC readings), handed to lmfit as
``Dfun``; it returns only the columns of the Parameters that vary, so a profile that
holds one parameter (``lmfit.conf_interval``) reuses it. The fit
(:mod:`reconcile.inference.fitting`), the profile intervals
(:mod:`reconcile.inference.profile`) and the sampler (:mod:`reconcile.inference.sampling`)
all use this one problem.
"""

from __future__ import annotations

import numpy as np

from reconcile.inference.measure import MeasurementModel
from reconcile.inference.parameter_names import ParameterNames

__all__ = ["NAN_PENALTY", "LmfitProblem"]

NAN_PENALTY = 1e4


class LmfitProblem:
    """One board's objective for lmfit; counts model evaluations and keeps the last
    prediction (so the fit need not predict again at its solution)."""

    def __init__(self, model: MeasurementModel) -> None:
        import lmfit

        self.model = model
        space = model.space
        self.names = ParameterNames(space.keys)
        self.evaluations = 0
        self.last_x: np.ndarray | None = None
        self.last_prediction: np.ndarray | None = None
        self.minimizer = lmfit.Minimizer(
            self.residual, lmfit.Parameters(), scale_covar=False, Dfun=self.jacobian
        )

    def parameters(self, x0: np.ndarray):
        """lmfit Parameters at internal vector ``x0``, bounded by the hard bounds."""
        import lmfit

        space = self.model.space
        params = lmfit.Parameters()
        for j, name in enumerate(self.names.names):
            params.add(name, value=float(x0[j]), min=float(space.lower[j]),
                       max=float(space.upper[j]))
        return params

    def vector(self, params) -> np.ndarray:
        """The internal vector of a Parameters set, in the space's order."""
        return np.array([params[n].value for n in self.names.names], dtype=float)

    def residual(self, params) -> np.ndarray:
        model, space = self.model, self.model.space
        x = self.vector(params)
        self.evaluations += 1
        pred = model.predict(x[None, :])[0]
        self.last_x, self.last_prediction = x, pred
        r = (pred - model.measured) / model.uncertainty
        r = np.where(np.isfinite(r), r, NAN_PENALTY)
        return np.concatenate([r, (x - space.prior_mean) / space.prior_sd])

    def weighted_jacobian(self, x: np.ndarray) -> np.ndarray:
        """d(residual)/dx, every column: the readings' rows then the prior's."""
        model = self.model
        self.evaluations += model.space.size + 1
        _, jac = model.jacobian(x)
        jac = np.where(np.isfinite(jac), jac, 0.0) / model.uncertainty[:, None]
        return np.concatenate([jac, np.diag(1.0 / model.space.prior_sd)], axis=0)

    def jacobian(self, params) -> np.ndarray:
        """The columns of the Parameters that vary (lmfit's ``Dfun``)."""
        full = self.weighted_jacobian(self.vector(params))
        varying = [j for j, n in enumerate(self.names.names) if params[n].vary]
        return full if len(varying) == full.shape[1] else full[:, varying]

    def prediction_at(self, x: np.ndarray) -> np.ndarray:
        """Predicted readings at ``x`` (the last residual's when it was there)."""
        if self.last_x is not None and np.array_equal(self.last_x, x):
            return self.last_prediction
        return self.model.predict(x[None, :])[0]
