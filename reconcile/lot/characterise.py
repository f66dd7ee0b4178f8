"""Characterise a lot of transistors: per-device IS, n and beta, and the lot's statistics.

Two inputs (:func:`run_lot` tells them apart by the readings file's header):

- a jig board file and a readings file with a ``device`` column: every device is fitted
  in the jig, all in one batched fit (:mod:`reconcile.jig_fit`, :func:`characterise_jig`);
- a sweep file (``device,vbe,ic,ib,...``, :mod:`reconcile.data.sweep_file`): IS and n from
  ln IC against VBE, beta from IC/IB (:func:`characterise_sweeps`). A jig board given
  with a sweep file lends its socket's device table (VA for the Early correction, the
  temperature exponent and bandgap for referring IS to 25 C) and its temperature.

Then the lot (:mod:`reconcile.lot_stats`): summary, robust outliers, beta bins, matched
pairs, capability against beta limits, and a ``[devices]`` table for tomorrow's board
files. Per-device flags:

=====================  ==========================================================
flag                   meaning
=====================  ==========================================================
``outlier``            modified z-score beyond the threshold (ln beta, log10 IS, n)
``low-beta``           beta below ``spec_low``
``high-beta``          beta above ``spec_high``
``not-converged``      the jig fit did not converge (left out of everything)
``at-bound``           a jig fit parameter at its hard bound
``poor-fit``           the fit's χ² upper-tail probability below 0.001 (jig: the readings' χ² on
                       the readings less the parameters they inform, as a board's fit)
``series-resistance``  sweep bends down at high current (IS, n from the corrected fit)
``curvature``          sweep bends up at high current (e.g. self-heating)
``beta-varies``        IC/IB not constant over the sweep within its uncertainties
``few-points``         fewer than four sweep points: no bend test
``not-forward-active`` a sweep point with the collector junction forward-biased
=====================  ==========================================================
"""

from __future__ import annotations

import math
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from reconcile.lot import stats as lot_stats
from reconcile.model.board import Board
from reconcile.model.kinds import LotMode, Polarity
from reconcile.model.quantities import REGISTRY
from reconcile.errors import InputError, InputErrors
from reconcile.data.readings import Reading
from reconcile.data.sweep_file import SweepSet
from reconcile.lot.extraction import SweepExtraction
from reconcile.model.text_files import read_text

__all__ = [
    "DeviceEstimate",
    "LotOptions",
    "LotResult",
    "characterise_jig",
    "characterise_sweeps",
    "parse_bins",
    "run_lot",
]

LN10 = math.log(10.0)
_NAME = re.compile(r"^[A-Za-z0-9_-]+$")


def parse_bins(value: str | Sequence[float] | None) -> tuple[float, ...] | None:
    """Beta bin edges from ``"100,150,200"`` (or a sequence); strictly increasing, ≥ 2."""
    if value is None:
        return None
    if isinstance(value, str):
        parts = [p for p in re.split(r"[,\s;]+", value.strip()) if p]
        try:
            edges = tuple(float(p) for p in parts)
        except ValueError:
            raise InputError(f"cannot read bin edges {value!r}; write e.g. 100,150,200,300",
                             key="--bins") from None
    else:
        edges = tuple(float(v) for v in value)
    if len(edges) < 2 or not all(math.isfinite(e) and e > 0 for e in edges):
        raise InputError(f"bin edges {value!r}: give at least two positive finite beta values",
                         key="--bins")
    if any(b <= a for a, b in zip(edges, edges[1:], strict=False)):
        raise InputError(f"bin edges {value!r} must increase strictly", key="--bins")
    return edges


_MAX_AMPS = REGISTRY["current"].value_range[1]
"""The largest current a reading may hold (the quantity registry's range)."""


@dataclass(frozen=True)
class LotOptions:
    """How the lot is judged.

    ``current_a`` is the collector current (A) at which VBE is compared for matching;
    ``vbe_limit_v`` (V) and ``beta_ratio`` the matching limits; ``set_size`` devices per
    matched set; ``spec_low``/``spec_high`` beta limits for flags and Cpk; ``bins`` beta
    bin edges; ``device_name`` the name of the written device table.
    """

    bins: tuple[float, ...] | None = None
    vbe_limit_v: float = 2e-3
    beta_ratio: float = 1.1
    current_a: float = 1e-3
    spec_low: float | None = None
    spec_high: float | None = None
    set_size: int = 2
    device_name: str = "lot"
    outlier_z: float = lot_stats.OUTLIER_Z

    def __post_init__(self) -> None:
        if self.bins is not None:
            object.__setattr__(self, "bins", parse_bins(self.bins))
        checks = (
            ("--vbe-limit", self.vbe_limit_v > 0 and math.isfinite(self.vbe_limit_v),
             "the VBE limit must be a positive voltage"),
            ("--beta-ratio", self.beta_ratio >= 1 and math.isfinite(self.beta_ratio),
             "the beta ratio limit must be at least 1"),
            ("--current", 0 < self.current_a <= _MAX_AMPS,
             f"the matching current must be a positive current up to {_MAX_AMPS:g} A"),
            ("--set-size", isinstance(self.set_size, int) and self.set_size >= 2,
             "a matched set has at least two devices"),
            ("--device-name", bool(_NAME.match(self.device_name)),
             "the device table name takes letters, digits, - and _ only"),
            ("--outlier-z", self.outlier_z > 0, "the outlier threshold must be positive"),
        )
        for key, ok, message in checks:
            if not ok:
                raise InputError(message, key=key)
        for key, v in (("--spec-low", self.spec_low), ("--spec-high", self.spec_high)):
            if v is not None and not (v > 0 and math.isfinite(v)):
                raise InputError("a beta limit must be a positive number", key=key)
        both = self.spec_low is not None and self.spec_high is not None
        if both and self.spec_high <= self.spec_low:
            raise InputError("the upper beta limit must exceed the lower", key="--spec-high")


@dataclass(frozen=True)
class DeviceEstimate:
    """One device of the lot. IS is at 25 C (A); ``vbe_v`` is at the matching current and
    the lot's temperature; ``n_stderr`` is None where n was held fixed."""

    name: str
    is_25c: float
    is_stderr: float
    beta: float
    beta_stderr: float
    n: float
    n_stderr: float | None
    vbe_v: float
    vbe_stderr_v: float
    flags: tuple[str, ...]
    chi_square: float
    dof: float  # readings less the parameters they inform (jig); points less parameters (sweep)
    points: int
    polarity: Polarity = "npn"
    bin: str | None = None
    robust_z: dict[str, float] = field(default_factory=dict)
    r_series_ohm: float | None = None
    r_series_stderr: float | None = None

    def to_dict(self) -> dict:
        out = {
            "IS": {"value": self.is_25c, "stderr": self.is_stderr},
            "beta": {"value": self.beta, "stderr": self.beta_stderr},
            "n": {"value": self.n, "stderr": self.n_stderr},
            "vbe": {"value": self.vbe_v, "stderr": self.vbe_stderr_v},
            "flags": list(self.flags),
            "chi_square": self.chi_square,
            "dof": self.dof,
            "points": self.points,
            "polarity": self.polarity,
            "bin": self.bin,
            "robust_z": self.robust_z,
        }
        if self.r_series_ohm is not None:
            out["r_series"] = {"value": self.r_series_ohm, "stderr": self.r_series_stderr}
        return out


@dataclass(frozen=True)
class LotResult:
    """A characterised lot. ``to_dict`` is the ``lot --json`` output (contract, section 4,
    extended)."""

    mode: LotMode
    devices: dict[str, DeviceEstimate]
    summary: lot_stats.LotSummary
    outliers: tuple[str, ...]
    bins: tuple[lot_stats.BetaBin, ...]
    pairs: tuple[lot_stats.MatchedSet, ...]
    cpk: lot_stats.Capability | None
    device_table: str
    options: LotOptions
    temperature_k: float
    fit_info: dict
    sweeps: SweepSet | None = field(default=None, repr=False)
    extraction: SweepExtraction | None = field(default=None, repr=False)

    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    def report(self, console=None) -> None:
        """Print what ``reconcile lot`` prints (a rich console, default stdout)."""
        from reconcile.present.show import show

        show(self, console)

    def to_dict(self) -> dict:
        o = self.options
        eligible = sum(1 for d in self.devices.values() if not d.flags)
        return {
            "mode": self.mode,
            "temperature": self.temperature_k,
            "devices": {k: d.to_dict() for k, d in self.devices.items()},
            "summary": self.summary.to_dict(),
            "outliers": list(self.outliers),
            "outlier_rule": {
                "method": "modified z-score 0.6745*(x - median)/MAD (Iglewicz-Hoaglin)",
                "threshold": o.outlier_z,
                "variables": ["ln_beta", "log10_IS"] + (["n"] if self.summary.n_fitted else []),
            },
            "bins": [b.to_dict() for b in self.bins],
            "pairs": [p.to_dict() for p in self.pairs],
            "matching": {
                "current": o.current_a, "vbe_limit": o.vbe_limit_v, "beta_ratio": o.beta_ratio,
                "set_size": o.set_size, "eligible": eligible,
                "unmatched": eligible - o.set_size * len(self.pairs),
            },
            "cpk": self.cpk.to_dict() if self.cpk is not None else None,
            "device_table": self.device_table,
            "fit": self.fit_info,
        }


# ----------------------------------------------------------------------- assembly
def _assemble(
    *,
    mode: str,
    names: tuple[str, ...],
    beta: np.ndarray,
    ln_beta_se: np.ndarray,
    ln_is: np.ndarray,
    n: np.ndarray,
    cov: np.ndarray,
    n_fitted: bool,
    flags: list[list[str]],
    chi: np.ndarray,
    dof: np.ndarray,
    points: np.ndarray,
    polarity: np.ndarray,
    temperature_k: float,
    options: LotOptions,
    xti: float,
    bandgap_ev: float,
    table_extra: dict[str, float],
    fit_info: dict,
    r_series: tuple[np.ndarray, np.ndarray] | None = None,
    sweeps: SweepSet | None = None,
    extraction: SweepExtraction | None = None,
) -> LotResult:
    o = options
    failed = np.array(["not-converged" in f for f in flags], dtype=bool)
    usable = ~failed & np.isfinite(beta) & np.isfinite(ln_is) & np.isfinite(n)
    log10_is = ln_is / LN10
    variables = {"ln_beta": np.log(beta), "log10_IS": log10_is}
    if n_fitted:
        variables["n"] = n
    outlier, scores = lot_stats.find_outliers(variables, usable, o.outlier_z)
    used = usable & ~outlier
    summary = lot_stats.summarise(names, beta, log10_is, n, used, n_fitted=n_fitted)
    _flag_devices(flags, outlier, beta, o)
    vbe, vbe_se = lot_stats.vbe_at_current(
        ln_is, n, cov, o.current_a, temperature_k, xti=xti, bandgap_ev=bandgap_ev
    )
    bins: tuple[lot_stats.BetaBin, ...] = ()
    labels: list[str | None] = [None] * len(names)
    if o.bins is not None:
        bins, labels = lot_stats.bin_by_beta(names, beta, o.bins, usable)
    eligible = np.array([not f for f in flags], dtype=bool) & usable
    pairs = lot_stats.match_devices(
        names, vbe, vbe_se, beta, eligible, vbe_limit_v=o.vbe_limit_v,
        beta_ratio=o.beta_ratio, set_size=o.set_size,
    )
    cpk = lot_stats.capability(beta[used], o.spec_low, o.spec_high)
    comment = _table_comment(summary, len(names), mode)
    table = lot_stats.device_table(o.device_name, summary, extra=table_extra, comment=comment)
    out = _device_estimates(names, beta, ln_beta_se, ln_is, n, cov, n_fitted, vbe, vbe_se,
                            flags, chi, dof, points, polarity, labels, scores, r_series)
    return LotResult(
        mode=mode, devices=out, summary=summary,
        outliers=tuple(names[i] for i in np.flatnonzero(outlier)), bins=bins, pairs=pairs,
        cpk=cpk, device_table=table, options=o, temperature_k=float(temperature_k),
        fit_info=fit_info, sweeps=sweeps, extraction=extraction,
    )


def _flag_devices(flags: list[list[str]], outlier: np.ndarray, beta: np.ndarray,
                  o: LotOptions) -> None:
    """Add the ``outlier``, ``low-beta`` and ``high-beta`` flags in place."""
    for i in np.flatnonzero(outlier):
        flags[i].insert(0, "outlier")
    for i in range(len(flags)):
        if o.spec_low is not None and beta[i] < o.spec_low:
            flags[i].append("low-beta")
        if o.spec_high is not None and beta[i] > o.spec_high:
            flags[i].append("high-beta")


def _table_comment(summary, n_devices: int, mode: str) -> str:
    """The comment written above the lot's ``[devices]`` table."""
    left_out = ""
    if summary.excluded:
        more = " ..." if len(summary.excluded) > 8 else ""
        left_out = f"; left out: {', '.join(summary.excluded[:8])}{more}"
    return (
        f"From a lot of {n_devices} devices ({summary.used} used{left_out}), "
        f"{mode} measurements.\n"
        "value: geometric mean (n: mean); low/high: two standard deviations of ln beta,\n"
        "log10 IS and n either side, read back by the priors as the lot's own spread."
    )


def _device_estimates(names, beta, ln_beta_se, ln_is, n, cov, n_fitted, vbe, vbe_se, flags,
                      chi, dof, points, polarity, labels, scores,
                      r_series) -> dict[str, DeviceEstimate]:
    """One :class:`DeviceEstimate` per device, by name."""
    is_val = np.exp(ln_is)
    is_se = is_val * np.sqrt(np.maximum(cov[:, 0, 0], 0.0))
    n_se = np.sqrt(np.maximum(cov[:, 1, 1], 0.0))

    def optional(values: np.ndarray | None, i: int) -> float | None:
        return None if values is None or not np.isfinite(values[i]) else float(values[i])

    r_value, r_se = r_series if r_series is not None else (None, None)
    out: dict[str, DeviceEstimate] = {}
    for i, name in enumerate(names):
        out[name] = DeviceEstimate(
            name=name, is_25c=float(is_val[i]), is_stderr=float(is_se[i]),
            beta=float(beta[i]), beta_stderr=float(beta[i] * ln_beta_se[i]),
            n=float(n[i]), n_stderr=float(n_se[i]) if n_fitted else None,
            vbe_v=float(vbe[i]), vbe_stderr_v=float(vbe_se[i]), flags=tuple(flags[i]),
            chi_square=float(chi[i]), dof=float(dof[i]), points=int(points[i]),
            polarity="npn" if polarity[i] > 0 else "pnp", bin=labels[i],
            robust_z={k: float(scores[k][i]) for k in scores},
            r_series_ohm=optional(r_value, i), r_series_stderr=optional(r_se, i),
        )
    return out


# ---------------------------------------------------------------------- the inputs
def characterise_jig(
    board: Board,
    readings: list[Reading],
    *,
    socket: str | None = None,
    options: LotOptions | None = None,
) -> LotResult:
    """Characterise the devices of a jig readings file (batched fit, see
    :mod:`reconcile.jig_fit`), then the lot."""
    from reconcile.lot.jig_fit import fit_jig

    o = options or LotOptions()
    fit = fit_jig(board, readings, socket=socket)
    d = len(fit.devices)
    sign = 1.0 if board.transistors[fit.socket].polarity == "npn" else -1.0
    j_is, j_b, j_n = fit.column("IS"), fit.column("beta"), fit.column("n")
    dev = fit.board.device_of(fit.socket)
    ln_is = fit.x[:, j_is] * LN10
    beta = np.exp(fit.x[:, j_b])
    ln_beta_se = np.sqrt(fit.covariance[:, j_b, j_b])
    cov = np.zeros((d, 2, 2))
    cov[:, 0, 0] = fit.covariance[:, j_is, j_is] * LN10**2
    if j_n is not None:
        n = fit.x[:, j_n]
        cov[:, 0, 1] = cov[:, 1, 0] = fit.covariance[:, j_is, j_n] * LN10
        cov[:, 1, 1] = fit.covariance[:, j_n, j_n]
    else:
        n = np.full(d, dev.n.value)
    from reconcile.inference.fitting import P_INCONSISTENT

    flags: list[list[str]] = []
    for i in range(d):
        f = []
        if not fit.converged[i]:
            f.append("not-converged")
        if fit.at_bound[i]:
            f.append("at-bound")
        if fit.p_value[i] < P_INCONSISTENT:
            f.append("poor-fit")
        flags.append(f)
    extra: dict[str, float] = {}
    if dev.beta_r.value != 1.0:
        extra["beta_r"] = dev.beta_r.value
    if math.isfinite(dev.VA.value):
        extra["VA"] = dev.VA.value
    extra["is_temp_exponent"] = dev.is_temp_exponent
    extra["bandgap"] = dev.bandgap
    fixed = [k for k in (*fit.board.supplies, *fit.board.resistors, *fit.board.capacitors)]
    info = {
        "method": "batched MAP (Levenberg-Marquardt over the device axis)",
        "jig": fit.board.title, "socket": fit.socket, "parameters": list(fit.keys),
        "fixed": fixed, "observations": [f"{q}@{a}" if a else q for q, a in fit.observations],
        "engine_calls": fit.engine_calls, "iterations_max": int(fit.iterations.max(initial=0)),
    }
    return _assemble(
        mode="jig", names=fit.devices, beta=beta, ln_beta_se=ln_beta_se, ln_is=ln_is, n=n,
        cov=cov, n_fitted=j_n is not None, flags=flags, chi=fit.chi_square, dof=fit.dof,
        points=np.isfinite(fit.measured).sum(axis=1), polarity=np.full(d, sign),
        temperature_k=fit.temperature_k, options=o, xti=dev.is_temp_exponent,
        bandgap_ev=dev.bandgap, table_extra=extra, fit_info=info,
    )


def characterise_sweeps(
    sweeps: SweepSet,
    *,
    options: LotOptions | None = None,
    va_v: float = math.inf,
    xti: float = 3.0,
    bandgap_ev: float = 1.11,
) -> LotResult:
    """Characterise a lot from its sweeps (see :mod:`reconcile.data.sweep_file`), then the lot.

    ``va_v`` (V) divides out the Early factor where points carry ``vce``; ``xti`` and
    ``bandgap_ev`` refer IS to 25 C.
    """
    from reconcile.lot.extraction import extract

    o = options or LotOptions()
    ex = extract(sweeps, va_v=va_v, xti=xti, bandgap_ev=bandgap_ev)
    temperature = float(np.median(sweeps.temperature_k))
    extra: dict[str, float] = {}
    if math.isfinite(va_v):
        extra["VA"] = va_v
    extra["is_temp_exponent"] = xti
    extra["bandgap"] = bandgap_ev
    info = {
        "method": "weighted least squares of ln IC on VBE; beta as weighted mean of ln(IC/IB)",
        "early_va": va_v, "points_max": int(sweeps.mask.shape[1]),
    }
    return _assemble(
        mode="sweep", names=sweeps.devices, beta=np.exp(ex.ln_beta), ln_beta_se=ex.ln_beta_se,
        ln_is=ex.ln_is, n=ex.n, cov=ex.cov, n_fitted=True, flags=[list(f) for f in ex.flags],
        chi=ex.chi_square, dof=ex.dof, points=sweeps.points, polarity=sweeps.polarity,
        temperature_k=temperature, options=o, xti=xti, bandgap_ev=bandgap_ev,
        table_extra=extra, fit_info=info, r_series=(ex.r_series_ohm, ex.r_series_se),
        sweeps=sweeps, extraction=ex,
    )


def run_lot(
    jig_path: str | os.PathLike[str] | None,
    readings_path: str | os.PathLike[str],
    bins: str | Sequence[float] | None = None,
    vbe_limit: float = 2e-3,
    beta_ratio: float = 1.1,
    current: float = 1e-3,
    spec_low: float | None = None,
    spec_high: float | None = None,
    *,
    socket: str | None = None,
    set_size: int = 2,
    device_name: str = "lot",
    temperature_k: float | None = None,
    early_voltage: float | None = None,
) -> LotResult:
    """``reconcile lot``: load the files, tell sweep from jig input, characterise.

    Parameters
    ----------
    jig_path
        The jig board file, or None for a sweep file alone.
    readings_path
        A jig readings file (``device`` column) or a sweep file (header with ``vbe``,
        ``ic``, ``ib``), told apart by its header.
    bins
        Beta bin edges (``"100,150,200"`` or a sequence).
    vbe_limit, beta_ratio, current
        Matching: largest VBE difference (V) at collector current ``current`` (A), and
        largest beta ratio.
    spec_low, spec_high
        Beta limits for the ``low-beta``/``high-beta`` flags and Cpk.
    socket
        The jig's transistor ref (default: its only one).
    set_size
        Devices per matched set (2: pairs).
    device_name
        Name of the written ``[devices]`` table.
    temperature_k
        Sweep temperature where the file gives none (default: the jig's, else 25 C).
    early_voltage
        Forward Early voltage (V) for dividing the Early factor out of sweep points that
        carry ``vce`` (default: the jig device's VA, else none). Without it, beta and IS
        from a sweep at VCE include the factor (1 + (VCE − VBE)/VA).

    Raises
    ------
    InputError
        A file is missing or wrong, or an option is out of range.
    """
    from reconcile.model.board_loader import load_board
    from reconcile.data.readings import load_readings
    from reconcile.data.sweep_file import is_sweep_text

    options = LotOptions(
        bins=parse_bins(bins), vbe_limit_v=float(vbe_limit), beta_ratio=float(beta_ratio),
        current_a=float(current), spec_low=spec_low, spec_high=spec_high, set_size=set_size,
        device_name=device_name,
    )
    path, text = read_text(readings_path, "readings file")
    board = load_board(jig_path) if jig_path is not None else None
    if is_sweep_text(text):
        return _run_sweeps(text, path, board, options, socket=socket,
                           temperature_k=temperature_k, early_voltage=early_voltage)
    if board is None:
        raise InputError(
            "this is not a sweep file (no vbe, ic, ib columns), so it needs the jig board "
            "file: reconcile lot JIG READINGS", path=path,
        )
    readings = load_readings(path, board)
    try:
        return characterise_jig(board, readings, socket=socket, options=options)
    except InputErrors as err:
        raise InputErrors([e.located(path=path) for e in err.errors]) from None
    except InputError as err:
        if err.key == "socket":
            raise
        raise err.located(path=path) from None


def _run_sweeps(text: str, path, board: Board | None, options: LotOptions, *,
                socket: str | None, temperature_k: float | None,
                early_voltage: float | None) -> LotResult:
    """``run_lot`` for a sweep file: the device constants from the jig where one is given."""
    from reconcile.data.sweep_file import sweeps_from_text

    va, xti, eg, t_default = math.inf, 3.0, 1.11, temperature_k
    if board is not None:
        from reconcile.lot.jig_fit import socket_of

        ref = socket_of(board, socket)
        dev = board.device_of(ref)
        va, xti, eg = dev.VA.value, dev.is_temp_exponent, dev.bandgap
        t_default = board.temperature if temperature_k is None else temperature_k
    if early_voltage is not None:
        if not early_voltage > 0:
            raise InputError("the Early voltage must be positive (inf for none)",
                             key="--early-voltage")
        va = float(early_voltage)
    sweeps = sweeps_from_text(text, path=path, temperature_k=t_default)
    return characterise_sweeps(sweeps, options=options, va_v=va, xti=xti, bandgap_ev=eg)
