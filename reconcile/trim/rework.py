"""The least rework that restores the spec: which part to swap or tack a part across.

Starting point: the built board as fitted (:class:`~reconcile.inference.fitting.FitResult`, its MAP
vector and linearised posterior covariance), or in design mode (no readings) the board
as drawn with the prior as "posterior" (each part anywhere in its tolerance). Candidates
are standard values of each trimmable resistor's E-series, as a replacement or as a part
added in parallel (:mod:`reconcile.trim.candidates`); single changes and combinations of
up to ``max_changes`` parts are solved exactly by the batched engine and ranked
(:mod:`reconcile.trim.search`, :mod:`reconcile.trim.combos`); the best ``top`` get a
Monte Carlo yield (:mod:`reconcile.trim.yields`).

Ranking, best first:

1. options that meet every [spec] entry and the constraints (forward-active, ``min_vce``,
   ratings) with a non-negative worst-case margin (``k_sigma`` = 2 predicted standard
   deviations inside the limits, and |VCE| that far above ``min_vce``), then those that
   meet spec only at the predicted board, then the rest (among which the margin comes
   before the number of parts). The first tier goes beyond "meets spec at the predicted
   board" so that an option sitting just inside a limit does not outrank a sound one
   merely by changing fewer parts;
2. fewer changed parts;
3. larger worst-case margin, in steps of ``merit_band`` (relative to the target): options
   closer than a step are of equal merit;
4. lower rework cost: by default 1.0 per part added in parallel (tack it on) and 1.5 per
   part replaced (desolder, clean the pads, fit). These weights are our own invented
   figures, not from any standard; pass ``costs`` to change them;
5. larger exact worst-case margin;
6. the smaller change of value (Σ |ln(after/built)|). A one-sided limit (a corner)
   counts in the worst-case margin only until it is met with its worst case, so among
   capacitors that meet a corner limit the one nearest the built value ranks first (the
   smallest that meets a ``low_corner`` max).

Only one option per rework (the same parts with the same actions) is listed, the best
value of it (``variants_per_rework`` lists more), and a combination is left out when a
listed option with a subset of its parts and actions is of at least its tier and merit
(the extra change would be idle).

The yield of each listed option (and of the board as it is) is a Monte Carlo fraction
over ``samples`` draws of the posterior and of the new parts' tolerances (uniform within
±tolerance), every option on the same draws, in engine calls of at most
:data:`reconcile.engine.budget.THROUGHPUT_ROWS` boards; see :mod:`reconcile.trim.yields`.
It is reported, not used for the ranking.

Capacitors are changed when ``[spec]`` limits a corner (``low_corner = { max }``,
``high_corner = { min }``) and the built board misses the limit or reaches it within its
worst-case margin: for the low corner the capacitors whose exact share of it
(:func:`reconcile.engine.sweep.low_corner_shares`) is at least :data:`LOW_SHARE_FLOOR`
of the largest share, for the high corner every capacitor whose value moves it (an
elasticity |∂ln f_H/∂ln C| of at least :data:`HIGH_ELASTICITY_FLOOR` at the built board:
the ones that load a node of the signal path; the probe's capacitance is bench set-up,
not a part, and is never proposed). Capacitors are one more kind of part in the same
search (replacements and parallel parts from E6/E12, combinations with resistors), and
every candidate's corners, gain and other spec quantities come from the same engine
evaluation; a capacitor does not move the DC bias. The new capacitor's tolerance is the
board's own for the part it replaces or joins (default ±20 %).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from reconcile.model.board import Board
from reconcile.model.kinds import ReworkAction, SearchKind, TrimMode
from reconcile.model.quantities import REGISTRY
from reconcile.model.values import format_si
from reconcile.engine import compile_board
from reconcile.errors import InputError
from reconcile.inference.priors import ParameterSpace, build_space
from reconcile.trim.candidates import (
    ACTIONS,
    CandidateWindow,
    SeriesChoice,
    Singles,
    single_candidates,
)
from reconcile.trim.combos import all_pairs, grow, pair_count, screen_pairs
from reconcile.engine.sweep import find_corners, low_corner_shares, with_stepped_capacitors
from reconcile.trim.search import (
    CORNERS,
    Context,
    Scores,
    build_context,
    combo_change,
    combo_costs,
    corner_values,
    evaluate,
    merit,
    rank_order,
    score_solution,
    spec_corners,
)
from reconcile.trim.yields import YieldEstimate, yields

if TYPE_CHECKING:
    from reconcile.inference.fitting import FitResult

DEFAULT_COSTS: Mapping[str, float] = {"parallel": 1.0, "replace": 1.5}
"""Rework cost per changed part (our own invented weights; see the module docstring)."""

K_SIGMA = 2.0
MERIT_BAND = 0.005
EXHAUSTIVE_LIMIT = 200_000
PAIR_BUDGET = 40_000
BEAM = 200
LOW_SHARE_FLOOR = 0.2
"""A capacitor is tried for a missed low corner when its share is at least this fraction
of the largest share (our own choice)."""
HIGH_ELASTICITY_FLOOR = 0.01
"""A capacitor is tried for a missed high corner when |∂ln f_H/∂ln C| is at least this."""

Action = ReworkAction


@dataclass(frozen=True)
class Change:
    """One change on the bench. ``value`` is the new part's standard value (ohms for a
    resistor, farads for a capacitor: ``part``); ``combined`` what the position then
    measures with the built part in place; ``built`` the built part's value."""

    ref: str
    action: Action
    value: float
    series: str
    combined: float
    tolerance: float = 0.0
    built: float = math.nan
    part: str = "resistor"

    @property
    def unit(self) -> str:
        """The value's SI unit symbol."""
        return "F" if self.part == "capacitor" else "Ω"

    @property
    def ohms(self) -> float:
        """A resistor change's new value (NaN for a capacitor)."""
        return self.value if self.part == "resistor" else math.nan

    @property
    def combined_ohms(self) -> float:
        return self.combined if self.part == "resistor" else math.nan

    @property
    def built_ohms(self) -> float:
        return self.built if self.part == "resistor" else math.nan

    def to_dict(self) -> dict:
        key = "farads" if self.part == "capacitor" else "ohms"
        return {
            "ref": self.ref,
            "part": self.part,
            "action": self.action,
            key: self.value,
            "series": self.series,
            f"combined_{key}": self.combined,
            "tolerance": self.tolerance,
            f"built_{key}": self.built,
        }


@dataclass(frozen=True)
class TrimOption:
    """A rework option (no changes: the board as it is) and how it is predicted to do.

    ``predicted`` holds the spec quantities (then gain and input resistance) of the
    predicted board; ``margin`` the smallest spec margin there, relative to each target;
    ``worst_case_margin`` the same ``k_sigma`` standard deviations further in; ``yield_``
    the Monte Carlo fraction meeting spec (None when not computed) and ``spread`` the
    mean, sd and percentiles of each quantity over the draws.
    """

    changes: tuple[Change, ...]
    predicted: dict[str, float]
    margin: float
    meets_spec: bool
    yield_: float | None
    spread: dict[str, dict[str, float]] | None
    cost: float
    worst_case_margin: float = math.nan
    vce: dict[str, float] = field(default_factory=dict)
    problems: tuple[str, ...] = ()
    draws: dict[str, np.ndarray] | None = field(default=None, repr=False, compare=False)

    def to_dict(self) -> dict:
        return {
            "changes": [c.to_dict() for c in self.changes],
            "predicted": dict(self.predicted),
            "margin": self.margin,
            "worst_case_margin": self.worst_case_margin,
            "meets_spec": self.meets_spec,
            "yield": self.yield_,
            "spread": self.spread,
            "cost": self.cost,
            "vce": dict(self.vce),
            "problems": list(self.problems),
        }


@dataclass(frozen=True)
class TrimResult:
    """Ranked rework options (best first) against the board as it is.

    ``search`` says how combinations were found (``exhaustive``: every one solved;
    ``pruned``: screened first, see :mod:`reconcile.trim.combos`); ``evaluated`` counts
    the candidate boards the engine solved, ``screened`` those only predicted.
    ``searched_changes`` is the largest number of changed parts searched: the search stops
    early, with the same result, once ``top`` options meet spec with margin using fewer
    parts (a larger combination can never rank above them).
    """

    baseline: TrimOption
    options: tuple[TrimOption, ...]
    search: SearchKind
    evaluated: int
    mode: TrimMode = "fitted"
    screened: int = 0
    spec: dict[str, dict[str, float]] = field(default_factory=dict)
    costs: dict[str, float] = field(default_factory=dict)
    k_sigma: float = K_SIGMA
    samples: int = 0
    searched_changes: int = 1

    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    def report(self, console=None) -> None:
        """Print what ``reconcile trim`` prints (a rich console, default stdout)."""
        from reconcile.present.show import show

        show(self, console)

    @property
    def best(self) -> TrimOption | None:
        return self.options[0] if self.options else None

    @property
    def needed(self) -> bool:
        """Whether the board as it is misses spec (at the predicted board)."""
        return not self.baseline.meets_spec

    def to_dict(self) -> dict:
        return {
            "mode": self.mode,
            "baseline": self.baseline.to_dict(),
            "options": [o.to_dict() for o in self.options],
            "search": self.search,
            "evaluated": self.evaluated,
            "screened": self.screened,
            "spec": self.spec,
            "costs": dict(self.costs),
            "k_sigma": self.k_sigma,
            "samples": self.samples,
            "searched_changes": self.searched_changes,
        }


def _validate_costs(costs: Mapping[str, float] | None) -> dict[str, float]:
    out = dict(DEFAULT_COSTS)
    for key, value in (costs or {}).items():
        if key not in ACTIONS:
            raise InputError(
                f"unknown rework action {key!r} in costs; expected replace or parallel"
            )
        if not (isinstance(value, int | float) and math.isfinite(value) and value >= 0):
            raise InputError(f"rework cost for {key} must be a number >= 0, got {value!r}")
        out[key] = float(value)
    return out


def _starting_point(
    board: Board, fit: FitResult | None
) -> tuple[ParameterSpace, np.ndarray, np.ndarray, str]:
    circuit = compile_board(board)
    if fit is None:
        space = build_space(circuit)
        return space, space.prior_mean, np.diag(space.prior_sd**2), "design"
    if tuple(fit.space.circuit.resistor_refs) != circuit.resistor_refs:
        raise InputError("the fit is of another board (its resistors differ from this board's)")
    space = ParameterSpace(circuit, fit.space.parameters)
    return space, np.asarray(fit.x, float), np.asarray(fit.covariance, float), "fitted"


def trim(
    board: Board,
    fit: FitResult | None = None,
    *,
    max_changes: int = 2,
    series_for: SeriesChoice = None,
    costs: Mapping[str, float] | None = None,
    top: int = 10,
    samples: int = 10_000,
    rng: np.random.Generator | int | None = None,
    window: CandidateWindow | None = None,
    k_sigma: float = K_SIGMA,
    merit_band: float = MERIT_BAND,
    exhaustive_limit: int = EXHAUSTIVE_LIMIT,
    pair_budget: int = PAIR_BUDGET,
    beam: int = BEAM,
    variants_per_rework: int = 1,
) -> TrimResult:
    """Propose standard-value rework that brings ``board`` back into its [spec].

    Parameters
    ----------
    board
        The board as drawn (spec, tolerances, ratings, ``trim`` flags).
    fit
        What was built (:func:`reconcile.inference.fitting.fit_board`); None for design mode.
    max_changes
        Most parts changed by one option (default 2).
    series_for
        E-series per part: a mapping ref -> name or a function of the Resistor; default
        from each part's tolerance (IEC 60063 common practice, 1 % -> E96).
    costs
        Rework cost per part by action (``replace``, ``parallel``); see the module docstring.
    top
        How many options to return (each with a yield).
    samples
        Monte Carlo samples per option for the yield (0: no yield).
    rng
        Random generator or seed for the Monte Carlo (default seed 0).
    window, k_sigma, merit_band, exhaustive_limit, pair_budget, beam, variants_per_rework
        Search settings (see :mod:`reconcile.trim.candidates`, :mod:`reconcile.trim.search`,
        :mod:`reconcile.trim.combos`).

    Raises
    ------
    InputError
        The board has no spec to trim to, a setting is out of range, or every part is
        marked ``trim = false``.
    """
    _check_settings(board, max_changes=max_changes, top=top, samples=samples,
                    variants_per_rework=variants_per_rework, pair_budget=pair_budget,
                    beam=beam, k_sigma=k_sigma, merit_band=merit_band)
    cost_of = _validate_costs(costs)
    if not isinstance(rng, np.random.Generator):
        rng = np.random.default_rng(0 if rng is None else rng)
    space, x, cov, mode = _starting_point(board, fit)
    ctx = build_context(board, space.circuit, space, x, cov, mode, float(k_sigma))
    singles = single_candidates(
        board, ctx.circuit.resistor_refs, ctx.built_ohms, series_for=series_for, window=window,
        capacitor_refs=ctx.circuit.capacitor_refs, built_farads=ctx.built_farads,
        capacitors_to_try=capacitors_to_try(ctx),
    )
    scores, evaluated, screened, search, searched = _search(
        ctx, singles, max_changes, cost_of, top, variants_per_rework, merit_band,
        exhaustive_limit, pair_budget, beam,
    )
    return _result(
        ctx, singles, scores, cost_of, top=top, per=variants_per_rework, merit_band=merit_band,
        samples=samples, rng=rng,
        meta=dict(search=search, evaluated=int(evaluated), mode=mode, screened=int(screened),
                  spec=_spec_dict(board), costs=cost_of, k_sigma=float(k_sigma),
                  samples=int(samples), searched_changes=searched),
    )


def capacitors_to_try(ctx: Context) -> frozenset[str]:
    """The capacitors a corner limit calls for (see the module docstring): none unless
    the built board misses a corner limit or reaches it within ``k_sigma`` predicted
    standard deviations."""
    out: set[str] = set()
    refs = ctx.circuit.capacitor_refs
    n_r = len(ctx.circuit.resistor_refs)
    for name in ctx.corner_names:
        k = ctx.quantities.index(name)
        value = corner_values(ctx.hint, (name,))[0][0]
        lo, hi = ctx.low[k], ctx.high[k]
        reach = ctx.k_sigma * math.sqrt(max(float(ctx.var0[k]), 0.0))
        if min(value - lo, hi - value) - reach >= 0.0:
            continue
        if name == "low_corner":
            stacked = with_stepped_capacitors(ctx.base.linear)
            shares = low_corner_shares(stacked, find_corners(stacked))
            top = max((sh.share for sh in shares if math.isfinite(sh.share)), default=0.0)
            out |= {sh.ref for sh in shares if top > 0 and sh.share >= LOW_SHARE_FLOOR * top}
        elif math.isfinite(value):
            elasticity = ctx.sens_col[k, n_r:] / value
            out |= {ref for ref, e in zip(refs, elasticity, strict=True)
                    if abs(e) >= HIGH_ELASTICITY_FLOOR}
    return frozenset(ref for ref in out if ctx.board.capacitors[ref].trim)


def _result(
    ctx: Context, singles: Singles, scores: Scores, cost_of: dict[str, float], *, top: int,
    per: int, merit_band: float, samples: int, rng: np.random.Generator, meta: dict,
) -> TrimResult:
    """Rank the scored options, keep the distinct best ``top``, estimate their yields
    (and the baseline's) in one Monte Carlo call, and assemble the result."""
    cost = combo_costs(singles, scores.combos, cost_of["replace"], cost_of["parallel"])
    order = rank_order(scores, cost, merit_band, combo_change(ctx, singles, scores.combos))
    chosen = _distinct(singles, scores, order, top, per, merit_band)
    width = scores.combos.shape[1]
    rows = np.vstack([np.full((1, width), -1, dtype=np.intp), scores.combos[chosen]])
    estimates: list[YieldEstimate | None] = [None] * rows.shape[0]
    if samples:
        kept = evaluate(ctx, singles, rows, keep_v=True)
        estimates = yields(ctx, singles, rows, samples, rng, option_v=kept.v,
                           option_corners=kept.corners)
    options = tuple(
        _option(ctx, singles, scores, int(i), float(cost[i]), est)
        for i, est in zip(chosen, estimates[1:], strict=True)
    )
    return TrimResult(baseline=_baseline_option(ctx, estimates[0]), options=options, **meta)



def _check_settings(
    board: Board, *, max_changes, top, samples, variants_per_rework, pair_budget, beam,
    k_sigma, merit_band,
) -> None:
    """Refuse a board with nothing to trim to and settings out of range."""
    spec = board.spec
    if (not spec.targets and spec.min_vce is None and spec.low_corner_max is None
            and spec.high_corner_min is None):
        raise InputError("the board has no [spec] to trim to", path=board.source_path, key="spec")
    if spec_corners(board) + tuple(spec.targets) and not (
            board.signal.input and board.signal.output):
        raise InputError(
            "[spec] targets and corners need a [signal] set-up (input and output)",
            path=board.source_path,
            key="signal",
        )
    for name, value, least in (
        ("max_changes", max_changes, 1),
        ("top", top, 1),
        ("samples", samples, 0),
        ("variants_per_rework", variants_per_rework, 1),
        ("pair_budget", pair_budget, 1),
        ("beam", beam, 1),
    ):
        if not isinstance(value, int | np.integer) or value < least:
            raise InputError(f"{name} must be an integer >= {least}, got {value!r}")
    if not (k_sigma >= 0 and merit_band > 0):
        raise InputError("k_sigma must be >= 0 and merit_band > 0")


def _spec_dict(board: Board) -> dict:
    """The spec the options are scored against, as the JSON shows it."""
    spec = {
        name: {"target": t.value, "low": t.low, "high": t.high}
        for name, t in board.spec.targets.items()
    }
    if board.spec.min_vce is not None:
        spec["min_vce"] = {"value": board.spec.min_vce}
    if board.spec.low_corner_max is not None:
        spec["low_corner"] = {"target": board.spec.low_corner_max, "low": None,
                              "high": board.spec.low_corner_max}
    if board.spec.high_corner_min is not None:
        spec["high_corner"] = {"target": board.spec.high_corner_min,
                               "low": board.spec.high_corner_min, "high": None}
    return spec

def _search(
    ctx: Context,
    singles: Singles,
    max_changes: int,
    cost_of: dict[str, float],
    top: int,
    variants_per_rework: int,
    merit_band: float,
    exhaustive_limit: int,
    pair_budget: int,
    beam: int,
) -> tuple[Scores, int, int, str, int]:
    """Solve single changes, then pairs (exhaustive or pruned), then larger combinations
    (pruned, grown by beam); returns (scores, evaluated, screened, search, searched)."""
    width = max_changes
    one = np.full((singles.size, width), -1, dtype=np.intp)
    one[:, 0] = np.arange(singles.size)
    single_scores = evaluate(ctx, singles, one, keep_v=True)
    found: list[Scores] = [single_scores]
    evaluated, screened, search, searched = singles.size, 0, "exhaustive", 1
    n_parts = len(np.unique(singles.column))

    def enough() -> bool:
        # Every option with more parts ranks below every one that meets spec with margin:
        # with `top` of those listed already, larger combinations cannot change the list.
        so_far = Scores.concatenate([_subset(f, slice(None)) for f in found])
        c = combo_costs(singles, so_far.combos, cost_of["replace"], cost_of["parallel"])
        order = rank_order(so_far, c, merit_band, combo_change(ctx, singles, so_far.combos))
        picked = _distinct(singles, so_far, order, top, variants_per_rework, merit_band)
        tier, _ = merit(so_far, merit_band)
        return int(np.sum(tier[picked] == 0)) >= top

    if max_changes >= 2 and n_parts >= 2 and not enough():
        searched = 2
        if pair_count(singles) <= exhaustive_limit:
            pairs = all_pairs(singles, width)
        else:
            pairs, n_screened = screen_pairs(ctx, singles, single_scores, pair_budget, width)
            screened += n_screened
            if pairs.shape[0] < n_screened:
                search = "pruned"
        pair_scores = evaluate(ctx, singles, pairs, single_v=single_scores.v)
        found.append(pair_scores)
        evaluated += pairs.shape[0]
        seeds_scores = pair_scores
        for k in range(3, max_changes + 1):
            if n_parts < k or seeds_scores.size == 0 or enough():
                break
            search, searched = "pruned", k
            order = rank_order(
                seeds_scores,
                combo_costs(singles, seeds_scores.combos, cost_of["replace"], cost_of["parallel"]),
                merit_band, combo_change(ctx, singles, seeds_scores.combos),
            )[:beam]
            seeds = seeds_scores.combos[order]
            seed_view = _subset(seeds_scores, order)
            grown, n_screened = grow(
                ctx, singles, single_scores, seeds, seed_view, pair_budget, width
            )
            screened += n_screened
            seeds_scores = evaluate(ctx, singles, grown, single_v=single_scores.v)
            found.append(seeds_scores)
            evaluated += grown.shape[0]
    scores = Scores.concatenate([_subset(s, slice(None)) for s in found])
    return scores, evaluated, screened, search, searched


def _subset(scores: Scores, index) -> Scores:
    return Scores(
        **{
            k: (v[index] if isinstance(v, np.ndarray) else v)
            for k, v in scores.__dict__.items()
            if k not in ("v", "corners")
        }
    )


def _distinct(
    singles: Singles, scores: Scores, order: np.ndarray, top: int, per: int, merit_band: float
) -> list[int]:
    """The first ``top`` of ``order``, with at most ``per`` per rework (the same parts with
    the same actions), and without an option that only adds parts to a listed one of at
    least its tier and merit level (an idle extra change)."""
    tier, level = merit(scores, merit_band)
    seen: dict[frozenset, int] = {}
    listed: list[tuple[frozenset, int, float]] = []
    out: list[int] = []
    for i in order:
        row = scores.combos[i]
        key = frozenset((int(singles.column[j]), int(singles.action[j])) for j in row[row >= 0])
        if seen.get(key, 0) >= per:
            continue
        if any(k < key and t <= tier[i] and lv <= level[i] for k, t, lv in listed):
            continue
        seen[key] = seen.get(key, 0) + 1
        listed.append((key, int(tier[i]), float(level[i])))
        out.append(int(i))
        if len(out) >= top:
            break
    return out


def _changes(ctx: Context, singles: Singles, row: np.ndarray) -> tuple[Change, ...]:
    out = []
    for j in sorted(row[row >= 0].tolist(), key=lambda j: singles.column[j]):
        col = int(singles.column[j])
        cap = bool(singles.is_capacitor(np.array([j]))[0])
        built = (ctx.built_farads[col - singles.resistor_count] if cap
                 else ctx.built_ohms[col])
        out.append(
            Change(
                ref=singles.refs[col],
                action=ACTIONS[int(singles.action[j])],
                value=float(singles.new_value[j]),
                series=singles.series[col],
                combined=float(singles.combined_value[j]),
                tolerance=float(singles.tolerance[j]),
                built=float(built),
                part="capacitor" if cap else "resistor",
            )
        )
    return tuple(out)


def _problems(ctx: Context, scores: Scores, i: int) -> tuple[str, ...]:
    """Why option ``i`` falls short, short enough for a table cell: each spec quantity
    outside its limits, a transistor out of forward-active or under ``min_vce``, a part
    over its rating; for one in spec only at the predicted board, that ``k_sigma``
    predicted standard deviations reach a limit (the worst-case margin, which is what
    lowers its yield) or bring |VCE| under ``min_vce``."""
    if not bool(scores.converged[i]):
        return ("no DC operating point",)
    q, vce, ratio = scores.q[i], scores.vce[i], scores.power_ratio[i]
    out = []
    for k in range(ctx.n_spec):
        entry = REGISTRY.get(ctx.quantities[k])
        name, unit = (entry.short, entry.unit) if entry else (ctx.quantities[k], "")
        if ctx.quantities[k] in CORNERS:
            name, unit = ctx.quantities[k].replace("_", " "), "Hz"
        if not q[k] >= ctx.low[k]:
            out.append(f"{name} {format_si(q[k], unit, 4)} < min {format_si(ctx.low[k], unit, 4)}")
        elif not q[k] <= ctx.high[k]:
            out.append(f"{name} {format_si(q[k], unit, 4)} > max {format_si(ctx.high[k], unit, 4)}")
    if not bool(scores.forward_active[i]):
        out.append("a transistor not forward-active")
    if ctx.min_vce is not None:
        for t, ref in enumerate(ctx.circuit.transistor_refs):
            if ctx.circuit.polarity[t] * vce[t] < ctx.min_vce:
                out.append(f"{ref} |VCE| {format_si(abs(vce[t]), 'V', 3)} < min_vce "
                           f"{format_si(ctx.min_vce, 'V', 3)}")
    for c, ref in enumerate(ctx.circuit.resistor_refs):
        if ratio[c] > 1.0:
            out.append(f"{ref} at {ratio[c]:.0%} of its rating")
    if not out and bool(scores.in_spec[i]):
        sigma = f"{ctx.k_sigma:g}σ"
        if not scores.worst_case_margin[i] >= 0.0:
            out.append(f"{sigma} reaches a limit ({100 * scores.worst_case_margin[i]:+.1f}%)")
        if ctx.min_vce is not None and not bool(scores.headroom_robust[i]):
            out.append(f"|VCE| within {sigma} of min_vce")
    return tuple(out)


def _option(
    ctx: Context, singles: Singles, scores: Scores, i: int, cost: float, est: YieldEstimate | None
) -> TrimOption:
    q = scores.q[i]
    return TrimOption(
        changes=_changes(ctx, singles, scores.combos[i]),
        predicted={n: float(q[k]) for k, n in enumerate(ctx.quantities)},
        margin=float(scores.margin[i]),
        meets_spec=bool(scores.meets[i]),
        yield_=None if est is None else est.fraction,
        spread=None if est is None else est.spread,
        cost=cost,
        worst_case_margin=float(scores.worst_case_margin[i]),
        vce={ref: float(scores.vce[i, t]) for t, ref in enumerate(ctx.circuit.transistor_refs)},
        problems=_problems(ctx, scores, i),
        draws=None if est is None else est.draws,
    )


def _baseline_option(ctx: Context, est: YieldEstimate | None) -> TrimOption:
    """The board as it is, scored like an option with no changes."""
    none = np.full((1, 1), -1, dtype=np.intp)
    dummy = Singles(
        np.zeros(1, np.intp),
        np.zeros(1, np.int8),
        np.ones(1),
        np.ones(1),
        np.zeros(1),
        ("",) * len(ctx.circuit.resistor_refs),
        ctx.circuit.resistor_refs,
    )
    s = score_solution(ctx, dummy, none, ctx.base, np.ones((1, len(ctx.circuit.resistor_refs))),
                       hint=ctx.hint)
    return _option(ctx, dummy, s, 0, 0.0, est)


__all__ = ["CandidateWindow", "Change", "TrimOption", "TrimResult", "trim"]
