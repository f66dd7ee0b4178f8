"""Transistor sweeps: the sweep file and the extraction of IS, n and beta from it.

The sweep file (CSV)
--------------------
One row per point of a curve tracer's or source-measure unit's sweep, any number of
devices in one file::

    # Forward sweeps of a transistor lot; VCE held at 5 V, SMU accuracy in u_*.
    device,vbe,ic,ib,u_vbe,u_ic,u_ib,vce,temperature,note
    D001,0.5823,10.2u,61.9n,0.1m,0.02u,0.5n,5,25 C,
    D001,0.6421,101.5u,0.622u,0.1m,0.1u,1n,5,25 C,

- required columns ``device``, ``vbe``, ``ic``, ``ib``: the base-emitter voltage (V),
  collector current and base current (A) of one point, as measured (a pnp's are
  negative; a device is taken as pnp when all three are negative at every point);
- optional ``u_vbe``, ``u_ic``, ``u_ib``: one standard uncertainty of each, in the
  column's unit (a bare number is V or A, a value string such as ``20n`` stands for
  itself, ``0.1%`` is relative to the reading); blank means the bench-meter default
  of :data:`reconcile.readings.DEFAULT_UNCERTAINTY` (``voltage`` and ``current``);
- optional ``vce`` (V): the collector-emitter voltage of the point; when given, the
  Early factor is divided out (see below) and points that are not forward-active are
  flagged;
- optional ``temperature`` (``25 C``, ``298.15 K``; default 25 C) and ``note``.

Values are value strings (:mod:`reconcile.values`): ``0.652``, ``1.2m``, ``10u``,
``61.9n``. Header names are case-insensitive; ``#`` lines and blank lines are skipped.
Every bad row is reported, with file and line, in one :class:`~reconcile.errors.InputErrors`.
The format is its own file rather than rows of the readings file because a point is
three simultaneous values that belong together, and a readings ``quantity`` names a
board reading, not a device sweep.

The extraction
--------------
In forward-active operation with the base-collector junction reverse-biased
(VBC ≪ −n·VT), the contract's device model (:mod:`reconcile.devices`) gives

    IC = IS(T)·exp(VBE/(n·VT))·(1 − VBC/VA) + IS(T)/beta_r
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

import csv
import difflib
import math
import os
from dataclasses import dataclass

import numpy as np

from reconcile.engine import devices
from reconcile.errors import InputError, InputErrors
from reconcile.data.readings import COUNTS_FULL_SCALE, DEFAULT_UNCERTAINTY, UncertaintyRule
from reconcile.model.text_files import read_text
from reconcile.model.values import parse_tolerance, parse_value

__all__ = [
    "BEND_MIN_V",
    "BEND_T",
    "P_POOR",
    "SWEEP_COLUMNS",
    "SweepExtraction",
    "SweepSet",
    "extract",
    "is_sweep_text",
    "load_sweeps",
    "simulate_sweeps",
    "sweeps_from_text",
    "sweeps_to_csv",
]

SWEEP_COLUMNS = ("device", "vbe", "ic", "ib", "u_vbe", "u_ic", "u_ib", "vce", "temperature", "note")
_REQUIRED = ("device", "vbe", "ic", "ib")
_KIND = {"vbe": "volts", "ic": "amps", "ib": "amps", "u_vbe": "volts", "u_ic": "amps",
         "u_ib": "amps", "vce": "volts"}

BEND_T = 4.0
"""Significance (in standard errors) of the IC term that flags a bend. One-sided, a
normal tail of 3e-5: about one false flag in 30 000 clean devices."""

BEND_MIN_V = 0.2e-3
"""A bend is flagged only where R·IC at the sweep's top point also exceeds this (V):
below it the straight line's IS and n are not materially affected."""

P_POOR = 1e-3
"""Upper-tail χ² probability below which a fit is flagged ``poor-fit``."""

DEFAULT_TEMPERATURE_K = devices.T0_K


@dataclass(frozen=True)
class SweepSet:
    """Sweeps of D devices, K points at most, in the npn frame (magnitudes).

    Arrays are (D, K), padded with NaN where a device has fewer points (``mask`` is
    False there). Units: V and A; ``temperature_k`` is (D,) in kelvin, ``polarity``
    (D,) +1 for npn, −1 for pnp. ``vce`` is NaN where the file gave none.
    """

    devices: tuple[str, ...]
    vbe: np.ndarray
    ic: np.ndarray
    ib: np.ndarray
    u_vbe: np.ndarray
    u_ic: np.ndarray
    u_ib: np.ndarray
    vce: np.ndarray
    mask: np.ndarray
    temperature_k: np.ndarray
    polarity: np.ndarray
    path: str = "<text>"

    @property
    def n_devices(self) -> int:
        return len(self.devices)

    @property
    def points(self) -> np.ndarray:
        """Number of points of each device, (D,)."""
        return self.mask.sum(axis=1)

    def take(self, index: np.ndarray | slice) -> SweepSet:
        """The sweeps of a subset of devices."""
        idx = np.arange(self.n_devices)[index]
        return SweepSet(
            devices=tuple(self.devices[i] for i in idx),
            vbe=self.vbe[idx], ic=self.ic[idx], ib=self.ib[idx], u_vbe=self.u_vbe[idx],
            u_ic=self.u_ic[idx], u_ib=self.u_ib[idx], vce=self.vce[idx], mask=self.mask[idx],
            temperature_k=self.temperature_k[idx], polarity=self.polarity[idx], path=self.path,
        )


# ------------------------------------------------------------------------ loading
def is_sweep_text(text: str) -> bool:
    """True when the first non-comment line is a sweep header (has vbe, ic and ib)."""
    for line in text.removeprefix("\ufeff").splitlines():
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        names = {c.strip().lower() for c in next(csv.reader([s]))}
        return {"vbe", "ic", "ib"} <= names
    return False


def load_sweeps(path: str | os.PathLike[str], *, temperature_k: float | None = None) -> SweepSet:
    """Read a sweep file (see the module docstring).

    Parameters
    ----------
    path
        The CSV file (UTF-8, a byte-order mark is allowed).
    temperature_k
        Temperature of rows with a blank ``temperature`` cell (default 25 C).

    Raises
    ------
    InputError
        The file cannot be read.
    InputErrors
        The header or some rows are wrong; every problem is listed with its line.
    """
    name, text = read_text(path, "sweep file")
    return sweeps_from_text(text, path=name, temperature_k=temperature_k)


def _number(cell: str, kind: str) -> float:
    try:
        return float(cell)
    except ValueError:
        return parse_value(cell, kind)


def _uncertainty_cell(cell: str, kind: str, value: float) -> float:
    if cell.endswith("%"):
        return parse_tolerance(cell) * abs(value)
    return abs(_number(cell, kind))


def _default_u(rule: UncertaintyRule, value: np.ndarray) -> np.ndarray:
    """``rule.standard`` over an array (the same rule, vectorised)."""
    mag = np.abs(value)
    limits = rule.relative * mag + rule.absolute
    if rule.ranges:
        ranges = np.asarray(rule.ranges)
        i = np.minimum(np.searchsorted(ranges, mag, side="right"), len(ranges) - 1)
        limits = limits + rule.counts * ranges[i] / COUNTS_FULL_SCALE
    return limits / rule.divisor


def sweeps_from_text(
    text: str, path: str = "<text>", *, temperature_k: float | None = None
) -> SweepSet:
    """Parse sweep CSV text; see :func:`load_sweeps`."""
    t_default = DEFAULT_TEMPERATURE_K if temperature_k is None else float(temperature_k)
    lines = text.removeprefix("\ufeff").splitlines()
    numbered = [
        (i + 1, ln) for i, ln in enumerate(lines) if ln.strip() and not ln.lstrip().startswith("#")
    ]
    if not numbered:
        raise InputErrors([InputError(
            "no header line: the first line must be " + ",".join(SWEEP_COLUMNS[:4]), path=path
        )])
    rows = csv.reader([ln for _, ln in numbered])
    header = [c.strip().lower() for c in next(rows)]
    header_line = numbered[0][0]
    errors: list[InputError] = []
    index: dict[str, int] = {}
    for i, name in enumerate(header):
        if name not in SWEEP_COLUMNS:
            close = difflib.get_close_matches(name, SWEEP_COLUMNS, n=1, cutoff=0.6)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            errors.append(InputError(
                f"unknown column {name!r}{hint}; the columns are {', '.join(SWEEP_COLUMNS)}",
                path=path, line=header_line,
            ))
        elif name in index:
            errors.append(InputError(f"column {name!r} appears twice", path=path, line=header_line))
        else:
            index[name] = i
    for name in _REQUIRED:
        if name not in index:
            errors.append(InputError(f"missing required column {name!r} in the header",
                                     path=path, line=header_line))
    if errors:
        raise InputErrors(errors)

    names: list[str] = []
    cols = {c: [] for c in ("vbe", "ic", "ib", "u_vbe", "u_ic", "u_ib", "vce", "t")}
    line_of: list[int] = []
    for (line, _), cells in zip(numbered[1:], rows, strict=True):
        cells = [c.strip() for c in cells]
        if not any(cells):
            continue

        def cell(name: str, cells: list[str] = cells) -> str:
            i = index.get(name)
            return cells[i] if i is not None and i < len(cells) else ""

        device = cell("device")
        problems: list[str] = []
        if not device:
            problems.append("the device column is blank")
        values: dict[str, float] = {}
        for name in ("vbe", "ic", "ib", "vce"):
            text_cell = cell(name)
            if not text_cell:
                if name != "vce":
                    problems.append(f"{name} has no value")
                values[name] = math.nan
                continue
            try:
                values[name] = _number(text_cell, _KIND[name])
            except InputError as err:
                problems.append(f"{name}: {err.message}")
                continue
            if not math.isfinite(values[name]):
                problems.append(f"{name} value {text_cell!r} must be finite")
        for name, of in (("u_vbe", "vbe"), ("u_ic", "ic"), ("u_ib", "ib")):
            text_cell = cell(name)
            if not text_cell:
                values[name] = math.nan
                continue
            try:
                u = _uncertainty_cell(text_cell, _KIND[name], values.get(of, math.nan))
            except InputError as err:
                problems.append(f"{name}: {err.message}")
                continue
            if not (u > 0.0 and math.isfinite(u)):
                problems.append(f"{name} {text_cell!r} must be a positive standard uncertainty, "
                                "or blank for the default")
            values[name] = u
        t_cell = cell("temperature")
        t = t_default
        if t_cell:
            try:
                t = parse_value(t_cell, "temperature")
            except InputError as err:
                problems.append(f"temperature: {err.message}")
        if problems:
            errors.extend(InputError(p, path=path, line=line) for p in problems)
            continue
        names.append(device)
        line_of.append(line)
        for name in ("vbe", "ic", "ib", "u_vbe", "u_ic", "u_ib", "vce"):
            cols[name].append(values[name])
        cols["t"].append(t)
    if errors:
        raise InputErrors(errors)
    if not names:
        raise InputErrors([InputError("the sweep file has no points", path=path)])
    return _assemble(names, {k: np.asarray(v, dtype=float) for k, v in cols.items()},
                     np.asarray(line_of), path)


def _assemble(
    names: list[str], cols: dict[str, np.ndarray], lines: np.ndarray, path: str
) -> SweepSet:
    """Pad rows into (D, K) arrays, check signs and point counts, fill default u."""
    order_names, first = np.unique(np.asarray(names, dtype=object), return_index=True)
    by_first = np.argsort(first)
    device_names = [str(order_names[i]) for i in by_first]
    code_of = {d: i for i, d in enumerate(device_names)}
    dev = np.fromiter((code_of[n] for n in names), dtype=np.intp, count=len(names))
    d_count = len(device_names)
    order = np.argsort(dev, kind="stable")
    counts = np.bincount(dev, minlength=d_count)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    pos = np.arange(len(names)) - np.repeat(starts, counts)
    rows_d, rows_k = dev[order], pos
    k_max = int(counts.max())

    def pad(values: np.ndarray) -> np.ndarray:
        out = np.full((d_count, k_max), np.nan)
        out[rows_d, rows_k] = values[order]
        return out

    mask = np.zeros((d_count, k_max), dtype=bool)
    mask[rows_d, rows_k] = True
    vbe, ic, ib, vce = pad(cols["vbe"]), pad(cols["ic"]), pad(cols["ib"]), pad(cols["vce"])
    line = np.zeros((d_count, k_max), dtype=np.intp)
    line[rows_d, rows_k] = lines[order]
    errors: list[InputError] = []
    neg = np.where(mask, (vbe < 0) & (ic < 0) & (ib < 0), True).all(axis=1)
    pos_ok = np.where(mask, (vbe > 0) & (ic > 0) & (ib > 0), True).all(axis=1)
    polarity = np.where(neg, -1.0, 1.0)
    for d in np.flatnonzero(~(neg | pos_ok)):
        bad = np.flatnonzero(mask[d] & ~((vbe[d] > 0) & (ic[d] > 0) & (ib[d] > 0)))
        errors.append(InputError(
            f"device {device_names[d]!r}: vbe, ic and ib must all be positive (npn) or all "
            "negative (pnp) at every point, with ic and ib nonzero",
            path=path, line=int(line[d, bad[0]]),
        ))
    for d in np.flatnonzero(counts < 2):
        errors.append(InputError(
            f"device {device_names[d]!r} has {counts[d]} point; the extraction needs at least two",
            path=path, line=int(line[d, 0]),
        ))
    flip = polarity[:, None]
    vbe, ic, ib, vce = vbe * flip, ic * flip, ib * flip, vce * flip
    masked = np.where(mask, vbe, np.nan)
    spread = np.nanmax(masked, axis=1) - np.nanmin(masked, axis=1)
    for d in np.flatnonzero((counts >= 2) & ~(spread > 0)):
        errors.append(InputError(
            f"device {device_names[d]!r}: every point has the same vbe; the sweep needs at "
            "least two different values", path=path, line=int(line[d, 0]),
        ))
    if errors:
        raise InputErrors(errors)
    u_vbe, u_ic, u_ib = pad(cols["u_vbe"]), pad(cols["u_ic"]), pad(cols["u_ib"])
    u_vbe = np.where(np.isnan(u_vbe), _default_u(DEFAULT_UNCERTAINTY["voltage"], vbe), u_vbe)
    u_ic = np.where(np.isnan(u_ic), _default_u(DEFAULT_UNCERTAINTY["current"], ic), u_ic)
    u_ib = np.where(np.isnan(u_ib), _default_u(DEFAULT_UNCERTAINTY["current"], ib), u_ib)
    t = np.bincount(dev, weights=cols["t"], minlength=d_count) / counts
    return SweepSet(
        tuple(device_names), vbe, ic, ib, u_vbe, u_ic, u_ib, vce, mask, t, polarity, path
    )


def sweeps_to_csv(sweeps: SweepSet) -> str:
    """A sweep set as sweep-file text (as measured: a pnp's values negative)."""
    import io

    out = io.StringIO()
    has_vce = bool(np.any(np.isfinite(sweeps.vce[sweeps.mask])))
    cols = ["device", "vbe", "ic", "ib", "u_vbe", "u_ic", "u_ib"] + (["vce"] if has_vce else [])
    cols.append("temperature")
    w = csv.writer(out, lineterminator="\n")
    w.writerow(cols)
    for d, name in enumerate(sweeps.devices):
        s = sweeps.polarity[d]
        for k in np.flatnonzero(sweeps.mask[d]):
            row = [name, f"{s * sweeps.vbe[d, k]:.7g}", f"{s * sweeps.ic[d, k]:.6g}",
                   f"{s * sweeps.ib[d, k]:.6g}", f"{sweeps.u_vbe[d, k]:.3g}",
                   f"{sweeps.u_ic[d, k]:.3g}", f"{sweeps.u_ib[d, k]:.3g}"]
            if has_vce:
                v = sweeps.vce[d, k]
                row.append(f"{s * v:.6g}" if math.isfinite(v) else "")
            row.append(f"{sweeps.temperature_k[d]:.6g} K")
            w.writerow(row)
    return out.getvalue()


# --------------------------------------------------------------------- extraction
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
    m = sweeps.mask
    vt = devices.thermal_voltage(sweeps.temperature_k)  # (D,)
    vbe = np.where(m, sweeps.vbe, 0.0)
    ic = np.where(m, sweeps.ic, 1.0)
    ib = np.where(m, sweeps.ib, 1.0)
    vbc = vbe - np.where(np.isfinite(sweeps.vce), sweeps.vce, np.inf)
    early = np.ones_like(vbe)
    if math.isfinite(va_v):
        early = np.where(np.isfinite(vbc), 1.0 - vbc / va_v, 1.0)
    ic_c = ic / early
    y = np.log(ic_c)
    rel_ic = np.where(m, sweeps.u_ic / ic, 1.0)
    u_vbe = np.where(m, sweeps.u_vbe, 0.0)
    points = m.sum(axis=1)

    ones = np.ones_like(vbe)
    # Linear fit, slope iterated into the effective variance.
    var = rel_ic**2
    for _ in range(3):
        w = np.where(m, 1.0 / var, 0.0)
        xbar = np.sum(w * vbe, axis=1) / np.sum(w, axis=1)
        design = np.stack([ones, vbe - xbar[:, None]], axis=-1)
        coef, cov_c, chi_lin = _wls(design, y, w)
        slope = coef[:, 1]
        var = rel_ic**2 + (slope[:, None] * u_vbe) ** 2
    # The same weights for the three-term (series-resistance) fit.
    three = points >= 4
    ic_scale = np.sum(w * ic, axis=1) / np.sum(w, axis=1)
    design3 = np.stack([ones, vbe - xbar[:, None], ic / ic_scale[:, None]], axis=-1)
    coef3 = np.full((len(points), 3), np.nan)
    cov3 = np.full((len(points), 3, 3), np.nan)
    chi3 = np.full(len(points), np.nan)
    if np.any(three):
        coef3[three], cov3[three], chi3[three] = _wls(design3[three], y[three], w[three])
    birge3 = np.sqrt(np.maximum(chi3 / np.maximum(points - 3, 1), 1.0))
    gamma = coef3[:, 2] / ic_scale  # per ampere
    gamma_se = birge3 * np.sqrt(cov3[:, 2, 2]) / ic_scale
    bend_t = gamma / gamma_se
    top_shift = np.abs(gamma / coef[:, 1]) * np.max(np.where(m, ic, 0.0), axis=1)  # |R|·IC_max, V
    bent = three & (bend_t < -BEND_T) & (top_shift > BEND_MIN_V)
    curved = three & (bend_t > BEND_T) & (top_shift > BEND_MIN_V)

    # Adopted fit: three-term where the device bends down, else the straight line.
    a_c = np.where(bent, coef3[:, 0], coef[:, 0])  # value at xbar
    b = np.where(bent, coef3[:, 1], coef[:, 1])
    var_ac = np.where(bent, cov3[:, 0, 0], cov_c[:, 0, 0])
    var_b = np.where(bent, cov3[:, 1, 1], cov_c[:, 1, 1])
    cov_ab_c = np.where(bent, cov3[:, 0, 1], cov_c[:, 0, 1])
    chi = np.where(bent, chi3, chi_lin)
    dof = points - np.where(bent, 3, 2)
    birge = np.where(dof > 0, np.sqrt(np.maximum(chi / np.maximum(dof, 1), 1.0)), 1.0)
    # Intercept at VBE = 0: a = a_c − b·xbar.
    a = a_c - b * xbar
    var_a = var_ac + xbar**2 * var_b - 2 * xbar * cov_ab_c
    cov_ab = cov_ab_c - xbar * var_b
    n = 1.0 / (b * vt)
    dn_db = -1.0 / (b**2 * vt)
    ln_factor = np.log(devices.saturation_current(1.0, sweeps.temperature_k, xti, bandgap_ev))
    ln_is = a - ln_factor
    cov = np.empty((len(points), 2, 2))
    cov[:, 0, 0] = var_a
    cov[:, 0, 1] = cov[:, 1, 0] = cov_ab * dn_db
    cov[:, 1, 1] = var_b * dn_db**2
    cov *= (birge**2)[:, None, None]
    r_series = np.where(three, -gamma / b, np.nan)
    r_series_se = np.where(three, gamma_se / np.abs(b), np.nan)

    # Beta: weighted mean of ln(IC/IB).
    lnb = np.log(ic_c / ib)
    var_lnb = rel_ic**2 + np.where(m, sweeps.u_ib / ib, 1.0) ** 2
    wb = np.where(m, 1.0 / var_lnb, 0.0)
    ln_beta = np.sum(wb * lnb, axis=1) / np.sum(wb, axis=1)
    chi_b = np.sum(wb * (lnb - ln_beta[:, None]) ** 2, axis=1)
    dof_b = points - 1
    birge_b = np.where(dof_b > 0, np.sqrt(np.maximum(chi_b / np.maximum(dof_b, 1), 1.0)), 1.0)
    ln_beta_se = birge_b / np.sqrt(np.sum(wb, axis=1))

    from scipy.special import chdtrc  # chi-square upper tail

    p_fit = np.where(dof > 0, chdtrc(np.maximum(dof, 1), chi), 1.0)
    p_beta = np.where(dof_b > 0, chdtrc(np.maximum(dof_b, 1), chi_b), 1.0)
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
    flags = tuple(
        tuple(name for name, col in flag_cols if col[d]) for d in range(len(points))
    )
    return SweepExtraction(
        ln_is=ln_is, n=n, cov=cov, ln_beta=ln_beta, ln_beta_se=ln_beta_se,
        beta_chi_square=chi_b, chi_square=chi, dof=dof, r_series_ohm=r_series,
        r_series_se=r_series_se, bend_t=bend_t, slope=b, intercept=a,
        gamma=np.where(bent, gamma, 0.0), ic_corrected=np.where(m, ic_c, np.nan), flags=flags,
    )


# ---------------------------------------------------------------------- synthetic
def simulate_sweeps(
    names: list[str],
    is_25c: np.ndarray,
    beta: np.ndarray,
    n: np.ndarray,
    ic_targets: np.ndarray,
    *,
    vce_v: float = 5.0,
    va_v: float = math.inf,
    temperature_k: float = DEFAULT_TEMPERATURE_K,
    r_emitter_ohm: np.ndarray | float = 0.0,
    u_vbe_v: float = 50e-6,
    u_ic_rel: float = 5e-4,
    u_ib_rel: float = 1e-3,
    rng: np.random.Generator | None = None,
) -> SweepSet:
    """Sweeps of invented npn devices with known truth (for tests, benchmarks, demos).

    For each device and each target collector current (``ic_targets``, (K,) or (D, K),
    A) the intrinsic junction voltage is the closed-form inverse of the device
    equation, the terminal currents come from :func:`reconcile.devices.junction_currents`
    at VBC = VBE − ``vce_v`` (beta_r = 1), and the measured VBE adds
    ``r_emitter_ohm``·IE (an emitter lead resistance). With ``rng`` every value is
    disturbed by Gaussian noise of its standard uncertainty: ``u_vbe_v`` (V),
    ``u_ic_rel``·IC and ``u_ib_rel``·IB, which are also written as the points' u.
    """
    d = len(names)
    is_25c, beta, n = (np.broadcast_to(np.asarray(v, float), (d,)) for v in (is_25c, beta, n))
    targets = np.broadcast_to(np.asarray(ic_targets, float), (d, np.shape(ic_targets)[-1]))
    t = np.full(d, float(temperature_k))
    is_t = devices.saturation_current(is_25c, t)[:, None]
    n_vt = (n * devices.thermal_voltage(t))[:, None]
    vbe_int = n_vt * np.log(targets / is_t + 1.0)
    for _ in range(3):  # the Early factor depends on VBC, so iterate the inversion
        vbc = vbe_int - vce_v
        q = 1.0 - vbc / va_v
        vbe_int = n_vt * np.log(targets / (is_t * q) + 1.0)
    st = devices.junction_currents(vbe_int, vbe_int - vce_v, is_t, beta[:, None], 1.0, va_v, n_vt)
    ie = st.ic + st.ib
    vbe = vbe_int + np.asarray(r_emitter_ohm, float).reshape(-1, 1) * ie
    ic, ib = st.ic, st.ib
    u_vbe = np.full_like(vbe, u_vbe_v)
    u_ic, u_ib = u_ic_rel * np.abs(ic), u_ib_rel * np.abs(ib)
    if rng is not None:
        vbe = vbe + u_vbe * rng.standard_normal(vbe.shape)
        ic = ic + u_ic * rng.standard_normal(ic.shape)
        ib = ib + u_ib * rng.standard_normal(ib.shape)
    mask = np.ones(vbe.shape, dtype=bool)
    return SweepSet(tuple(names), vbe, ic, ib, u_vbe, u_ic, u_ib, np.full_like(vbe, vce_v),
                    mask, t, np.ones(d))
