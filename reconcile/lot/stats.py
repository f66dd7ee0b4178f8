"""Statistics of a characterised lot: summary, outliers, bins, matching, capability.

Every function here takes per-device arrays (the fits are made elsewhere:
:mod:`reconcile.jig_fit`, :mod:`reconcile.data.sweep_file`) and returns plain values.

Rules, with their sources:

- Summary: mean and sample standard deviation (N − 1) of beta, percentiles by linear
  interpolation (:func:`numpy.percentile`'s default); IS as a geometric mean and the
  standard deviation of log10 IS; n as mean and standard deviation. Devices flagged
  as outliers or not converged are left out of the summary (and listed).
- Outliers: the modified z-score of Iglewicz and Hoaglin (1993; from memory),
  z = 0.6745·(x − median)/MAD with MAD the median absolute deviation, on ln beta,
  log10 IS and (where fitted) n; |z| > :data:`OUTLIER_Z` = 3.5 is an outlier. A
  variable whose MAD is zero (e.g. n held fixed) is skipped.
- Bins: user-given beta edges e0 < e1 < … ; bin i is [e_i, e_i+1), the last one closed;
  devices below e0 or above the last edge are counted apart.
- Matching: the VBE of each device at a stated collector current from its fitted IS
  and n, by the closed-form inverse of the forward diode equation of the device model,
  VBE = n·VT·ln(IC/IS(T) + 1) (VT and IS(T) from :mod:`reconcile.devices`; the Early
  factor is taken as common to both devices of a pair and left out). Devices are paired
  greedily, smallest |ΔVBE| first, among pairs with |ΔVBE| ≤ the limit and
  beta ratio ≤ the limit; candidates are each device's :data:`MATCH_NEIGHBOURS`
  nearest neighbours in VBE (greedy, not an optimal matching). Sets of k > 2 are
  windows of k devices consecutive in VBE order, taken greedily by VBE spread.
  Devices with any flag are not matched.
- Capability: Cp = (USL − LSL)/(6σ), Cpk = min(USL − μ, μ − LSL)/(3σ), one-sided
  Cpl = (μ − LSL)/(3σ), Cpu = (USL − μ)/(3σ) (common practice in statistical process
  control), on beta with the summary's μ and σ.
- Device table: value, low and high of each parameter from the lot, written so that
  :mod:`reconcile.priors` reads them back as the lot's own distribution: the value is
  the geometric mean (beta, IS) or mean (n), low and high two standard deviations of
  ln beta, log10 IS or n either side. priors.py takes such a range as ±2σ, so its prior
  sd equals the lot's spread (which includes the measurement scatter, a slightly
  conservative prior).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from reconcile.engine import devices

OUTLIER_Z = 3.5
MAD_TO_Z = 0.6745
MATCH_NEIGHBOURS = 32
TOML_DIGITS = 6


@dataclass(frozen=True)
class LotSummary:
    """Lot statistics over the devices used (outliers and failed fits left out)."""

    count: int
    used: int
    excluded: tuple[str, ...]
    beta_mean: float
    beta_sd: float
    beta_mean_stderr: float
    beta_percentiles: dict[str, float]  # p05, p50, p95
    beta_min: float
    beta_max: float
    ln_beta_mean: float
    ln_beta_sd: float
    log10_is_mean: float
    log10_is_sd: float
    is_percentiles: dict[str, float]
    n_mean: float
    n_sd: float
    n_fitted: bool

    @property
    def is_geo_mean(self) -> float:
        return 10.0**self.log10_is_mean

    def to_dict(self) -> dict:
        return {
            "count": self.count,
            "used": self.used,
            "excluded": list(self.excluded),
            "beta": {
                "mean": self.beta_mean, "sd": self.beta_sd, "mean_stderr": self.beta_mean_stderr,
                **self.beta_percentiles, "min": self.beta_min, "max": self.beta_max,
                "geo_mean": math.exp(self.ln_beta_mean), "ln_sd": self.ln_beta_sd,
            },
            "IS": {"geo_mean": self.is_geo_mean, "log10_sd": self.log10_is_sd,
                   **self.is_percentiles},
            "n": {"mean": self.n_mean, "sd": self.n_sd, "fitted": self.n_fitted},
        }


def _sd(x: np.ndarray) -> float:
    return float(np.std(x, ddof=1)) if x.size >= 2 else math.nan


def _percentiles(x: np.ndarray) -> dict[str, float]:
    if x.size == 0:
        return {"p05": math.nan, "p50": math.nan, "p95": math.nan}
    p = np.percentile(x, [5.0, 50.0, 95.0])
    return {"p05": float(p[0]), "p50": float(p[1]), "p95": float(p[2])}


def summarise(
    names: tuple[str, ...],
    beta: np.ndarray,
    log10_is: np.ndarray,
    n: np.ndarray,
    used: np.ndarray,
    *,
    n_fitted: bool,
) -> LotSummary:
    """Lot statistics over the devices where ``used`` is True."""
    b, li, nn = beta[used], log10_is[used], n[used]
    excluded = tuple(name for name, u in zip(names, used, strict=True) if not u)
    count = int(b.size)
    mean = float(np.mean(b)) if count else math.nan
    sd = _sd(b)
    is_p = _percentiles(10.0**li)
    return LotSummary(
        count=len(names), used=count, excluded=excluded,
        beta_mean=mean, beta_sd=sd, beta_mean_stderr=sd / math.sqrt(count) if count else math.nan,
        beta_percentiles=_percentiles(b),
        beta_min=float(np.min(b)) if count else math.nan,
        beta_max=float(np.max(b)) if count else math.nan,
        ln_beta_mean=float(np.mean(np.log(b))) if count else math.nan,
        ln_beta_sd=_sd(np.log(b)),
        log10_is_mean=float(np.mean(li)) if count else math.nan,
        log10_is_sd=_sd(li), is_percentiles=is_p,
        n_mean=float(np.mean(nn)) if count else math.nan,
        n_sd=_sd(nn) if n_fitted else 0.0, n_fitted=n_fitted,
    )


# ------------------------------------------------------------------------ outliers
def robust_z(x: np.ndarray, among: np.ndarray | None = None) -> np.ndarray:
    """Modified z-score 0.6745·(x − median)/MAD (Iglewicz and Hoaglin; from memory).

    The median and MAD are taken over ``among`` (a mask; default all finite values).
    Returns zeros where the MAD is zero (no spread to judge against).
    """
    ok = np.isfinite(x) if among is None else among & np.isfinite(x)
    if not np.any(ok):
        return np.zeros_like(x)
    med = np.median(x[ok])
    mad = np.median(np.abs(x[ok] - med))
    if not mad > 0:
        return np.zeros_like(x)
    return MAD_TO_Z * (x - med) / mad


def find_outliers(
    variables: dict[str, np.ndarray], among: np.ndarray, threshold: float = OUTLIER_Z
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Outlier mask over devices and the robust z of each variable."""
    scores = {name: robust_z(v, among) for name, v in variables.items()}
    mask = np.zeros(len(among), dtype=bool)
    for z in scores.values():
        mask |= np.abs(z) > threshold
    return mask & among, scores


# ---------------------------------------------------------------------------- bins
@dataclass(frozen=True)
class BetaBin:
    """Devices with low ≤ beta < high (``None`` for an open end)."""

    low: float | None
    high: float | None
    devices: tuple[str, ...]

    @property
    def label(self) -> str:
        if self.low is None:
            return f"<{self.high:g}"
        if self.high is None:
            return f">{self.low:g}"
        return f"{self.low:g}-{self.high:g}"

    def to_dict(self) -> dict:
        return {"low": self.low, "high": self.high, "label": self.label,
                "count": len(self.devices), "devices": list(self.devices)}


def bin_by_beta(
    names: tuple[str, ...], beta: np.ndarray, edges: tuple[float, ...], include: np.ndarray
) -> tuple[tuple[BetaBin, ...], list[str | None]]:
    """Bins by the given edges, plus an open bin below and above when occupied.

    Returns the bins and each device's bin label (None where not included).
    """
    e = np.asarray(edges, dtype=float)
    idx = np.searchsorted(e, beta, side="right")  # 0: below e0; len(e): above the last
    idx = np.where(beta == e[-1], len(e) - 1, idx)
    bins: list[BetaBin] = []
    labels: list[str | None] = [None] * len(names)
    for i in range(len(e) + 1):
        low = None if i == 0 else float(e[i - 1])
        high = None if i == len(e) else float(e[i])
        members = np.flatnonzero((idx == i) & include)
        if (low is None or high is None) and members.size == 0:
            continue
        b = BetaBin(low, high, tuple(names[j] for j in members))
        for j in members:
            labels[j] = b.label
        bins.append(b)
    return tuple(bins), labels


# ------------------------------------------------------------------------ matching
def vbe_at_current(
    ln_is_25c: np.ndarray,
    n: np.ndarray,
    cov: np.ndarray,
    current_a: float,
    temperature_k: float,
    *,
    xti: float = 3.0,
    bandgap_ev: float = 1.11,
) -> tuple[np.ndarray, np.ndarray]:
    """VBE (V) at collector current ``current_a`` and its standard error.

    VBE = n·VT·ln(IC/IS(T) + 1), the forward diode equation of the device model solved
    for VBE; ``cov`` (D, 2, 2) is the covariance of (ln IS at 25 C, n).
    """
    vt = float(devices.thermal_voltage(temperature_k))
    is_t = devices.saturation_current(np.exp(ln_is_25c), temperature_k, xti, bandgap_ev)
    ratio = current_a / is_t
    log_term = np.log1p(ratio)
    vbe = n * vt * log_term
    d_lnis = -n * vt * ratio / (1.0 + ratio)
    d_n = vt * log_term
    var = d_lnis**2 * cov[:, 0, 0] + 2 * d_lnis * d_n * cov[:, 0, 1] + d_n**2 * cov[:, 1, 1]
    return vbe, np.sqrt(np.maximum(var, 0.0))


@dataclass(frozen=True)
class MatchedSet:
    """Devices matched for a differential stage (a pair, or a set of ``set_size``)."""

    devices: tuple[str, ...]
    delta_vbe_v: float  # largest VBE minus smallest, at the matching current
    delta_vbe_stderr_v: float
    beta_ratio: float  # largest beta over smallest

    def to_dict(self) -> dict:
        return {"devices": list(self.devices), "delta_vbe": self.delta_vbe_v,
                "delta_vbe_stderr": self.delta_vbe_stderr_v, "beta_ratio": self.beta_ratio}


def match_devices(
    names: tuple[str, ...],
    vbe: np.ndarray,
    vbe_se: np.ndarray,
    beta: np.ndarray,
    eligible: np.ndarray,
    *,
    vbe_limit_v: float,
    beta_ratio: float,
    set_size: int = 2,
) -> tuple[MatchedSet, ...]:
    """Greedy matching by VBE difference within both limits (see the module docstring)."""
    cand = np.flatnonzero(eligible & np.isfinite(vbe) & np.isfinite(beta))
    if cand.size < set_size:
        return ()
    order = cand[np.argsort(vbe[cand], kind="stable")]
    v, lb = vbe[order], np.log(beta[order])
    m = order.size
    log_ratio = math.log(beta_ratio)
    if set_size == 2:
        firsts, seconds = [], []
        for k in range(1, min(MATCH_NEIGHBOURS, m - 1) + 1):
            i = np.arange(m - k)
            ok = (v[i + k] - v[i] <= vbe_limit_v) & (np.abs(lb[i + k] - lb[i]) <= log_ratio)
            if not np.any(v[i + k] - v[i] <= vbe_limit_v):
                break
            firsts.append(i[ok])
            seconds.append(i[ok] + k)
        if not firsts:
            return ()
        a = np.concatenate(firsts)
        b = np.concatenate(seconds)
        groups = np.stack([a, b], axis=1)
    else:
        i = np.arange(m - set_size + 1)
        j = i + set_size - 1
        window = np.arange(set_size)[None, :] + i[:, None]
        spread_b = lb[window].max(axis=1) - lb[window].min(axis=1)
        ok = (v[j] - v[i] <= vbe_limit_v) & (spread_b <= log_ratio)
        groups = window[ok]
    if groups.size == 0:
        return ()
    spread = v[groups[:, -1]] - v[groups[:, 0]]
    taken = np.zeros(m, dtype=bool)
    out: list[MatchedSet] = []
    for g in groups[np.argsort(spread, kind="stable")]:
        if taken[g].any():
            continue
        taken[g] = True
        dev = order[g]
        lo, hi = dev[0], dev[-1]
        out.append(MatchedSet(
            devices=tuple(names[d] for d in dev),
            delta_vbe_v=float(vbe[hi] - vbe[lo]),
            delta_vbe_stderr_v=float(math.hypot(vbe_se[hi], vbe_se[lo])),
            beta_ratio=float(np.max(beta[dev]) / np.min(beta[dev])),
        ))
    return tuple(out)


# ---------------------------------------------------------------------- capability
@dataclass(frozen=True)
class Capability:
    """Process capability of beta against spec limits (either may be None)."""

    low: float | None
    high: float | None
    mean: float
    sd: float
    cp: float | None
    cpk: float
    cpl: float | None
    cpu: float | None
    fraction_out: float  # observed, among the devices used

    def to_dict(self) -> dict:
        return {"low": self.low, "high": self.high, "mean": self.mean, "sd": self.sd,
                "cp": self.cp, "cpk": self.cpk, "cpl": self.cpl, "cpu": self.cpu,
                "fraction_out": self.fraction_out}


def capability(beta: np.ndarray, low: float | None, high: float | None) -> Capability | None:
    """Cp, Cpk, Cpl, Cpu of beta (common practice; None without limits or data)."""
    if (low is None and high is None) or beta.size < 2:
        return None
    mu, sd = np.mean(beta), np.std(beta, ddof=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        cpl = float((mu - low) / (3 * sd)) if low is not None else None
        cpu = float((high - mu) / (3 * sd)) if high is not None else None
        cp = float((high - low) / (6 * sd)) if low is not None and high is not None else None
    cpk = min(c for c in (cpl, cpu) if c is not None)
    mu, sd = float(mu), float(sd)
    out = np.zeros(beta.size, dtype=bool)
    if low is not None:
        out |= beta < low
    if high is not None:
        out |= beta > high
    return Capability(low, high, mu, sd, cp, float(cpk), cpl, cpu, float(np.mean(out)))


# -------------------------------------------------------------------- device table
def _num(x: float) -> str:
    return f"{x:.{TOML_DIGITS}g}"


def _ranged(value: float, low: float, high: float) -> str:
    if not (math.isfinite(low) and math.isfinite(high)) or not high > low:
        return _num(value)
    return f"{{ value = {_num(value)}, low = {_num(low)}, high = {_num(high)} }}"


def device_table(
    name: str,
    summary: LotSummary,
    *,
    extra: dict[str, float] | None = None,
    comment: str = "",
) -> str:
    """A ``[devices.<name>]`` TOML table from the lot (see the module docstring)."""
    lines = []
    if comment:
        lines += [f"# {c}" for c in comment.splitlines()]
    lines.append(f"[devices.{name}]")
    li, lsd = summary.log10_is_mean, summary.log10_is_sd
    bi, bsd = summary.ln_beta_mean, summary.ln_beta_sd
    lsd = lsd if math.isfinite(lsd) else 0.0
    bsd = bsd if math.isfinite(bsd) else 0.0
    lines.append("IS = " + _ranged(10**li, 10 ** (li - 2 * lsd), 10 ** (li + 2 * lsd)))
    lines.append("beta = " + _ranged(math.exp(bi), math.exp(bi - 2 * bsd), math.exp(bi + 2 * bsd)))
    nm, nsd = summary.n_mean, summary.n_sd if math.isfinite(summary.n_sd) else 0.0
    lines.append("n = " + _ranged(nm, nm - 2 * nsd, nm + 2 * nsd))
    for key, value in (extra or {}).items():
        if isinstance(value, float) and math.isinf(value):
            lines.append(f'{key} = "inf"')
        else:
            lines.append(f"{key} = {_num(value)}")
    return "\n".join(lines) + "\n"
