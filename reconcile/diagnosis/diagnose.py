"""Say what is wrong with a board: single-fault explanations of its readings, ranked.

Method
------
Hypotheses (:func:`reconcile.faults.single_faults`): ``none``; ``open``, ``short`` and
``wrong-value`` for every resistor; ``missing`` (open or missing, one hypothesis: the two
are electrically the same) and ``short`` for every capacitor; ``reversed`` for every
transistor. Each is a modified board fitted with every remaining parameter free, by the
same maximum a posteriori objective as :func:`reconcile.fitting.fit_board`, all
hypotheses of one topology in one batched Levenberg–Marquardt loop
(:mod:`reconcile.fault_fit`), started from the ``none`` fit.

Score. The posterior probability of hypothesis H given the readings D is
P(H | D) ∝ P(H) · p(D | H), with the evidence p(D | H) = ∫ p(D | θ, H) p(θ | H) dθ over
the parameters H leaves free. The Laplace approximation of that integral (MacKay 1992,
"Bayesian interpolation"; Kass & Raftery 1995, "Bayes factors", §4.1; from memory) gives,
in χ² units,

    score(H) = −2 ln p(D | H) + const = χ²_min + ln det Σ_prior − ln det Σ_post,

where χ²_min is the objective at the best fit (reading rows plus prior rows), Σ_prior the
diagonal prior covariance of the free parameters (internal coordinates) and Σ_post the
linearised posterior covariance at the best fit. The complexity term
ln det(Σ_prior Σ_post⁻¹) ≥ 0 is the Occam factor: what the hypothesis pays for the
parameter volume the readings rule out. A fault that fixes a parameter (an open
resistor) pays nothing for it; a wrong value, whose prior is flat over decades
(:data:`reconcile.faults.WRONG_VALUE_LN_SD`), pays about ln(σ²_prior/σ²_post), a few
units when the readings pin the value down — the same order as BIC's ln n per extra
parameter, of which this is the exact, non-asymptotic form. Then

    ln P(H | D) = −score(H)/2 + ln w(kind of H) − ln Σ_H' (…),

with the prior weights w of :mod:`reconcile.fault_weights` (invented defaults,
configurable). A fit that stops before its minimum (the iteration limit, or abandoned
because its χ² stays more than 10⁴ above the best hypothesis's) is scored with the χ² it
reached, an upper bound, and says so in its note; a hypothesis whose engine solution
fails (no operating point) gets probability 0 and a note.

Consistency. As in :mod:`reconcile.fitting`, χ²_min follows a χ² distribution with as
many degrees of freedom as there are readings; a hypothesis is consistent when its
upper-tail p ≥ 0.01. When no hypothesis is consistent the readings are not explained by
any single fault: the diagnosis says so and names the readings the best hypothesis
disagrees with most.

Next reading. Among the most probable hypotheses (up to :data:`TOP_FOR_NEXT`), each
reading not yet taken is predicted under each hypothesis at its best fit, with the
predictive variance JΣ_postJᵀ + u² (u its default uncertainty). Two hypotheses i, j are
told apart by a reading in proportion to the Bhattacharyya distance D_ij between their
predictive Gaussians, which bounds the error of choosing between them by
√(p_i p_j)·exp(−D_ij) (Fukunaga, *Introduction to Statistical Pattern Recognition*,
ch. 3, from memory). While the leader's probability is under :data:`CLEAR_WINNER` the
reading suggested maximises the separation Σ √(p_i p_j)(1 − exp(−D_ij)) / Σ √(p_i p_j)
∈ [0, 1] (purpose ``separate``); once one hypothesis is clearly ahead and consistent,
the reading with the largest D between it and the runner-up (``confirm``); when one is
ahead but none is consistent, the reading its fit predicts least well relative to the
meter, ½ ln(1 + JΣ_postJᵀ/u²), the most informative about the board under it
(``explore``).

Prior of a capacitor's ``missing``: it stands for open too, so its weight is
``missing + open`` (:mod:`reconcile.fault_weights`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from reconcile.model.board import GND, Board
from reconcile.engine import compile_board
from reconcile.errors import InputError
from reconcile.model.eseries import decade_slips, is_standard, nearest, series_for_tolerance
from reconcile.diagnosis.fault_fit import FaultFit, fit_faults, predict_faults
from reconcile.diagnosis.weights import fault_weights
from reconcile.diagnosis.faults import OPEN_OHMS, Fault, single_faults
from reconcile.inference.fitting import P_CONSISTENT, SUSPECT_SIGMA
from reconcile.inference.measure import Observation, ambient_from, observations_from, probe_nodes
from reconcile.inference.priors import build_space
from reconcile.data.readings import Reading, default_uncertainty
from reconcile.inference.simulate import UNITS
from reconcile.model.values import format_si

__all__ = ["Diagnosis", "Hypothesis", "NextReading", "diagnose"]

TOP_FOR_NEXT = 6
"""Hypotheses the next reading is chosen to separate (the most probable ones)."""
MIN_PROBABILITY_FOR_NEXT = 1e-6
CLEAR_WINNER = 0.99
"""Above this probability the top hypothesis is taken as clearly ahead (next reading:
confirm or explore rather than separate)."""
UNREADABLE_DISTANCE = 10.0
"""Bhattacharyya distance used when a reading cannot be taken under one hypothesis (a
capacitance of a shorted capacitor): the reading itself tells them apart."""
DISAGREEING_SHOWN = 3
OFF_TOLERANCE_KINDS = ("resistor", "capacitor", "supply", "IS", "beta")
_STATUS_NOTES = {
    "approximate": "fit stopped at its iteration limit within about one unit of χ² of its "
    "minimum: its probability may be a little low",
    "abandoned": "fit stopped early: its χ² stayed far above the best hypothesis's "
    "(odds below exp(-5000)); the χ² shown is an upper bound",
    "iteration-limit": "fit stopped at its iteration limit before its minimum: the χ² shown "
    "is an upper bound and its probability a lower bound",
    "no-operating-point": "the engine found no operating point at the fit: probability set to 0",
}
_SERIES_FALLBACK = ("E24", "E12", "E6", "E48", "E96", "E192")


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
    fault: str
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

    @property
    def label(self) -> str:
        return self.fault if not self.ref else f"{self.ref} {self.fault}"

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
        }


@dataclass(frozen=True)
class NextReading:
    """The reading to take next.

    ``purpose`` is ``separate`` (the leading hypotheses are close: the reading that best
    tells them apart), ``confirm`` (one hypothesis is clearly ahead and explains the
    readings: the reading that best tells it from the runner-up) or ``explore`` (one
    is ahead but none explains the readings: the reading the best hypothesis predicts
    least well, i.e. the most informative about the board under it). ``expected`` maps
    each leading hypothesis label to the value it predicts (SI units); ``separation``
    is in [0, 1] (see the module docstring).
    """

    quantity: str
    at: str
    uncertainty: float
    separation: float
    separates: tuple[str, ...]
    expected: dict[str, float]
    purpose: str = "separate"

    @property
    def label(self) -> str:
        return f"{self.quantity} at {self.at}" if self.at else self.quantity

    def to_dict(self) -> dict:
        return {
            "quantity": self.quantity,
            "at": self.at,
            "uncertainty": self.uncertainty,
            "separation": self.separation,
            "separates": list(self.separates),
            "expected": dict(self.expected),
            "purpose": self.purpose,
        }


@dataclass(frozen=True)
class Diagnosis:
    """Ranked hypotheses, whether any explains the readings, and what to read next."""

    board: Board = field(repr=False)
    hypotheses: tuple[Hypothesis, ...]
    explained: bool
    disagreeing_readings: tuple[dict, ...]
    next_reading: NextReading | None
    prior_weights: dict[str, float]
    n_readings: int
    summary: str

    @property
    def top(self) -> Hypothesis:
        return self.hypotheses[0]

    def hypothesis(self, ref: str | None, fault: str) -> Hypothesis:
        """The hypothesis for ``ref`` and ``fault`` (a capacitor's ``open`` is its
        ``missing``)."""
        for h in self.hypotheses:
            if h.ref == ref and (h.fault == fault or fault in h.aliases):
                return h
        raise KeyError(f"no hypothesis {ref} {fault}")

    def rank(self, ref: str | None, fault: str) -> int:
        """1-based rank of a hypothesis."""
        target = self.hypothesis(ref, fault)
        return next(i for i, h in enumerate(self.hypotheses, start=1) if h is target)

    def to_dict(self) -> dict:
        """The contract's ``diagnose`` JSON object (plus method details)."""
        return {
            "hypotheses": [h.to_dict() for h in self.hypotheses],
            "explained": self.explained,
            "summary": self.summary,
            "disagreeing_readings": [dict(r) for r in self.disagreeing_readings],
            "next_reading": self.next_reading.to_dict() if self.next_reading else None,
            "prior_weights": dict(self.prior_weights),
            "n_readings": self.n_readings,
            "method": {
                "score": "chi_square + complexity (Laplace approximation of the evidence)",
                "consistency_p": P_CONSISTENT,
                "prior_weights": "invented defaults unless given",
            },
        }


# ---------------------------------------------------------------------- entry
def diagnose(
    board: Board,
    readings: list[Reading],
    *,
    prior_weights: dict[str, float] | None = None,
    max_iterations: int | None = None,
) -> Diagnosis:
    """Rank single-fault explanations of ``readings`` on ``board``.

    Parameters
    ----------
    board
        The board as drawn.
    readings
        The bench readings (a ``temperature`` reading sets the ambient prior).
    prior_weights
        Fault kind to prior weight, over the invented defaults
        (:data:`reconcile.fault_weights.DEFAULT_FAULT_WEIGHTS`).
    max_iterations
        Levenberg–Marquardt iterations per hypothesis (default
        :data:`reconcile.fault_fit.MAX_ITERATIONS`).

    Returns
    -------
    Diagnosis

    Raises
    ------
    InputError
        No reading the model can predict, or a bad prior weight.
    """
    weights = fault_weights(prior_weights)
    obs = observations_from(readings)
    if not obs:
        raise InputError("diagnose needs at least one reading the board model predicts")
    ambient, ambient_u = ambient_from(readings)
    space = build_space(compile_board(board), ambient_k=ambient, ambient_sd_k=ambient_u)
    faults = single_faults(board)
    kw = {} if max_iterations is None else {"max_iterations": max_iterations}
    none_fit = fit_faults(faults[:1], obs, space, **kw)[0]
    seeds = [none_fit.x, space.prior_mean]
    rest = fit_faults(faults[1:], obs, space, seeds=seeds, reference_chi2=none_fit.chi_square, **kw)
    fits = [none_fit, *rest]
    hyps = _score(board, fits, none_fit, weights, len(obs))
    explained = any(h.consistent for h in hyps)
    disagreeing = _disagreeing(hyps[0], obs, explained)
    nxt = _next_reading(board, hyps, obs)
    return Diagnosis(
        board=board,
        hypotheses=tuple(hyps),
        explained=explained,
        disagreeing_readings=tuple(disagreeing),
        next_reading=nxt,
        prior_weights=weights,
        n_readings=len(obs),
        summary=_summary(hyps, explained, disagreeing, len(obs)),
    )


# -------------------------------------------------------------------- scoring
def _complexity(fit: FaultFit) -> float:
    """ln det Σ_prior − ln det Σ_post over the free parameters (≥ 0 up to rounding)."""
    sd = fit.prior_sd[fit.free]
    sign, logdet = np.linalg.slogdet(fit.covariance)
    if sign <= 0 or not math.isfinite(logdet):
        return math.inf
    return max(float(np.sum(np.log(sd**2)) - logdet), 0.0)


def _weight(fault: Fault, weights: dict[str, float]) -> float:
    w = weights[fault.kind]
    for alias in fault.aliases:
        w += weights[alias]
    return w


def _score(board, fits, none_fit, weights, n_obs) -> list[Hypothesis]:
    from scipy.special import chdtrc

    scores, logpost, notes = [], [], []
    for ft in fits:
        cplx = _complexity(ft)
        score = ft.chi_square + cplx
        w = _weight(ft.fault, weights)
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
    same = _same_node_shorts(board)
    hyps = []
    for ft, (cplx, score), p, note in zip(fits, scores, prob, notes, strict=True):
        f = ft.fault
        h_value = h_stderr = h_nearest = None
        series = None
        slip_k = 0
        nominal = _nominal(board, f.ref)
        if f.kind == "wrong-value":
            h_value, h_stderr = ft.value(f.ref), ft.stderr(f.ref)
            series = _series_of(board, f.ref)
            h_nearest = nearest(h_value, series)
            slip_k = _slip_decades(nominal, h_nearest, series)
        hyps.append(
            Hypothesis(
                ref=f.ref or None,
                fault=f.kind,
                value=h_value,
                chi_square=ft.chi_square,
                probability=float(p),
                description=f.description,
                prior_weight=_weight(f, weights),
                complexity=cplx,
                score=score,
                dof=n_obs,
                p_value=float(chdtrc(n_obs, ft.chi_square)) if math.isfinite(score) else 0.0,
                converged=ft.converged,
                stderr=h_stderr,
                nominal=nominal,
                nearest=h_nearest,
                series=series,
                decade_slip=bool(slip_k),
                slip_decades=slip_k,
                fitted=_fitted(ft),
                check=_check(board, ft, none_fit, h_value, h_nearest, series, slip_k),
                same_as=tuple(same.get((f.ref, f.kind), ())),
                aliases=f.aliases,
                note=note,
                fit=ft,
            )
        )
    hyps.sort(key=lambda h: (-h.probability, h.score if math.isfinite(h.score) else math.inf))
    return hyps


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
    off = {}
    for j, fp in enumerate(ft.space.parameters):
        if not ft.free[j] or fp.key == ft.fault.ref or fp.kind not in OFF_TOLERANCE_KINDS:
            continue
        if fp.tolerance_low is None or fp.tolerance_high is None:
            continue
        value = float(fp.to_external(ft.x[j]))
        if not fp.tolerance_low <= value <= fp.tolerance_high:
            off[fp.key] = value
    out["off_tolerance"] = off
    return out


# --------------------------------------------------------------------- checks
def _ohm(x: float) -> str:
    return format_si(x, "ohm", 3)


def _check(board, ft: FaultFit, none_fit: FaultFit, value, near, series, slip) -> str:
    """The check to make with a meter, one sentence."""
    f = ft.fault
    ref = f.ref
    if f.kind == "none":
        return "no single fault needed: the readings fit the board as drawn"
    if ref in board.resistors:
        r = board.resistors[ref]
        a, b = r.nodes
        if f.kind == "open":
            return (
                f"with power off, measure {ref} out of circuit (lift one leg): expect an open "
                f"circuit (over range, modelled as {_ohm(OPEN_OHMS)}) if this is the fault, "
                f"about {_ohm(r.ohms)} if the part is good; check its solder joints too"
            )
        if f.kind == "short":
            return (
                f"with power off, measure across {ref} in circuit ({a} to {b}): expect about "
                f"0 ohm if this is the fault (a good {_ohm(r.ohms)} part cannot read more "
                f"than {_ohm(r.ohms)} in circuit); look for a solder bridge"
            )
        text = (
            f"with power off, measure {ref} out of circuit: expect about {_ohm(value)} if "
            f"this is the fault (drawn {_ohm(r.ohms)}; nearest {series} value {_ohm(near)}"
        )
        if abs(slip) == 1:
            text += f", a decade slip from {_ohm(r.ohms)}"
        elif slip:
            text += f", a slip of {abs(slip)} decades from {_ohm(r.ohms)}"
        return text + "); read its colour bands or marking"
    if ref in board.capacitors:
        c = board.capacitors[ref]
        a, b = c.nodes
        if f.kind == "missing":
            return (
                f"look at {ref}: is it fitted, with both legs soldered? With power off, "
                f"measure its capacitance out of circuit: expect about 0 F (open or missing) "
                f"if this is the fault, about {format_si(c.farads, 'F', 3)} if it is good"
            )
        return (
            f"with power off, measure resistance across {ref} in circuit ({a} to {b}): expect "
            f"about 0 ohm if this is the fault (a good capacitor charges up and reads open); "
            f"look for a solder bridge"
        )
    q = board.transistors[ref]
    node, v_h, v_0 = _telling_node(ft, none_fit, (q.e, q.c, q.b), board)
    text = (
        f"check {ref}'s orientation against its footprint (collector and emitter swapped: "
        f"pin order, flat side or tab)"
    )
    if node is not None:
        text += (
            f"; with power on, measure V({node}): expect about {v_h:.3g} V if this is the "
            f"fault, {v_0:.3g} V if it is placed as drawn"
        )
    return text


def _telling_node(ft: FaultFit, none_fit: FaultFit, nodes, board: Board):
    """The transistor node whose voltage differs most between ``ft`` and ``none``."""
    supplies = {s.node for s in board.supplies.values()} | {GND, "0"}
    best = (None, 0.0, 0.0)
    gap = -1.0
    for n in nodes:
        if n in supplies or n not in ft.node_volts or n not in none_fit.node_volts:
            continue
        d = abs(ft.node_volts[n] - none_fit.node_volts[n])
        if d > gap:
            gap = d
            best = (n, ft.node_volts[n], none_fit.node_volts[n])
    return best


# ------------------------------------------------------- readings and summary
def _disagreeing(top: Hypothesis, obs: list[Observation], explained: bool) -> list[dict]:
    """Readings the best hypothesis disagrees with: beyond 3σ, and when nothing explains
    the readings at least the worst few."""
    z = top.fit.normalized_residual
    pred = top.fit.predicted
    order = np.argsort(-np.abs(np.nan_to_num(z, nan=np.inf)))
    out = []
    for k in order:
        big = not np.isfinite(z[k]) or abs(z[k]) > SUSPECT_SIGMA
        if not big and (explained or len(out) >= DISAGREEING_SHOWN):
            break
        ob = obs[k]
        out.append(
            {
                "quantity": ob.quantity,
                "at": ob.at,
                "measured": ob.measured,
                "predicted": float(pred[k]),
                "uncertainty": ob.uncertainty,
                "normalized_residual": float(z[k]),
            }
        )
    return out


def _summary(hyps: list[Hypothesis], explained: bool, disagreeing: list[dict], n: int) -> str:
    top = hyps[0]
    if not explained:
        worst = ", ".join(
            f"{d['quantity']}{' at ' + d['at'] if d['at'] else ''} "
            f"({d['normalized_residual']:+.1f}σ)"
            for d in disagreeing
        )
        return (
            f"no single fault explains the readings: the best, {top.label}, leaves "
            f"χ² = {top.chi_square:.3g} for {n} readings (p = {top.p_value:.2g}); "
            f"the readings that disagree most: {worst}"
        )
    return f"most likely: {top.description} (probability {top.probability:.2f})"


# --------------------------------------------------------------- next reading
def _candidates(board: Board, obs: list[Observation]) -> list[tuple[str, str]]:
    """Every reading that could be taken and has not been."""
    taken = set()
    for ob in obs:
        if ob.quantity == "voltage":
            a, b = probe_nodes(ob.at)
            taken.add(("voltage", a if b == GND else f"{a}/{b}"))
        else:
            taken.add((ob.quantity, ob.at))
    floating = set(compile_board(board).dc_floating.tolist())
    nodes = [n for i, n in enumerate(board.nodes) if i not in floating]
    supplies = {s.node for s in board.supplies.values()}
    cands = [("voltage", n) for n in nodes if n not in supplies]
    cands += [("resistance", ref) for ref in board.resistors]
    cands += [("capacitance", ref) for ref in board.capacitors]
    cands += [("current", ref) for ref in board.supplies]
    cands += [("current", ref) for ref in board.resistors]
    if board.signal.input and board.signal.output:
        cands += [(q, "") for q in ("gain", "input_resistance", "output_resistance")]
    return [c for c in cands if c not in taken]


def _reading_u(quantity: str, at: str, value: float) -> float | None:
    if not math.isfinite(value):
        return None
    try:
        return default_uncertainty(Reading(quantity, at, float(value), UNITS[quantity], None))
    except InputError:
        return None


def _next_reading(
    board: Board, hyps: list[Hypothesis], obs: list[Observation]
) -> NextReading | None:
    live = [h for h in hyps if h.probability > 0 and math.isfinite(h.score)]
    top = [h for h in live[:TOP_FOR_NEXT] if h.probability >= MIN_PROBABILITY_FOR_NEXT]
    if len(top) < 2:
        # Every rival was abandoned or failed: the nearest of them (its fit stopped
        # early, but its predictions stand) is still the one to rule out.
        rivals = [h for h in hyps if h not in top and np.all(np.isfinite(h.fit.predicted))]
        top = (top + sorted(rivals, key=lambda h: h.chi_square))[:2]
    cands = _candidates(board, obs)
    if len(top) < 2 or not cands:
        return None
    cand_obs = [Observation(q, at, 0.0, 1.0) for q, at in cands]
    pred, jac = predict_faults([h.fit for h in top], cand_obs)
    k = len(top)
    var = np.empty_like(pred)
    for i, h in enumerate(top):
        cov = h.fit.full_covariance()
        var[i] = np.einsum("cp,pq,cq->c", jac[i], cov, jac[i])
    u = np.full_like(pred, np.nan)
    for c, (q, at) in enumerate(cands):
        for i in range(k):
            ui = _reading_u(q, at, pred[i, c])
            if ui is not None:
                u[i, c] = ui
        known = u[:, c][np.isfinite(u[:, c])]
        floor = float(known.min()) if len(known) else np.nan
        u[:, c] = np.where(np.isfinite(u[:, c]), u[:, c], floor)
    var = np.maximum(np.nan_to_num(var, nan=0.0), 0.0)
    s2 = var + u**2
    p = np.array([max(h.probability, 1e-300) for h in top])
    p = p / p.sum()
    sep = np.zeros(len(cands))
    spread = np.zeros(len(cands))
    norm = 0.0
    pairs: list[tuple[int, int, np.ndarray]] = []
    for i in range(k):
        for j in range(i + 1, k):
            d = _bhattacharyya(pred[i], s2[i], pred[j], s2[j])
            wij = math.sqrt(p[i] * p[j])
            norm += wij
            sep += wij * (1.0 - np.exp(-d))
            spread += wij * d
            pairs.append((i, j, wij * (1.0 - np.exp(-d))))
    sep = sep / norm if norm > 0 else sep
    explained = any(h.consistent for h in hyps)
    if top[0].probability < CLEAR_WINNER:
        purpose = "separate"
        order = np.lexsort((-spread, -np.round(sep, 9)))
    elif explained:
        purpose = "confirm"
        d01 = _bhattacharyya(pred[0], s2[0], pred[1], s2[1])
        order = np.lexsort((-spread, -d01))
    else:
        purpose = "explore"
        with np.errstate(divide="ignore", invalid="ignore"):
            info = 0.5 * np.log1p(np.where(u[0] > 0, var[0] / u[0] ** 2, 0.0))
        order = np.lexsort((-spread, -np.nan_to_num(info, nan=0.0)))
    best = int(order[0])
    q, at = cands[best]
    # Name the pair of hypotheses this reading tells apart best (for "confirm" and
    # "explore" that is the leader and its runner-up).
    i_sep, j_sep = 0, 1
    if purpose == "separate" and pairs:
        i_sep, j_sep, _ = max(pairs, key=lambda pair: pair[2][best])
    return NextReading(
        quantity=q,
        at=at,
        uncertainty=float(u[0, best]),
        separation=float(sep[best]),
        separates=(top[i_sep].label, top[j_sep].label),
        expected={h.label: float(pred[i, best]) for i, h in enumerate(top)},
        purpose=purpose,
    )


def _bhattacharyya(m1, v1, m2, v2) -> np.ndarray:
    """Bhattacharyya distance between N(m1, v1) and N(m2, v2), elementwise; a reading one
    hypothesis cannot produce counts as :data:`UNREADABLE_DISTANCE`."""
    with np.errstate(invalid="ignore", divide="ignore"):
        vs = v1 + v2
        d = 0.25 * (m1 - m2) ** 2 / vs + 0.5 * np.log(vs / (2.0 * np.sqrt(v1 * v2)))
    one_nan = np.isnan(m1) ^ np.isnan(m2)
    d = np.where(one_nan, UNREADABLE_DISTANCE, d)
    return np.nan_to_num(d, nan=0.0, posinf=1e3)
