"""The transistor equations, as pure numpy functions over a leading sample axis.

The model is fixed by the project's contract (docs/formats.md §2.1): the Ebers–Moll
transport form with a forward Early effect and an emission coefficient, i.e. the
Gummel–Poon model with no high-injection knee and no leakage terms. For an npn, with
VT = k·T/q:

    IF  = IS(T) * (exp(VBE / (n*VT)) - 1)
    IR  = IS(T) * (exp(VBC / (n*VT)) - 1)
    ICT = (IF - IR) * (1 - VBC / VA)
    IC  = ICT - IR / beta_r
    IB  = IF / beta + IR / beta_r
    IS(T) = IS * (T/T0)**xti * exp((q*Eg/k) * (1/T0 - 1/T)),   T0 = 298.15 K

Everything here works in the npn frame: a pnp is evaluated with its junction voltages
negated and its currents negated afterwards (the caller does both, see
:mod:`reconcile.engine.dc`). The two constants are exact by the 2019 definition of the
SI (written as literals: importing :mod:`scipy.constants` costs about 0.2 s of every
command's start-up; a test checks them against it).

The exponential is continued linearly above ``EXP_LIMIT`` (an argument of 80, about
2 V across a junction at room temperature) so that wild Newton iterates cannot
overflow; no operating point a real board can reach comes near it.
"""

from __future__ import annotations

import typing

from dataclasses import dataclass

import numpy as np

from reconcile.model.kinds import Region

T0_K = 298.15
"""Reference temperature of the device tables, in kelvin (25 C)."""

BOLTZMANN_J_PER_K = 1.380649e-23
"""The Boltzmann constant k, exact by the 2019 definition of the SI (SI Brochure, 9th
edition, 2.2), in J/K."""

ELEMENTARY_CHARGE_C = 1.602176634e-19
"""The elementary charge e, exact by the 2019 definition of the SI, in C."""

K_OVER_Q = BOLTZMANN_J_PER_K / ELEMENTARY_CHARGE_C
"""Boltzmann constant over the elementary charge, in V/K."""

EXP_LIMIT = 80.0


def thermal_voltage(temperature_k: np.ndarray | float) -> np.ndarray:
    """VT = k·T/q in volts."""
    return K_OVER_Q * np.asarray(temperature_k, dtype=float)


def saturation_current(
    is_25c: np.ndarray,
    temperature_k: np.ndarray,
    xti: np.ndarray | float = 3.0,
    bandgap_ev: np.ndarray | float = 1.11,
) -> np.ndarray:
    """IS at ``temperature_k`` from its value at 25 C (A)."""
    t = np.asarray(temperature_k, dtype=float)
    ratio = t / T0_K
    return is_25c * ratio**xti * np.exp((bandgap_ev / K_OVER_Q) * (1.0 / T0_K - 1.0 / t))


def _exp_continued(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """exp(x) and its derivative, continued linearly above EXP_LIMIT (as inside
    :func:`junction_point`, for callers that need the exponential alone)."""
    clipped = np.minimum(x, EXP_LIMIT)
    e = np.exp(clipped)
    over = x - clipped
    return e * (1.0 + over), e


@dataclass(frozen=True)
class JunctionState:
    """Terminal currents (npn frame) and their partial derivatives at (vbe, vbc).

    All arrays share one shape. ``ic`` flows into the collector, ``ib`` into the base;
    the emitter carries ``-(ic + ib)``. ``dic_dvbe`` etc. are in siemens.
    """

    ic: np.ndarray
    ib: np.ndarray
    dic_dvbe: np.ndarray
    dic_dvbc: np.ndarray
    dib_dvbe: np.ndarray
    dib_dvbc: np.ndarray


def junction_currents(
    vbe: np.ndarray,
    vbc: np.ndarray,
    is_t: np.ndarray,
    beta: np.ndarray,
    beta_r: np.ndarray,
    va: np.ndarray,
    n_vt: np.ndarray,
) -> JunctionState:
    """Evaluate the device equations in the npn frame.

    Parameters
    ----------
    vbe, vbc : junction voltages in V (npn frame).
    is_t : saturation current at the junction temperature, A.
    beta, beta_r : forward and reverse current gain.
    va : forward Early voltage in V (``inf`` for none).
    n_vt : emission coefficient times thermal voltage, V.
    """
    return JunctionState(*junction_point(vbe, vbc, is_t, beta, beta_r, va, n_vt))


def junction_point(vbe, vbc, is_t, beta, beta_r, va, n_vt):
    """The device equations themselves: (ic, ib, dic_dvbe, dic_dvbc, dib_dvbe, dib_dvbc).

    The one copy of them in the project. Written so that it runs unchanged on numpy
    arrays (:func:`junction_currents`) and, compiled by numba, on scalars (the optional
    compiled kernel, :mod:`reconcile.engine.kernel`). The exponential is continued
    linearly above :data:`EXP_LIMIT` (value and slope match at the joint).
    """
    x_f = vbe / n_vt
    x_r = vbc / n_vt
    c_f = np.minimum(x_f, EXP_LIMIT)
    c_r = np.minimum(x_r, EXP_LIMIT)
    def_ = np.exp(c_f)
    der = np.exp(c_r)
    ef = def_ * (1.0 + (x_f - c_f))
    er = der * (1.0 + (x_r - c_r))
    i_f = is_t * (ef - 1.0)
    i_r = is_t * (er - 1.0)
    g_f = is_t * def_ / n_vt
    g_r = is_t * der / n_vt
    inv_va = 1.0 / va  # 0 where va is inf
    q_early = 1.0 - vbc * inv_va
    transport = i_f - i_r
    i_rb = i_r / beta_r  # the reverse base current, in both terminal currents
    ic = transport * q_early - i_rb
    ib = i_f / beta + i_rb
    dib_dvbe = g_f / beta
    dib_dvbc = g_r / beta_r
    dic_dvbe = g_f * q_early
    dic_dvbc = -g_r * q_early - transport * inv_va - dib_dvbc
    return ic, ib, dic_dvbe, dic_dvbc, dib_dvbe, dib_dvbc


def conductance_slopes(vbe, vbc, is_t, beta, beta_r, va, n_vt,
                       wanted: tuple[str, ...] | None = None) -> dict[str, np.ndarray]:
    """Derivatives of the four conductances of :func:`junction_point` (npn frame).

    Returns arrays (..., 4), the last axis being (dic_dvbe, dic_dvbc, dib_dvbe,
    dib_dvbc) differentiated by ``vbe``, ``vbc`` (the second derivatives of the terminal
    currents), and at fixed junction voltages by ``is_t``, ``beta``, ``inv_va`` (1/VA)
    and ``n_vt`` (only those named in ``wanted``, when given). Worked out by hand from
    the equations above, the exponential's linear
    continuation included (its slope does not move above :data:`EXP_LIMIT`); the small-
    signal sensitivities (:mod:`reconcile.engine.small_signal_sensitivity`) use them, and
    tests/test_measurement_jacobian.py holds the rows they make to mpmath differences of
    a small-signal network built from the equations themselves.
    """
    want = set(SLOPE_VARIABLES if wanted is None else wanted)
    x_f, x_r = vbe / n_vt, vbc / n_vt
    ef, def_ = _exp_continued(x_f)
    er, der = _exp_continued(x_r)
    below_f, below_r = x_f < EXP_LIMIT, x_r < EXP_LIMIT
    g_f, g_r = is_t * def_ / n_vt, is_t * der / n_vt
    i_f, i_r = is_t * (ef - 1.0), is_t * (er - 1.0)
    inv_va = 1.0 / va
    q_early = 1.0 - vbc * inv_va
    k_f = np.where(below_f, g_f / n_vt, 0.0)  # dg_f/dvbe
    k_r = np.where(below_r, g_r / n_vt, 0.0)
    zero = np.zeros_like(g_f)
    out = {}
    if "vbe" in want:
        out["vbe"] = np.stack([k_f * q_early, -g_f * inv_va, k_f / beta, zero], axis=-1)
    if "vbc" in want:
        out["vbc"] = np.stack([-g_f * inv_va,
                               -k_r * q_early + 2.0 * g_r * inv_va - k_r / beta_r,
                               zero, k_r / beta_r], axis=-1)
    if "is_t" in want:  # every conductance is proportional to IS(T)
        conductances = _conductance_form(g_f, g_r, i_f, i_r, q_early, inv_va, beta, beta_r)
        out["is_t"] = conductances / np.asarray(is_t)[..., None]
    if "beta" in want:
        out["beta"] = np.stack([zero, zero, -g_f / beta**2, zero], axis=-1)
    if "inv_va" in want:
        out["inv_va"] = np.stack([-g_f * vbc, g_r * vbc - (i_f - i_r), zero, zero], axis=-1)
    if "n_vt" in want:
        # d g / d n_vt and d i / d n_vt at fixed junction voltages
        gn_f = -(np.where(below_f, x_f, 0.0) + 1.0) * g_f / n_vt
        gn_r = -(np.where(below_r, x_r, 0.0) + 1.0) * g_r / n_vt
        in_f, in_r = -g_f * x_f, -g_r * x_r
        out["n_vt"] = _conductance_form(gn_f, gn_r, in_f, in_r, q_early, inv_va, beta, beta_r)
    return out


def _conductance_form(g_f, g_r, i_f, i_r, q_early, inv_va, beta, beta_r) -> np.ndarray:
    """(..., 4) the conductances of :func:`junction_point` (dic_dvbe, dic_dvbc,
    dib_dvbe, dib_dvbc) as the linear form they are in the junction conductances g and
    currents i: applied to (g, i) it gives them, to their derivatives by a parameter
    that leaves q_early, VA and beta alone (IS(T), n·VT) their derivatives."""
    return np.stack([g_f * q_early, -g_r * q_early - (i_f - i_r) * inv_va - g_r / beta_r,
                     g_f / beta, g_r / beta_r], axis=-1)


SLOPE_VARIABLES = ("vbe", "vbc", "is_t", "beta", "inv_va", "n_vt")
"""What :func:`conductance_slopes` can differentiate the conductances by."""


def critical_voltage(is_t: np.ndarray, n_vt: np.ndarray) -> np.ndarray:
    """The junction voltage above which Newton steps are limited (V).

    The voltage where the diode's curvature radius is smallest,
    n·VT·ln(n·VT / (√2·IS)), the usual choice for junction limiting.
    """
    return n_vt * np.log(n_vt / (np.sqrt(2.0) * is_t))


def limit_junction(
    v_new: np.ndarray, v_old: np.ndarray, n_vt: np.ndarray, v_crit: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Limit a Newton step of a junction voltage (logarithmic damping above v_crit).

    Above ``v_crit`` a forward step larger than 2·n·VT is replaced by the step that
    changes the junction current by the same factor as a linear step would change its
    logarithm; the exponential can then never overflow and Newton keeps its quadratic
    convergence near the solution. Returns the limited voltage and a mask of where a
    limit was applied.
    """
    big_step = (v_new > v_crit) & (np.abs(v_new - v_old) > 2.0 * n_vt)
    if not big_step.any():
        return v_new, big_step
    arg = 1.0 + (v_new - v_old) / n_vt
    with np.errstate(invalid="ignore", divide="ignore"):
        from_old = np.where(arg > 0.0, v_old + n_vt * np.log(np.maximum(arg, 1e-300)), v_crit)
        from_zero = n_vt * np.log(np.maximum(v_new / n_vt, 1e-300))
    limited = np.where(v_old > 0.0, from_old, from_zero)
    return np.where(big_step, limited, v_new), big_step


REGION_THRESHOLD_V = 0.4
"""A junction counts as forward-biased above this voltage (npn frame)."""

REGIONS = typing.get_args(Region)


def region_codes(vbe: np.ndarray, vbc: np.ndarray) -> np.ndarray:
    """Operating region index into :data:`REGIONS` from npn-frame junction voltages."""
    be_on = vbe > REGION_THRESHOLD_V
    bc_on = vbc > REGION_THRESHOLD_V
    code = np.full(np.shape(vbe), 2, dtype=np.int8)  # cutoff
    code[be_on & ~bc_on] = 0
    code[be_on & bc_on] = 1
    code[~be_on & bc_on] = 3
    return code
