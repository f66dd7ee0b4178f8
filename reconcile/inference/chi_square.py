"""The chi-square upper tail, P(χ²_ν > x): the p-value of every goodness-of-fit verdict.

It is the regularized upper incomplete gamma function Q(ν/2, x/2), evaluated as usual:
by its power series for P = 1 − Q where x/2 < ν/2 + 1, and by its continued fraction
(modified Lentz) for Q elsewhere, so that neither branch subtracts from 1 where the
answer is small (Press et al., *Numerical Recipes*, 3rd ed., §6.2, from memory). Written
here because ``scipy.special`` costs about 0.2 s of every command's start-up, which
``diagnose`` would pay for this one function; the tests hold it to mpmath and to
``scipy.stats.chi2.sf``. Degrees of freedom may be fractional (an effective count).
"""

from __future__ import annotations

import math

import numpy as np

_EPS = 1e-15
_TINY = 1e-300
_MAX_TERMS = 1000


def upper_tail(chi_square, dof):
    """P(χ²_dof > chi_square), elementwise; a float for scalar input.

    ``dof`` must be positive; ``chi_square`` ≤ 0 gives 1, +inf gives 0, NaN gives NaN.
    """
    x = np.asarray(chi_square, dtype=float) / 2.0
    a = np.asarray(dof, dtype=float) / 2.0
    x, a = np.broadcast_arrays(x, a)
    if np.any(a <= 0):
        raise ValueError("degrees of freedom must be positive")
    out = np.full(x.shape, np.nan)
    out[x <= 0] = 1.0
    out[np.isposinf(x)] = 0.0
    inside = np.isfinite(x) & (x > 0)
    series = inside & (x < a + 1.0)
    fraction = inside & ~series
    if series.any():
        out[series] = 1.0 - _series(a[series], x[series])
    if fraction.any():
        out[fraction] = _continued_fraction(a[fraction], x[fraction])
    out = np.clip(out, 0.0, 1.0, where=~np.isnan(out), out=out)
    return float(out) if out.ndim == 0 else out


def _prefactor(a: np.ndarray, x: np.ndarray) -> np.ndarray:
    """exp(−x + a ln x − ln Γ(a))."""
    lgamma = np.frompyfunc(math.lgamma, 1, 1)(a).astype(float)
    return np.exp(-x + a * np.log(x) - lgamma)


def _series(a: np.ndarray, x: np.ndarray) -> np.ndarray:
    """The regularized lower incomplete gamma P(a, x) by its power series."""
    term = 1.0 / a
    total = term.copy()
    denominator = a.copy()
    for _ in range(_MAX_TERMS):
        denominator = denominator + 1.0
        term = term * x / denominator
        total = total + term
        if np.all(np.abs(term) < np.abs(total) * _EPS):
            break
    return total * _prefactor(a, x)


def _continued_fraction(a: np.ndarray, x: np.ndarray) -> np.ndarray:
    """The regularized upper incomplete gamma Q(a, x) by its continued fraction."""
    b = x + 1.0 - a
    c = np.full(x.shape, 1.0 / _TINY)
    d = 1.0 / np.where(np.abs(b) < _TINY, _TINY, b)
    h = d.copy()
    for i in range(1, _MAX_TERMS):
        an = -i * (i - a)
        b = b + 2.0
        d = an * d + b
        d = np.where(np.abs(d) < _TINY, _TINY, d)
        c = b + an / c
        c = np.where(np.abs(c) < _TINY, _TINY, c)
        d = 1.0 / d
        step = d * c
        h = h * step
        if np.all(np.abs(step - 1.0) < _EPS):
            break
    return _prefactor(a, x) * h
