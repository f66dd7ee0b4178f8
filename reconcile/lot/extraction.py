"""Extraction of IS, n and beta from transistor sweeps (the sweep file is
:mod:`reconcile.data.sweep_file`).

The extraction
--------------
    IB = IS(T)·exp(VBE/(n·VT))/beta − IS(T)/beta_r

so, once the Early factor (1 − VBC/VA) is divided out (VBC = VBE − VCE; the factor is 1
where ``vce`` is not given or VA is infinite) and the IS/beta_r terms are dropped
(about 1e-15 A against microamperes), ln IC is exactly linear in VBE with slope
1/(n·VT) and intercept ln IS(T), and IC/IB equals beta at every point.

- IS and n: weighted least squares of y = ln IC on x = VBE, each point weighted by the
  inverse of its effective variance (u_ic/IC)² + (slope·u_vbe)² (the slope is iterated
  twice), closed-form normal equations on centred x. IS is referred to 25 C with
  :func:`reconcile.devices.saturation_current`.
- beta: the weighted mean of ln(IC/IB) over the points, u² = (u_ic/IC)² + (u_ib/IB)².
- Where a fit's reduced χ² exceeds 1, its standard errors are multiplied by
  √(χ²/dof) (the Birge ratio; common practice when the scatter exceeds the stated
  uncertainties).
- Series resistance: a resistance R in the emitter or base lead adds R·IC to the
  measured VBE, so ln IC = a + b·(VBE − R·IC) bends down at high current. Each device is
  also fitted with the regressors (1, VBE, IC); a coefficient of IC below zero by more
  than :data:`BEND_T` standard errors (and a shift R·IC at the top point above
  :data:`BEND_MIN_V`) flags ``series-resistance``, and IS and n are then
  taken from that three-term fit (which removes the bend) with R = −coefficient/slope
  reported, never from a straight line averaged across the bend. Upward bending by
  as much flags ``curvature`` (self-heating raises IC at a given VBE).
- Other flags: ``poor-fit`` (the adopted fit's χ² upper-tail probability below
  :data:`P_POOR`), ``beta-varies`` (IC/IB not constant within its uncertainties, same
  test), ``few-points`` (fewer than four points: no bend test), ``not-forward-active``
  (a point with VBC above the region threshold of :mod:`reconcile.devices`).

Everything runs over a (devices, points) array with no loop over devices; devices with
fewer points are padded and the padding weighted zero.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from reconcile.data.sweep_file import SweepSet
from reconcile.engine import devices

__all__ = ["BEND_MIN_V", "BEND_T", "P_POOR", "SweepExtraction", "extract"]

BEND_T = 4.0
"""Significance (in standard errors) of the IC term that flags a bend. One-sided, a
normal tail of 3e-5: about one false flag in 30 000 clean devices."""

BEND_MIN_V = 0.2e-3
"""A bend is flagged only where R·IC at the sweep's top point also exceeds this (V):
below it the straight line's IS and n are not materially affected."""

P_POOR = 1e-3
"""Upper-tail χ² probability below which a fit is flagged ``poor-fit``."""


@dataclass(frozen=True)
class SweepExtraction:
    """Per-device results of :func:`extract`, arrays over the device axis (D,).

    ``ln_is`` is ln of IS at 25 C (A); ``cov`` (D, 2, 2) the covariance of
    (ln IS at 25 C, n); ``ln_beta`` and ``ln_beta_se`` the gain in log; ``chi_square``
    and ``dof`` of the adopted ln IC fit; ``r_series_ohm`` (and its standard error) the
    three-term fit's resistance (NaN with fewer than four points); ``bend_t`` the IC
    term's coefficient in standard errors; ``flags`` a tuple of flag names per device;
    ``slope``, ``intercept`` the adopted ln IC = intercept + slope·VBE line (at the
    sweep temperature, Early factor removed); ``ic_corrected`` the Early-corrected IC
    (D, K).
    """

    ln_is: np.ndarray
    n: np.ndarray
    cov: np.ndarray
    ln_beta: np.ndarray
    ln_beta_se: np.ndarray
    beta_chi_square: np.ndarray
    chi_square: np.ndarray
    dof: np.ndarray
    r_series_ohm: np.ndarray
    r_series_se: np.ndarray
    bend_t: np.ndarray
    slope: np.ndarray
    intercept: np.ndarray
    gamma: np.ndarray
    ic_corrected: np.ndarray
    flags: tuple[tuple[str, ...], ...]


def _wls(
    design: np.ndarray, y: np.ndarray, w: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weighted least squares per device: design (D, K, P), y and w (D, K).

    Returns coefficients (D, P), covariance (D, P, P) = inv(XᵀWX) and χ² (D,).
    Columns are scaled to unit weighted norm first, for conditioning.
    """
    xw = design * w[..., None]
    scale = np.sqrt(np.einsum("dkp,dkp->dp", xw, design))
    scale = np.where(scale > 0, scale, 1.0)
    xs = design / scale[:, None, :]
    a = np.einsum("dkp,dk,dkq->dpq", xs, w, xs)
    g = np.einsum("dkp,dk,dk->dp", xs, w, y)
    inv = np.linalg.inv(a)
    coef_s = np.einsum("dpq,dq->dp", inv, g)
    resid = y - np.einsum("dkp,dp->dk", xs, coef_s)
    chi = np.einsum("dk,dk,dk->d", w, resid, resid)
    coef = coef_s / scale
    cov = inv / (scale[:, :, None] * scale[:, None, :])
    return coef, cov, chi



@dataclass(frozen=True)
class _Points:
    """The sweep points prepared for the fits: masked, Early-corrected, (D, K)."""

    m: np.ndarray
    vt: np.ndarray
    vbe: np.ndarray
    ic: np.ndarray
    ib: np.ndarray
    ic_c: np.ndarray
    y: np.ndarray
    rel_ic: np.ndarray
    u_vbe: np.ndarray
    points: np.ndarray


def _prepare(sweeps: SweepSet, va_v: float) -> _Points:
    m = sweeps.mask
    vbe = np.where(m, sweeps.vbe, 0.0)
    ic = np.where(m, sweeps.ic, 1.0)
    vbc = vbe - np.where(np.isfinite(sweeps.vce), sweeps.vce, np.inf)
    early = np.ones_like(vbe)
    if math.isfinite(va_v):
        early = np.where(np.isfinite(vbc), 1.0 - vbc / va_v, 1.0)
    ic_c = ic / early
    return _Points(
        m=m, vt=devices.thermal_voltage(sweeps.temperature_k), vbe=vbe, ic=ic,
        ib=np.where(m, sweeps.ib, 1.0), ic_c=ic_c, y=np.log(ic_c),
        rel_ic=np.where(m, sweeps.u_ic / ic, 1.0), u_vbe=np.where(m, sweeps.u_vbe, 0.0),
        points=m.sum(axis=1),
    )


def _line_fit(p: _Points):
    """ln IC on VBE, the slope iterated into the effective variance; (coef, cov, χ², w, x̄)."""
    ones = np.ones_like(p.vbe)
    var = p.rel_ic**2
    for _ in range(3):
        w = np.where(p.m, 1.0 / var, 0.0)
        xbar = np.sum(w * p.vbe, axis=1) / np.sum(w, axis=1)
        design = np.stack([ones, p.vbe - xbar[:, None]], axis=-1)
        coef, cov_c, chi_lin = _wls(design, p.y, w)
        slope = coef[:, 1]
        var = p.rel_ic**2 + (slope[:, None] * p.u_vbe) ** 2
    return coef, cov_c, chi_lin, w, xbar


def _three_term_fit(p: _Points, w: np.ndarray, xbar: np.ndarray):
    """The (1, VBE, IC) fit with the line's weights; (coef, cov, χ², γ, γ's standard
    error), NaN for devices with fewer than four points."""
    ones = np.ones_like(p.vbe)
    three = p.points >= 4
    ic_scale = np.sum(w * p.ic, axis=1) / np.sum(w, axis=1)
    design3 = np.stack([ones, p.vbe - xbar[:, None], p.ic / ic_scale[:, None]], axis=-1)
    coef3 = np.full((len(p.points), 3), np.nan)
    cov3 = np.full((len(p.points), 3, 3), np.nan)
    chi3 = np.full(len(p.points), np.nan)
    if np.any(three):
        coef3[three], cov3[three], chi3[three] = _wls(design3[three], p.y[three], w[three])
    birge3 = np.sqrt(np.maximum(chi3 / np.maximum(p.points - 3, 1), 1.0))
    gamma = coef3[:, 2] / ic_scale  # per ampere
    gamma_se = birge3 * np.sqrt(cov3[:, 2, 2]) / ic_scale
    return coef3, cov3, chi3, gamma, gamma_se


def _beta_fit(p: _Points, u_ib: np.ndarray):
    """Weighted mean of ln(IC/IB): (ln beta, its standard error, χ², dof)."""
    lnb = np.log(p.ic_c / p.ib)
    var_lnb = p.rel_ic**2 + np.where(p.m, u_ib / p.ib, 1.0) ** 2
    wb = np.where(p.m, 1.0 / var_lnb, 0.0)
    ln_beta = np.sum(wb * lnb, axis=1) / np.sum(wb, axis=1)
    chi_b = np.sum(wb * (lnb - ln_beta[:, None]) ** 2, axis=1)
    dof_b = p.points - 1
    birge_b = np.where(dof_b > 0, np.sqrt(np.maximum(chi_b / np.maximum(dof_b, 1), 1.0)), 1.0)
    ln_beta_se = birge_b / np.sqrt(np.sum(wb, axis=1))
    return ln_beta, ln_beta_se, chi_b, dof_b


def extract(
    sweeps: SweepSet,
    *,
    va_v: float = math.inf,
    xti: float = 3.0,
    bandgap_ev: float = 1.11,
) -> SweepExtraction:
    """Extract IS (at 25 C), n and beta of every device (see the module docstring).

    Parameters
    ----------
    sweeps
        The measured sweeps.
    va_v
        Forward Early voltage in V used to divide out the Early factor where a point has
        ``vce`` (default ``inf``: no correction).
    xti, bandgap_ev
        Temperature exponent and bandgap (eV) for referring IS to 25 C
        (:func:`reconcile.devices.saturation_current`).
    """
    p = _prepare(sweeps, va_v)
    coef, cov_c, chi_lin, w, xbar = _line_fit(p)
    coef3, cov3, chi3, gamma, gamma_se = _three_term_fit(p, w, xbar)
    three = p.points >= 4
    bend_t = gamma / gamma_se
    top_shift = np.abs(gamma / coef[:, 1]) * np.max(np.where(p.m, p.ic, 0.0), axis=1)  # |R|·IC_max
    bent = three & (bend_t < -BEND_T) & (top_shift > BEND_MIN_V)
    curved = three & (bend_t > BEND_T) & (top_shift > BEND_MIN_V)

    # Adopted fit: three-term where the device bends down, else the straight line.
    a_c = np.where(bent, coef3[:, 0], coef[:, 0])  # value at xbar
    b = np.where(bent, coef3[:, 1], coef[:, 1])
    var_ac = np.where(bent, cov3[:, 0, 0], cov_c[:, 0, 0])
    var_b = np.where(bent, cov3[:, 1, 1], cov_c[:, 1, 1])
    cov_ab_c = np.where(bent, cov3[:, 0, 1], cov_c[:, 0, 1])
    chi = np.where(bent, chi3, chi_lin)
    dof = p.points - np.where(bent, 3, 2)
    birge = np.where(dof > 0, np.sqrt(np.maximum(chi / np.maximum(dof, 1), 1.0)), 1.0)
    # Intercept at VBE = 0: a = a_c − b·xbar.
    a = a_c - b * xbar
    var_a = var_ac + xbar**2 * var_b - 2 * xbar * cov_ab_c
    cov_ab = cov_ab_c - xbar * var_b
    n = 1.0 / (b * p.vt)
    dn_db = -1.0 / (b**2 * p.vt)
    ln_factor = np.log(devices.saturation_current(1.0, sweeps.temperature_k, xti, bandgap_ev))
    ln_is = a - ln_factor
    cov = np.empty((len(p.points), 2, 2))
    cov[:, 0, 0] = var_a
    cov[:, 0, 1] = cov[:, 1, 0] = cov_ab * dn_db
    cov[:, 1, 1] = var_b * dn_db**2
    cov *= (birge**2)[:, None, None]
    r_series = np.where(three, -gamma / b, np.nan)
    r_series_se = np.where(three, gamma_se / np.abs(b), np.nan)

    ln_beta, ln_beta_se, chi_b, dof_b = _beta_fit(p, sweeps.u_ib)
    flags = _flags(sweeps, p.m, bent=bent, curved=curved, three=three,
                   chi=chi, dof=dof, chi_b=chi_b, dof_b=dof_b)
    return SweepExtraction(
        ln_is=ln_is, n=n, cov=cov, ln_beta=ln_beta, ln_beta_se=ln_beta_se,
        beta_chi_square=chi_b, chi_square=chi, dof=dof, r_series_ohm=r_series,
        r_series_se=r_series_se, bend_t=bend_t, slope=b, intercept=a,
        gamma=np.where(bent, gamma, 0.0), ic_corrected=np.where(p.m, p.ic_c, np.nan),
        flags=flags,
    )


def _flags(sweeps: SweepSet, m: np.ndarray, *, bent, curved, three, chi, dof, chi_b, dof_b):
    """The flag names of each device (see the module docstring)."""
    from reconcile.inference.chi_square import upper_tail

    p_fit = np.where(dof > 0, upper_tail(chi, np.maximum(dof, 1)), 1.0)
    p_beta = np.where(dof_b > 0, upper_tail(chi_b, np.maximum(dof_b, 1)), 1.0)
    with np.errstate(invalid="ignore"):
        vbc_pts = np.where(m & np.isfinite(sweeps.vce), sweeps.vbe - sweeps.vce, -np.inf)
    saturated = np.any(vbc_pts > devices.REGION_THRESHOLD_V, axis=1)
    flag_cols = (
        ("series-resistance", bent),
        ("curvature", curved),
        ("poor-fit", p_fit < P_POOR),
        ("beta-varies", p_beta < P_POOR),
        ("few-points", ~three),
        ("not-forward-active", saturated),
    )
    return tuple(
        tuple(name for name, col in flag_cols if col[d]) for d in range(len(chi))
    )
