"""Recovery of synthetic boards: does the fit find what was really built, and are its
standard errors honest?

For each of two invented sample boards, 150 "true" boards are drawn inside the drawing's
tolerances (resistors, capacitors and supplies uniform within tolerance), read with the
engine through the measurement model (meter attached) plus seeded Gaussian noise of each
reading's default standard uncertainty, and fitted. Their devices and temperature come
two ways (``fit_support.draw_truth``):

* 50 per board from the fit's own prior (device IS and beta log-normal as in
  :mod:`reconcile.inference.priors`, junction temperature ambient plus a Gaussian);
* 100 per board from outside it: IS and beta log-uniform across the whole datasheet
  range, its edges as likely as its middle, and the temperature uniform within ±2 sd of
  ambient. A Bayesian interval is calibrated by construction when the truths come from
  its prior; these 200 boards check that the intervals stay honest when they do not.

Checks, each against a named outside reference:

* coverage of the 2-sigma intervals of every parameter the readings inform
  (``informed_by == "readings"``), pooled over parameters and boards, against the
  binomial bound below (truths from the prior), and within 0.95 ± 0.03 on the 200
  boards drawn outside it (the tolerance is the requirement's; about 3.5 binomial
  standard deviations at these 900-odd intervals, common practice);
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

# every test shares the module's fixture of 300 fits (about 25 s of CPU on this machine)
pytestmark = pytest.mark.slow

#: (sample board, readings added to :func:`full_plan`)
CASES = (
    ("line_receiver_cb", (("resistance", "RE"),)),
    ("preamp_ce", ()),
)
#: boards per sample board, by where their devices and temperature are drawn from
BOARDS_PER_SPREAD = {"prior": 50, "datasheet": 100}
SEED = 20240603

#: Nominal coverage the bound is built around. A Gaussian ±2σ interval covers 95.45 %;
#: the issue states 95 %, which leaves that 0.45 % as extra margin.
COVERAGE = 0.95
#: The requirement's band for the truths drawn outside the prior: 0.95 ± 0.03.
OUTSIDE_BAND = 0.03
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
    spread: str  # "prior" or "datasheet": where the truth's devices were drawn from
    z_internal: tuple[float, ...]  # (fit − truth)/sd in internal coordinates, informed
    z_external: tuple[float, ...]  # (value − truth)/stderr as reported, informed
    gain_error: float  # (fitted − true)/true
    gain_rel_stderr: float  # propagated gain stderr / fitted gain
    success: bool


def _recover(case: str, spread: str, extra: tuple, rng: np.random.Generator) -> Recovery:
    board = sample_board(case)
    plan = full_plan(board) + list(extra)
    truth = draw_truth(board, rng, spread=spread)
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
        spread=spread,
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
        for j, (spread, n) in enumerate(BOARDS_PER_SPREAD.items()):
            rng = np.random.default_rng([SEED, i, j])
            out += [_recover(case, spread, extra, rng) for _ in range(n)]
    return out


def _pooled(recoveries: list[Recovery], spread: str, *, external: bool) -> np.ndarray:
    """|z| of every informed interval of the boards drawn with ``spread``, pooled."""
    rs = [r for r in recoveries if r.spread == spread]
    return np.abs(np.concatenate([r.z_external if external else r.z_internal for r in rs]))


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
    95 % and the Gaussian 95.45 % absorb that. Truths drawn from the fit's own prior.
    """
    z = _pooled(recoveries, "prior", external=False)
    n = z.size
    coverage = float(np.mean(z <= 2.0))
    bound = binomial_lower_bound(COVERAGE, n)
    assert n >= 400, f"only {n} informed intervals"
    assert coverage >= bound, f"coverage {coverage:.4f} over {n} intervals < bound {bound:.4f}"


def test_reported_two_sigma_intervals_meet_binomial_bound(recoveries: list[Recovery]) -> None:
    """The same check on the intervals as reported (value ± 2·stderr, external units):
    what a user of ``fit --json`` reads. Reference: binomial bound as above."""
    z = _pooled(recoveries, "prior", external=True)
    n = z.size
    coverage = float(np.mean(z <= 2.0))
    bound = binomial_lower_bound(COVERAGE, n)
    assert coverage >= bound, f"coverage {coverage:.4f} over {n} intervals < bound {bound:.4f}"


@pytest.mark.parametrize("external", [False, True], ids=["internal", "reported"])
def test_two_sigma_coverage_with_truths_outside_the_prior(
    recoveries: list[Recovery], external: bool
) -> None:
    """The 200 boards whose devices are drawn across their whole datasheet range and
    whose temperature is drawn uniformly (not from the fit's prior): the pooled coverage
    of the ±2σ intervals of every parameter informed by readings lies within 0.95 ±
    0.03, neither too narrow nor too wide. Reference: a Gaussian ±2σ interval covers
    95.45 %; the binomial sd of the pooled fraction at these n is about 0.007 (normal
    approximation, as above), and the band also absorbs the correlation of one board's
    intervals. Internal coordinates and as reported."""
    boards = sum(r.spread == "datasheet" for r in recoveries)
    z = _pooled(recoveries, "datasheet", external=external)
    coverage = float(np.mean(z <= 2.0))
    assert boards >= 200 and z.size >= 800, f"{boards} boards, {z.size} intervals"
    assert abs(coverage - COVERAGE) <= OUTSIDE_BAND, (
        f"coverage {coverage:.4f} over {z.size} intervals outside {COVERAGE} ± {OUTSIDE_BAND}")


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
