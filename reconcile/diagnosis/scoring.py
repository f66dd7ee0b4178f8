"""Scoring fault hypotheses: Laplace evidence, prior weights, probabilities.

The method is described in :mod:`reconcile.diagnosis.diagnose`: score(H) = χ²_min +
ln det Σ_prior − ln det Σ_post, ln P(H | D) = −score/2 + ln w(H) − normalisation. This
module turns the batched fits of :mod:`reconcile.diagnosis.fault_fit` into ranked
:class:`Hypothesis` objects; the meter check of each comes from
:mod:`reconcile.diagnosis.checks`.

Prior weight of a hypothesis of several faults (:mod:`reconcile.diagnosis.pairs`): faults
of different parts are taken as independent, so the prior odds of each against ``none``
multiply: w(X and Y) = w(X)·w(Y)/w(none). With the invented defaults a pair of wrong
values weighs 1.6 against a single wrong value's 4 and ``none``'s 10.

Testable. A hypothesis is ``testable`` when the readings taken can tell it from
``none``: its fitted predictions differ from the ``none`` fit's by at least
:data:`TESTABLE_SIGMA` standard uncertainties in some reading, or its χ² lies
:data:`TESTABLE_CHI_SQUARE` below ``none``'s (``none`` fits the readings only by pushing
parts far outside their tolerance). A fault no reading sees
(a bleed resistor open with no reading across it) is not: its probability is its prior
share, and nothing should be reworked on its account.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from reconcile.diagnosis.checks import check
from reconcile.diagnosis.fault_fit import FaultFit
from reconcile.diagnosis.faults import Fault
from reconcile.inference.fitting import P_CONSISTENT
from reconcile.model.board import Board
from reconcile.model.eseries import decade_slips, is_standard, nearest, series_for_tolerance
from reconcile.model.kinds import HypothesisKind

OFF_TOLERANCE_KINDS = ("resistor", "capacitor", "supply", "IS", "beta")
_STATUS_NOTES = {
    "stalled": "no step lowered its χ² however strongly damped, before its minimum: the χ² "
    "shown is an upper bound and its probability a lower bound",
    "bounded": "fit stopped early: its Gauss–Newton floor stayed far above the best "
    "hypothesis's χ² (odds below exp(-50)); the χ² shown is an upper bound",
    "iteration-limit": "fit stopped at its iteration limit before its minimum: the χ² shown "
    "is an upper bound and its probability a lower bound",
    "no-operating-point": "the engine found no operating point at the fit: probability set to 0",
}
_SERIES_FALLBACK = ("E24", "E12", "E6", "E48", "E96", "E192")
TESTABLE_SIGMA = 1.0
"""A hypothesis is testable when some reading's prediction under it differs from the
``none`` fit's by at least this many standard uncertainties."""
TESTABLE_CHI_SQUARE = 9.0
"""... or when its fit's χ² (readings and priors) lies this far below ``none``'s: the
``none`` fit then reproduces the readings only with parts far outside their tolerance
(the readings see the fault through the priors). Removing the one prior row of a fixed
part, as an invisible fault does, gains a few units at most."""



@dataclass(frozen=True)
class Hypothesis:
    """One single-fault explanation, fitted and scored.

    ``value`` is the fitted resistance of a ``wrong-value`` hypothesis (ohm), else None;
    ``score`` = ``chi_square`` + ``complexity`` (see the module docstring);
    ``fitted`` holds the small-signal quantities of the fitted board, each transistor's
    region and the other parameters it needs outside their tolerance. For a wrong value,
    ``nearest`` is the standard value of ``series`` nearest the fit and
    ``slip_decades`` k ≠ 0 when that is the drawn value × 10**k (``decade_slip``).
    """

    ref: str | None
    fault: HypothesisKind
    value: float | None
    chi_square: float
    probability: float
    description: str
    prior_weight: float
    complexity: float
    score: float
    dof: int
    p_value: float
    converged: bool
    stderr: float | None
    nominal: float | None
    nearest: float | None
    series: str | None
    decade_slip: bool
    slip_decades: int
    fitted: dict
    check: str
    same_as: tuple[str, ...]
    aliases: tuple[str, ...]
    note: str
    fit: FaultFit = field(repr=False, compare=False)
    faults: tuple[dict, ...] = ()
    testable: bool = True

    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    @property
    def label(self) -> str:
        """``RE open``, ``none``; for several faults ``CE missing + RF wrong-value``."""
        if len(self.faults) > 1:
            return " + ".join(f"{f['ref']} {f['fault']}" for f in self.faults)
        return self.fault if not self.ref else f"{self.ref} {self.fault}"

    @property
    def n_faults(self) -> int:
        """How many faults the hypothesis joins (0 for ``none``)."""
        return len(self.faults)

    @property
    def consistent(self) -> bool:
        """p ≥ 0.01 (for a fit stopped early its χ² is an upper bound, so this holds
        at its minimum too)."""
        return bool(self.fit.status != "no-operating-point" and self.p_value >= P_CONSISTENT)

    def to_dict(self) -> dict:
        return {
            "ref": self.ref,
            "fault": self.fault,
            "value": self.value,
            "chi_square": self.chi_square,
            "probability": self.probability,
            "description": self.description,
            "prior_weight": self.prior_weight,
            "complexity": self.complexity,
            "score": self.score,
            "dof": self.dof,
            "p_value": self.p_value,
            "consistent": self.consistent,
            "converged": self.converged,
            "status": self.fit.status,
            "iterations": self.fit.iterations,
            "stderr": self.stderr,
            "nominal": self.nominal,
            "nearest": self.nearest,
            "series": self.series,
            "decade_slip": self.decade_slip,
            "slip_decades": self.slip_decades,
            "fitted": self.fitted,
            "check": self.check,
            "same_as": list(self.same_as),
            "aliases": list(self.aliases),
            "note": self.note,
            "faults": [dict(f) for f in self.faults],
            "testable": self.testable,
        }


def complexity_term(fit: FaultFit) -> float:
    """ln det Σ_prior − ln det Σ_post over the free parameters (≥ 0 up to rounding)."""
    sd = fit.prior_sd[fit.free]
    sign, logdet = np.linalg.slogdet(fit.covariance)
    if sign <= 0 or not math.isfinite(logdet):
        return math.inf
    return max(float(np.sum(np.log(sd**2)) - logdet), 0.0)


def _single_weight(fault: Fault, weights: dict[str, float]) -> float:
    w = weights[fault.kind]
    for alias in fault.aliases:
        w += weights[alias]
    return w


def hypothesis_weight(fault: Fault, weights: dict[str, float]) -> float:
    """The prior weight of a hypothesis: a single fault's own; for several faults the
    product of their odds against ``none``, times ``none``'s weight (independent
    faults; see the module docstring)."""
    if not fault.members:
        return _single_weight(fault, weights)
    w = weights["none"]
    for m in fault.members:
        w *= _single_weight(m, weights) / weights["none"]
    return w


def _testable(ft: FaultFit, none_fit: FaultFit, uncertainty: np.ndarray) -> bool:
    """Whether the readings taken can tell ``ft``'s hypothesis from ``none``
    (:data:`TESTABLE_SIGMA`); a reading one of them cannot produce tells them apart."""
    if ft.fault.kind == "none":
        return True
    if none_fit.chi_square - ft.chi_square >= TESTABLE_CHI_SQUARE:
        return True
    a, b = ft.predicted, none_fit.predicted
    with np.errstate(invalid="ignore"):
        diff = np.abs(a - b) / uncertainty
    diff = np.where(np.isnan(a) ^ np.isnan(b), np.inf, diff)
    return bool(np.nanmax(diff, initial=0.0) >= TESTABLE_SIGMA)


def score_hypotheses(
    board: Board,
    fits: list[FaultFit],
    none_fit: FaultFit,
    weights: dict[str, float],
    n_obs: int,
    uncertainty: np.ndarray | None = None,
) -> list[Hypothesis]:
    """Score, weigh and rank fitted hypotheses (single faults and pairs alike).

    ``uncertainty`` holds the readings' standard uncertainties, for :attr:`testable`
    (without it every hypothesis counts as testable).
    """
    scores, prob, notes = _posterior(fits, weights)
    same = _same_node_shorts(board)
    hyps = [
        _hypothesis(board, ft, none_fit, weights, n_obs, uncertainty, cplx, score, p, note, same)
        for ft, (cplx, score), p, note in zip(fits, scores, prob, notes, strict=True)
    ]
    hyps.sort(key=lambda h: (-h.probability, h.score if math.isfinite(h.score) else math.inf))
    return hyps


def _posterior(fits: list[FaultFit], weights: dict[str, float]):
    """Each fit's (complexity, score), its posterior probability among ``fits``, and a
    note for a fit that cannot be scored."""
    scores, logpost, notes = [], [], []
    for ft in fits:
        cplx = complexity_term(ft)
        score = ft.chi_square + cplx
        w = hypothesis_weight(ft.fault, weights)
        note = _STATUS_NOTES.get(ft.status, "")
        if ft.status != "no-operating-point" and not math.isfinite(score):
            note = "no usable posterior covariance: probability set to 0"
        ok = ft.status != "no-operating-point" and math.isfinite(score)
        scores.append((cplx, score))
        logpost.append(-0.5 * score + math.log(w) if ok else -math.inf)
        notes.append(note)
    lp = np.array(logpost)
    finite = np.isfinite(lp)
    prob = np.zeros(len(fits))
    if finite.any():
        top = lp[finite].max()
        e = np.where(finite, np.exp(lp - top), 0.0)
        prob = e / e.sum()
    return scores, prob, notes


def _hypothesis(board: Board, ft: FaultFit, none_fit: FaultFit, weights: dict[str, float],
                n_obs: int, uncertainty: np.ndarray | None, cplx: float, score: float,
                p: float, note: str, same: dict) -> Hypothesis:
    """One scored fit as the :class:`Hypothesis` the user reads."""
    from reconcile.inference.chi_square import upper_tail

    f = ft.fault
    parts = [_fault_entry(board, ft, m) for m in f.parts]
    e = parts[0] if len(parts) == 1 else {}
    check_text, same_as = _check_text(board, ft, none_fit, parts, same)
    slip_k = int(e.get("slip_decades", 0))
    return Hypothesis(
        ref=(f.ref or None) if not f.members else None,
        fault=f.kind,
        value=e.get("value"),
        chi_square=ft.chi_square,
        probability=float(p),
        description=f.description,
        prior_weight=hypothesis_weight(f, weights),
        complexity=cplx,
        score=score,
        dof=n_obs,
        p_value=(upper_tail(ft.chi_square, n_obs) if n_obs > 0 else 1.0)
        if math.isfinite(score) else 0.0,
        converged=ft.converged,
        stderr=e.get("stderr"),
        nominal=_nominal(board, f.ref) if not f.members else None,
        nearest=e.get("nearest"),
        series=e.get("series"),
        decade_slip=bool(slip_k),
        slip_decades=slip_k,
        fitted=_fitted(ft),
        check=check_text,
        same_as=same_as,
        aliases=f.aliases,
        note=note,
        fit=ft,
        faults=tuple({"ref": pe["ref"], "fault": pe["fault"], "value": pe["value"]}
                     for pe in parts),
        testable=True if uncertainty is None else _testable(ft, none_fit, uncertainty),
    )


def _check_text(board: Board, ft: FaultFit, none_fit: FaultFit, parts: list[dict],
                same: dict) -> tuple[str, tuple[str, ...]]:
    """The meter check of a hypothesis (one per member of a pair), and the other
    hypotheses it cannot be told from (shorts across the same two nodes)."""
    f = ft.fault
    if f.members:
        text = "; ".join(
            f"{m.label}: "
            + check(board, replace(ft, fault=m), none_fit, e["value"], e["nearest"],
                    e["series"], e["slip_decades"])
            for m, e in zip(f.members, parts, strict=True)
        )
        return text, ()
    e = parts[0] if len(parts) == 1 else {}
    text = check(board, ft, none_fit, e.get("value"), e.get("nearest"), e.get("series"),
                 e.get("slip_decades", 0))
    return text, tuple(same.get((f.ref, f.kind), ()))


def _fault_entry(board: Board, ft: FaultFit, fault: Fault) -> dict:
    """One fault of a hypothesis as fitted: ref, kind, and for a wrong value the fitted
    value, its standard error, the nearest standard value and any decade slip."""
    out = {"ref": fault.ref, "fault": fault.kind, "value": None, "stderr": None,
           "nearest": None, "series": None, "slip_decades": 0}
    if fault.kind == "wrong-value":
        value = ft.value(fault.ref)
        series = _series_of(board, fault.ref)
        near = nearest(value, series)
        out.update(value=value, stderr=ft.stderr(fault.ref), nearest=near, series=series,
                   slip_decades=_slip_decades(_nominal(board, fault.ref), near, series))
    return out


def _nominal(board: Board, ref: str) -> float | None:
    if ref in board.resistors:
        return board.resistors[ref].ohms
    if ref in board.capacitors:
        return board.capacitors[ref].farads
    return None


def _series_of(board: Board, ref: str) -> str:
    """The E-series the part's value comes from: the one its tolerance suggests when it
    holds the drawn value, else the first common series that does."""
    r = board.resistors[ref]
    first = series_for_tolerance(r.tolerance)
    for name in (first, *_SERIES_FALLBACK):
        if is_standard(r.ohms, name):
            return name
    return first


def _slip_decades(nominal: float | None, value: float, series: str) -> int:
    """k when ``value`` (a standard value) is the drawn value times 10**k, k ≠ 0 (a
    decade slip: the right digits, the wrong multiplier; ±1 through
    :func:`reconcile.eseries.decade_slips`), else 0."""
    if nominal is None or not is_standard(nominal, series):
        return 0
    if any(math.isclose(value, s, rel_tol=1e-6) for s in decade_slips(nominal, series)):
        return 1 if value > nominal else -1
    k = round(math.log10(value / nominal))
    return k if k and math.isclose(value, nominal * 10.0**k, rel_tol=1e-6) else 0


def _same_node_shorts(board: Board) -> dict[tuple[str, str], list[str]]:
    """Shorts of parts between the same two nodes: electrically one hypothesis for
    every in-circuit reading."""
    by_pair: dict[frozenset, list[str]] = {}
    for ref, r in board.resistors.items():
        by_pair.setdefault(frozenset(r.nodes), []).append(ref)
    for ref, c in board.capacitors.items():
        by_pair.setdefault(frozenset(c.nodes), []).append(ref)
    out: dict[tuple[str, str], list[str]] = {}
    for refs in by_pair.values():
        if len(refs) > 1:
            for ref in refs:
                out[(ref, "short")] = [f"{o} short" for o in refs if o != ref]
    return out


def _fitted(ft: FaultFit) -> dict:
    """What the fitted board looks like: small signal, regions, parts pulled off."""
    out: dict = {k: v for k, v in ft.small_signal.items()}
    out["regions"] = dict(ft.regions)
    faulted = {m.ref for m in ft.fault.parts}
    off = {}
    for j, fp in enumerate(ft.space.parameters):
        if not ft.free[j] or fp.key in faulted or fp.kind not in OFF_TOLERANCE_KINDS:
            continue
        if fp.tolerance_low is None or fp.tolerance_high is None:
            continue
        value = float(fp.to_external(ft.x[j]))
        if not fp.tolerance_low <= value <= fp.tolerance_high:
            off[fp.key] = value
    out["off_tolerance"] = off
    return out

