"""Recovery of synthetic boards: does the fit find what was really built, and are its
standard errors honest?

For each of two invented sample boards, 100 "true" boards are drawn inside the drawing's
tolerances (resistors, capacitors and supplies uniform within tolerance; device IS and
beta from the log-normal prior of :mod:`reconcile.priors`; junction temperature ambient
± 3 K), read with the engine through the measurement model (meter attached) plus seeded
Gaussian noise of each reading's default standard uncertainty, and fitted.

Checks, each against a named outside reference:

* coverage of the 2-sigma intervals of every parameter the readings inform
  (``informed_by == "readings"``), pooled over parameters and boards, against the
  binomial bound below;
* the fitted gain against the true board's gain: the median relative error under 0.5 %
  over all boards (the issue's requirement), and the errors consistent with the fit's
  own propagated gain uncertainty by a chi-square test.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest
from fit_support import draw_truth, quantity_gradient, sample_board
from scipy import stats

from reconcile.inference.fitting import fit_board
from reconcile.inference.simulate import full_plan

# every test shares the module's fixture of 200 fits (about 9 s, more on a loaded machine)
pytestmark = pytest.mark.slow

#: (sample board, readings added to :func:`full_plan`)
CASES = (
    ("line_receiver_cb", (("resistance", "RE"),)),
    ("preamp_ce", ()),
)
BOARDS_PER_CASE = 100
SEED = 20240603

#: Nominal coverage the bound is built around. A Gaussian ±2σ interval covers 95.45 %;
#: the issue states 95 %, which leaves that 0.45 % as extra margin.
COVERAGE = 0.95
#: Reject when the pooled coverage is more than this many binomial standard deviations
#: below COVERAGE.
BINOMIAL_SIGMAS = 3.0


def binomial_lower_bound(p: float, n: int, k: float = BINOMIAL_SIGMAS) -> float:
    """p − k·sqrt(p(1−p)/n): the normal approximation to the binomial distribution of a
    success fraction over n independent trials (common practice for n·p(1−p) ≫ 1)."""
    return p - k * math.sqrt(p * (1.0 - p) / n)


@dataclass(frozen=True)
class Recovery:
    case: str
    z_internal: tuple[float, ...]  # (fit − truth)/sd in internal coordinates, informed
    z_external: tuple[float, ...]  # (value − truth)/stderr as reported, informed
    gain_error: float  # (fitted − true)/true
    gain_rel_stderr: float  # propagated gain stderr / fitted gain
    success: bool


def _recover(case: str, extra: tuple, rng: np.random.Generator) -> Recovery:
    board = sample_board(case)
    plan = full_plan(board) + list(extra)
    truth = draw_truth(board, rng)
    readings = truth.read(plan, rng)
    fit = fit_board(board, readings)
    x_true = truth.internal(fit.space)
    values = truth.values()
    sd = np.sqrt(np.diag(fit.covariance))
    z_int, z_ext = [], []
    for j, fp in enumerate(fit.space.parameters):
        est = fit.parameters[fp.key]
        if est.informed_by != "readings":
            continue
        z_int.append(float((fit.x[j] - x_true[j]) / sd[j]))
        z_ext.append(float((est.value - values[fp.key]) / est.stderr))
    gain_true = float(truth.solution().quantity("gain")[0])
    gain_fit, g = quantity_gradient(fit, "gain")
    return Recovery(
        case=case,
        z_internal=tuple(z_int),
        z_external=tuple(z_ext),
        gain_error=(gain_fit - gain_true) / gain_true,
        gain_rel_stderr=float(np.sqrt(g @ fit.covariance @ g)) / gain_fit,
        success=fit.success,
    )


@pytest.fixture(scope="module")
def recoveries() -> list[Recovery]:
    out = []
    for i, (case, extra) in enumerate(CASES):
        rng = np.random.default_rng([SEED, i])
        out += [_recover(case, extra, rng) for _ in range(BOARDS_PER_CASE)]
    return out


def test_every_synthetic_fit_converges(recoveries: list[Recovery]) -> None:
    failed = [r.case for r in recoveries if not r.success]
    assert not failed, f"{len(failed)} of {len(recoveries)} fits did not converge: {failed}"


def test_two_sigma_coverage_meets_binomial_bound(recoveries: list[Recovery]) -> None:
    """Pooled coverage of the ±2σ intervals (internal coordinates, where priors.py makes
    the posterior Gaussian) of every parameter informed by readings.

    Reference: binomial distribution of the number of covering intervals, normal
    approximation. With n intervals, reject if coverage < 0.95 − 3·sqrt(0.95·0.05/n).
    The intervals of one board are correlated, so the true spread of the pooled
    coverage is somewhat wider than binomial; the 3-sigma bound and the 0.45 % between
    95 % and the Gaussian 95.45 % absorb that.
    """
    z = np.abs(np.concatenate([r.z_internal for r in recoveries]))
    n = z.size
    coverage = float(np.mean(z <= 2.0))
    bound = binomial_lower_bound(COVERAGE, n)
    assert n >= 600, f"only {n} informed intervals"
    assert coverage >= bound, f"coverage {coverage:.4f} over {n} intervals < bound {bound:.4f}"


def test_reported_two_sigma_intervals_meet_binomial_bound(recoveries: list[Recovery]) -> None:
    """The same check on the intervals as reported (value ± 2·stderr, external units):
    what a user of ``fit --json`` reads. Reference: binomial bound as above."""
    z = np.abs(np.concatenate([r.z_external for r in recoveries]))
    n = z.size
    coverage = float(np.mean(z <= 2.0))
    bound = binomial_lower_bound(COVERAGE, n)
    assert coverage >= bound, f"coverage {coverage:.4f} over {n} intervals < bound {bound:.4f}"


def test_median_gain_error_under_half_percent(recoveries: list[Recovery]) -> None:
    """Issue requirement: |fitted − true| / true gain under 0.5 % in the median, over
    every synthetic board of both cases."""
    errors = np.abs([r.gain_error for r in recoveries])
    assert len(errors) >= 200
    assert float(np.median(errors)) < 0.005, f"median gain error {np.median(errors):.4%}"


@pytest.mark.parametrize("case", [c for c, _ in CASES])
def test_gain_errors_match_stated_uncertainty_chi_square(
    recoveries: list[Recovery], case: str
) -> None:
    """The gain errors divided by the fit's propagated gain uncertainty should be
    standard normal: sum of squares against the chi-square distribution with one degree
    of freedom per board (scipy.stats.chi2), two-sided at 0.1 %."""
    rs = [r for r in recoveries if r.case == case]
    z = np.array([r.gain_error / r.gain_rel_stderr for r in rs])
    chi2 = float(np.sum(z**2))
    lo, hi = stats.chi2.ppf([0.0005, 0.9995], len(z))
    assert lo <= chi2 <= hi, f"{case}: sum z² = {chi2:.1f} outside [{lo:.1f}, {hi:.1f}]"
