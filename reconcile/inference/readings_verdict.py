"""Whether the fitted board explains its readings: the readings' χ² and its
effective degrees of freedom.

The verdict looks at the readings alone: χ² = Σ zᵢ² over the readings' normalised
residuals at the fit. The prior rows are left out of it; their sum, the prior penalty
Σ ((x − prior mean)/prior sd)², is reported beside it (a part far outside its tolerance
shows there and in the parameters table, and diagnosis weighs it), never mixed in.

The degrees of freedom are the readings less the parameters the readings inform. For a
linear-Gaussian model the effective number of parameters is the trace of the hat
matrix; in coordinates whitened by the prior it is Σⱼ (1 − post_varⱼ / prior_varⱼ),
each parameter counting from 0 (the readings say nothing of it) to 1 (they fix it)
(Bishop, *Pattern Recognition and Machine Learning*, 2006, §3.5.3, from memory). Under
the model, the readings' χ² has that many degrees of freedom on average, and the
p-value is the χ² upper tail there (:mod:`reconcile.inference.chi_square`, fractional
degrees of freedom allowed).

The prior penalty has its own check beside the verdict: in the same linear-Gaussian
model it averages the effective number of parameters, so ``prior_p_value`` is its χ²
upper tail there. A small one says the readings are explained only by parts far outside
their tolerances (a wrong part, a fault): :mod:`reconcile.pipeline.policies` then asks
for a diagnosis before a rework is trusted. The two are reported apart, never added.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["ReadingsChiSquare", "readings_chi_square"]


@dataclass(frozen=True)
class ReadingsChiSquare:
    """The verdict's statistics."""

    chi_square: float  # the readings' χ²
    readings: int
    effective_parameters: float  # tr(H)
    dof: float  # readings − effective parameters
    p_value: float
    prior_penalty: float
    prior_p_value: float  # the penalty's upper tail on the effective parameters


def effective_parameters(covariance: np.ndarray, prior_sd: np.ndarray) -> float:
    """Σⱼ (1 − post_varⱼ / prior_varⱼ), each term held to [0, 1]."""
    ratio = np.diag(np.asarray(covariance, float)) / np.asarray(prior_sd, float) ** 2
    return float(np.sum(np.clip(1.0 - ratio, 0.0, 1.0)))


def readings_chi_square(
    z: np.ndarray, x: np.ndarray, prior_mean: np.ndarray, prior_sd: np.ndarray,
    covariance: np.ndarray,
) -> ReadingsChiSquare:
    """The readings' χ² from their normalised residuals ``z`` at the fit ``x``, with the
    effective degrees of freedom from the posterior ``covariance`` (internal
    coordinates) and the prior penalty beside it."""
    from reconcile.inference.chi_square import upper_tail

    chi = float(np.nansum(np.asarray(z, float) ** 2))
    penalty = float(np.sum(((np.asarray(x, float) - prior_mean) / prior_sd) ** 2))
    n = int(np.size(z))
    k = effective_parameters(covariance, prior_sd)
    dof = max(n - k, 0.0)
    p = upper_tail(chi, dof) if dof > 0 else 1.0
    p_prior = upper_tail(penalty, k) if k > 0 else 1.0
    return ReadingsChiSquare(
        chi_square=chi, readings=n, effective_parameters=k, dof=dof,
        p_value=p if math.isfinite(p) else 0.0, prior_penalty=penalty,
        prior_p_value=p_prior if math.isfinite(p_prior) else 0.0,
    )
