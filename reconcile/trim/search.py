"""Score rework candidates with the engine: many boards per call, then rank them.

A candidate is a tuple of single changes (see :mod:`reconcile.trim.candidates`) on
distinct parts (resistors, and capacitors when a corner limit calls for them), applied to the built board (the fitted MAP board, or the drawn board
in design mode). Each is solved exactly by the batched engine and scored:

* constraints: a DC solution was found, every transistor is forward-active with
  |VCE| >= ``spec.min_vce``, and no resistor dissipates more than its rating; for a
  parallel change the built part and the new part are checked separately (each carries
  its share of the power, inversely proportional to its resistance), and the new part
  has the rating of the part it joins or replaces;
* ``margin``: for each [spec] entry min(q − low, high − q)/target at the predicted
  board, the smallest over the entries (negative when outside). A ``low_corner`` limit
  is an entry with only a high limit (the max), a ``high_corner`` limit one with only a
  low limit (the min), the limit being the target, as
  :func:`reconcile.engine.solution.check_corners` scores them: a board with no low corner (DC-coupled) counts 0 Hz, one with no high
  corner infinity. The corners are root-found by the engine
  (:func:`reconcile.engine.sweep.corners_near`, from the built board's corners) in the
  same engine evaluation as the other quantities;
* ``worst_case_margin``: the same with each distance shortened by ``k_sigma`` predicted
  standard deviations of q, so that a candidate that sits in spec only thanks to a
  favourable guess of the built board ranks below one that is in spec whatever the
  remaining uncertainty. The standard deviation is first order: the engine's
  sensitivities at the built board (central finite differences, one engine call)
  propagated through the posterior covariance, with the changed part's coefficient
  scaled by d ln R_after / d ln R_built (0 for a replacement, R_new/(R_built + R_new)
  for a parallel resistor, C_built/(C_built + C_new) for a parallel capacitor) and the
  new part's own tolerance (a rectangular ±tol, standard
  deviation tol/√3, JCGM 100:2008 4.3.7) added through d ln R_after / d ln R_new.
  A corner's standard deviation is scaled by its value over the built board's (its
  relative spread carries over: a corner moves as 1/C and 1/R of the parts that set it,
  and a capacitor change may move it by a decade).
  With ``min_vce`` the same first-order spread of each transistor's |VCE| decides whether
  the headroom holds ``k_sigma`` deviations down (``headroom_robust``).

Which combinations are solved is :mod:`reconcile.trim.combos`' job; ranking them is
:func:`merit` and :func:`rank_order` here.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from reconcile.model.board import Board
from reconcile.model.kinds import TrimMode
from reconcile.engine import BatchSolution, Circuit, DCState, Parameters, solve_batch
from reconcile.engine.batch import bytes_per_board
from reconcile.engine.budget import THROUGHPUT_ROWS, chunks, rows_per_chunk
from reconcile.engine.sweep import Corners, corners_near, find_corners
from reconcile.inference.priors import ParameterSpace
from reconcile.trim.candidates import PARALLEL, Singles


FD_STEP_OF_PRIOR_SD = 0.01
"""Finite-difference step for the sensitivities, as a fraction of each prior sd."""

FD_STEP_LN_R = 1e-4
"""Finite-difference step in ln R (ln C) for the resistor (capacitor) columns."""

CORNERS = ("low_corner", "high_corner")
"""The corner limits of ``[spec]``, as quantities trim scores (Hz)."""


@dataclass(frozen=True)
class Context:
    """Everything fixed while candidates are scored.

    ``quantities`` lists the quantities reported for an option: the spec entries first
    (``n_spec`` of them: the small-signal targets, then the corner limits), then gain
    and input resistance if not among them. Part columns (``sens_col``,
    ``param_of_col``, ``v_sens_col``) are the resistors, then the capacitors.
    The watched quantities, whose predicted spread the worst-case margin uses, are the spec
    entries and, with ``min_vce``, each transistor's |VCE| (polarity · VCE).
    """

    board: Board
    circuit: Circuit
    space: ParameterSpace
    x: np.ndarray  # posterior mean, internal
    covariance: np.ndarray  # posterior covariance, internal
    mode: TrimMode
    base_params: Parameters  # one sample: the built board
    base: BatchSolution
    built_ohms: np.ndarray  # (nR,)
    built_farads: np.ndarray  # (nC,)
    hint: Corners | None  # the built board's corners (None: no corner limit in the spec)
    ratings: np.ndarray  # (nR,) W, nan where none
    quantities: tuple[str, ...]
    n_spec: int
    low: np.ndarray  # (n_spec,)
    high: np.ndarray
    target: np.ndarray
    min_vce: float | None
    k_sigma: float
    sens: np.ndarray  # (n_watch, P) dq/dx at the built board
    sens_col: np.ndarray  # (n_watch, nR + nC) dq/d ln R (ln C) per part column
    cov_sens: np.ndarray  # (P, n_watch) Σ·gᵀ
    var0: np.ndarray  # (n_watch,) gᵀΣg
    param_of_col: np.ndarray  # (nR + nC,) index into the space, or -1
    v_sens: np.ndarray  # (P, n_nodes + 1) dV/dx, zero rows for resistor parameters
    v_sens_col: np.ndarray  # (nR + nC, n_nodes + 1) dV/d ln R (0 for capacitors)

    @property
    def corner_names(self) -> tuple[str, ...]:
        return tuple(q for q in self.quantities[: self.n_spec] if q in CORNERS)


def build_context(
    board: Board,
    circuit: Circuit,
    space: ParameterSpace,
    x: np.ndarray,
    covariance: np.ndarray,
    mode: str,
    k_sigma: float,
) -> Context:
    """Solve the built board and its sensitivities (one engine call of 1 + 2(P + nR + nC)
    boards)."""
    spec = board.spec
    names = tuple(spec.targets) + spec_corners(board)
    extra = tuple(q for q in ("gain", "input_resistance") if q not in names)
    has_signal = circuit.input_node is not None and circuit.output_node is not None
    quantities = names + (extra if has_signal else ())
    base_params = space.to_parameters(x[None, :])
    if mode == "design":  # exactly the drawn values, not exp(ln R) with its float noise
        drawn = np.array([board.resistors[r].ohms for r in circuit.resistor_refs])[None, :]
        base_params = base_params.with_values(resistor_ohms=drawn)
    n_r, n_c = len(circuit.resistor_refs), len(circuit.capacitor_refs)
    h = FD_STEP_OF_PRIOR_SD * space.prior_sd
    probes = _probe_boards(space, x, base_params, h, n_r, n_c)
    base, hint, watched_parts, v_parts = None, None, [], []
    for sl in chunks(probes.n_samples, boards_per_call(circuit)):
        sol = solve_batch(circuit, probes.take(sl))
        corners = find_corners(sol.linear) if spec_corners(board) else None
        if base is None:
            base = _take(sol, 0)
            hint = None if corners is None else take_corners(corners, np.zeros(1, np.intp))
        watched_parts.append(_watched(sol, board, circuit, corners))
        v_parts.append(sol.state.v)
    sens, sens_col, v_sens, v_sens_col = _central_differences(
        np.concatenate(watched_parts, axis=1), np.concatenate(v_parts), circuit, space, h)
    cov_sens = covariance @ sens.T
    var0 = np.einsum("qp,pq->q", sens, cov_sens)
    param_of_col = np.full(n_r + n_c, -1, dtype=np.intp)
    for j, fp in enumerate(space.parameters):
        if fp.kind == "resistor":
            param_of_col[fp.column] = j
        elif fp.kind == "capacitor":
            param_of_col[n_r + fp.column] = j
    ratings = np.array(
        [
            np.nan if board.resistors[ref].rating_w is None else board.resistors[ref].rating_w
            for ref in circuit.resistor_refs
        ],
        dtype=float,
    )
    return Context(
        board=board,
        circuit=circuit,
        space=space,
        x=x,
        covariance=covariance,
        mode=mode,
        base_params=base_params,
        base=base,
        built_ohms=base_params.resistor_ohms[0].copy(),
        built_farads=base_params.capacitor_farads[0].copy(),
        hint=hint,
        ratings=ratings,
        quantities=quantities,
        n_spec=len(names),
        low=np.array([_limits(spec, n)[0] for n in names]),
        high=np.array([_limits(spec, n)[1] for n in names]),
        target=np.array([_limits(spec, n)[2] for n in names]),
        min_vce=spec.min_vce,
        k_sigma=k_sigma,
        sens=sens,
        sens_col=sens_col,
        cov_sens=cov_sens,
        var0=var0,
        param_of_col=param_of_col,
        v_sens=v_sens,
        v_sens_col=v_sens_col,
    )


def spec_corners(board: Board) -> tuple[str, ...]:
    """The corners ``[spec]`` limits, in :data:`CORNERS` order."""
    spec = board.spec
    return tuple(name for name, lim in zip(CORNERS, (spec.low_corner_max, spec.high_corner_min),
                                           strict=True) if lim is not None)


def _limits(spec, name: str) -> tuple[float, float, float]:
    """(low, high, target) of a spec entry; a corner limit is one-sided, its limit the
    target."""
    if name == "low_corner":
        return -math.inf, spec.low_corner_max, spec.low_corner_max
    if name == "high_corner":
        return spec.high_corner_min, math.inf, spec.high_corner_min
    t = spec.targets[name]
    return t.low, t.high, t.value


def take_corners(corners: Corners, index: np.ndarray) -> Corners:
    """Rows ``index`` of a :class:`~reconcile.engine.sweep.Corners`."""
    return Corners(*(np.asarray(getattr(corners, f.name))[index]
                     for f in dataclasses.fields(Corners)))


def concatenate_corners(items: list[Corners]) -> Corners:
    return Corners(*(np.concatenate([getattr(c, f.name) for c in items])
                     for f in dataclasses.fields(Corners)))


def corner_values(corners: Corners, names: tuple[str, ...]) -> list[np.ndarray]:
    """The corners as trim scores them: no low corner 0 Hz, no high corner infinity."""
    out = []
    for name in names:
        if name == "low_corner":
            out.append(np.where(np.isnan(corners.low_corner), 0.0, corners.low_corner))
        else:
            out.append(np.where(np.isnan(corners.high_corner), math.inf, corners.high_corner))
    return out


def _probe_boards(space: ParameterSpace, x: np.ndarray, base_params: Parameters,
                  h: np.ndarray, n_r: int, n_c: int) -> Parameters:
    """The built board, then ±h along each free parameter, then each resistor column
    and each capacitor column stepped by ±FD_STEP_LN_R in ln R or ln C
    (1 + 2P + 2nR + 2nC boards)."""
    n_p = space.size
    xs = np.repeat(x[None, :], 1 + 2 * n_p, axis=0)
    for j in range(n_p):
        xs[1 + j, j] += h[j]
        xs[1 + n_p + j, j] -= h[j]
    params = space.to_parameters(xs)
    r = np.repeat(base_params.resistor_ohms, 2 * n_r, axis=0)
    for c in range(n_r):
        r[c, c] *= math.exp(FD_STEP_LN_R)
        r[n_r + c, c] *= math.exp(-FD_STEP_LN_R)
    col_params = base_params.repeat(2 * n_r).with_values(resistor_ohms=r)
    c = np.repeat(base_params.capacitor_farads, 2 * n_c, axis=0)
    for k in range(n_c):
        c[k, k] *= math.exp(FD_STEP_LN_R)
        c[n_c + k, k] *= math.exp(-FD_STEP_LN_R)
    cap_params = base_params.repeat(2 * n_c).with_values(capacitor_farads=c)
    return Parameters.concatenate([params, col_params, cap_params])


def boards_per_call(circuit: Circuit) -> int:
    """Boards per engine call within half the memory budget, at most
    :data:`reconcile.engine.budget.THROUGHPUT_ROWS` (the engine's fastest call size,
    which also keeps a large candidate set's working memory to a few tens of MiB)."""
    return rows_per_chunk(bytes_per_board(circuit), share=0.5, at_most=THROUGHPUT_ROWS)


def _watched(sol: BatchSolution, board: Board, circuit: Circuit,
             corners: Corners | None) -> np.ndarray:
    """The quantities trim watches (Q, N): the spec targets, the spec'd corners, then
    each transistor's VCE (polarity-signed) when the spec limits it."""
    watched = [np.nan_to_num(sol.quantity(name), nan=0.0) for name in board.spec.targets]
    if corners is not None:
        watched += [np.nan_to_num(v, nan=0.0, posinf=0.0)
                    for v in corner_values(corners, spec_corners(board))]
    if board.spec.min_vce is not None:
        watched += list((circuit.polarity * sol.vce).T)
    return np.array(watched).reshape(len(watched), sol.state.v.shape[0])


def _central_differences(watched: np.ndarray, v: np.ndarray, circuit: Circuit,
                         space: ParameterSpace, h: np.ndarray):
    """Sensitivities of the watched quantities (Q, N) and of the node voltages (N, size),
    per free parameter and per part column, from the boards of :func:`_probe_boards`."""
    n_p, n_r = space.size, len(circuit.resistor_refs)
    n_c = len(circuit.capacitor_refs)
    sens = np.zeros((len(watched), n_p))
    sens_col = np.zeros((len(watched), n_r + n_c))
    off, off_c = 1 + 2 * n_p, 1 + 2 * n_p + 2 * n_r
    for i, q in enumerate(watched):
        sens[i] = (q[1 : 1 + n_p] - q[1 + n_p : off]) / (2.0 * h)
        sens_col[i, :n_r] = (q[off : off + n_r] - q[off + n_r : off_c]) / (2.0 * FD_STEP_LN_R)
        sens_col[i, n_r:] = (q[off_c : off_c + n_c] - q[off_c + n_c : off_c + 2 * n_c]) / (
            2.0 * FD_STEP_LN_R)
    v_sens = (v[1 : 1 + n_p] - v[1 + n_p : off]) / (2.0 * h[:, None])
    v_sens_col = np.zeros((n_r + n_c, v.shape[1]))
    v_sens_col[:n_r] = (v[off : off + n_r] - v[off + n_r : off_c]) / (2.0 * FD_STEP_LN_R)
    for j, fp in enumerate(space.parameters):
        if fp.kind == "resistor":
            v_sens[j] = 0.0
    return sens, sens_col, v_sens, v_sens_col


def _take(sol: BatchSolution, i: int) -> BatchSolution:
    """One sample of a batch solution (only the fields trim reads)."""
    s = slice(i, i + 1)
    state = DCState(
        sol.state.v[s], sol.state.vj[s], sol.state.converged[s], sol.state.iterations[s]
    )
    ss = sol.small_signal
    if ss is not None:
        ss = type(ss)(**{f.name: getattr(ss, f.name)[s] for f in dataclasses.fields(ss)})
    fields = {
        k: getattr(sol, k)[s]
        for k in (
            "node_v",
            "ic",
            "ib",
            "ie",
            "vbe",
            "vce",
            "region",
            "gm",
            "rpi",
            "ro",
            "transistor_power",
            "supply_current",
            "resistor_current",
            "resistor_power",
            "kcl_residual",
        )
    }
    linear = None if sol.linear is None else sol.linear.take(s)
    return BatchSolution(
        circuit=sol.circuit, params=sol.params.take(s), state=state, small_signal=ss,
        linear=linear, **fields
    )


@dataclass(frozen=True)
class Scores:
    """Candidates and how each scored; every array has a leading axis of length M.

    ``combos`` indexes the single-change table, padded with -1 to ``max_changes`` columns.
    """

    combos: np.ndarray  # (M, K)
    q: np.ndarray  # (M, n_quantities) small-signal quantities
    vce: np.ndarray  # (M, nT) as measured (signed)
    converged: np.ndarray  # (M,)
    forward_active: np.ndarray  # (M,) every transistor
    headroom_ok: np.ndarray  # (M,)
    power_ratio: np.ndarray  # (M, nR) worst part's dissipation / rating (nan: no rating)
    margin: np.ndarray  # (M,)
    worst_case_margin: np.ndarray  # (M,)
    in_spec: np.ndarray  # (M,) every spec entry within its limits
    headroom_robust: np.ndarray  # (M,) |VCE| - k_sigma·sd >= min_vce for every transistor
    v: np.ndarray | None = None  # (M, n_nodes + 1) DC node voltages (singles only)
    corners: Corners | None = None  # (M,) with ``keep_v`` and a corner limit in the spec

    @property
    def size(self) -> int:
        return int(self.combos.shape[0])

    @property
    def ratings_ok(self) -> np.ndarray:
        return ~np.any(self.power_ratio > 1.0, axis=1)

    @property
    def meets(self) -> np.ndarray:
        return (
            self.converged & self.forward_active & self.headroom_ok & self.ratings_ok & self.in_spec
        )

    @property
    def n_changes(self) -> np.ndarray:
        return np.sum(self.combos >= 0, axis=1)

    @staticmethod
    def concatenate(items: list[Scores]) -> Scores:
        def cat(name):
            return np.concatenate([getattr(s, name) for s in items], axis=0)

        return Scores(
            combos=cat("combos"),
            q=cat("q"),
            vce=cat("vce"),
            converged=cat("converged"),
            forward_active=cat("forward_active"),
            headroom_ok=cat("headroom_ok"),
            power_ratio=cat("power_ratio"),
            margin=cat("margin"),
            worst_case_margin=cat("worst_case_margin"),
            in_spec=cat("in_spec"),
            headroom_robust=cat("headroom_robust"),
        )


def spec_scores(
    ctx: Context,
    singles: Singles,
    combos: np.ndarray,
    q_spec: np.ndarray,
    headroom: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(margin, worst-case margin, in spec, robust headroom) of candidates whose spec
    quantities are ``q_spec`` (M, n_spec) and |VCE| values ``headroom`` (M, nT)."""
    m = combos.shape[0]
    sd = np.sqrt(predicted_variance(ctx, singles, combos))
    for name in ctx.corner_names:  # a corner's spread is relative (f ∝ 1/C, 1/R)
        k = ctx.quantities.index(name)
        base = corner_values(ctx.hint, (name,))[0][0]
        if math.isfinite(base) and base > 0:
            with np.errstate(invalid="ignore"):
                sd[:, k] *= np.where(np.isfinite(q_spec[:, k]), q_spec[:, k] / base, 1.0)
    if ctx.min_vce is None or headroom is None:
        robust = np.ones(m, dtype=bool)
    else:
        low = headroom - ctx.k_sigma * sd[:, ctx.n_spec :]
        robust = np.all(low >= ctx.min_vce, axis=1)
    if ctx.n_spec == 0:
        zero = np.zeros(m)
        return zero, zero, np.ones(m, dtype=bool), robust
    with np.errstate(invalid="ignore"):  # one-sided corner limits: an infinite side
        dist = np.minimum(np.where(np.isinf(ctx.low), np.inf, q_spec - ctx.low),
                          np.where(np.isinf(ctx.high), np.inf, ctx.high - q_spec))
    dist = np.where(np.isnan(dist), -np.inf, dist)  # (M, n_spec)
    margin = np.min(dist / ctx.target, axis=1)
    worst_each = (dist - ctx.k_sigma * sd[:, : ctx.n_spec]) / ctx.target
    # a one-sided limit (a corner) counts only until it is met with its worst case:
    # more margin past it is no more merit (a smaller capacitor is as good)
    one_sided = np.isinf(ctx.low) | np.isinf(ctx.high)
    worst_each = np.where(one_sided, np.minimum(worst_each, 0.0), worst_each)
    worst = np.min(worst_each, axis=1)
    in_spec = np.all(dist >= 0.0, axis=1)
    return margin, worst, in_spec, robust


def predicted_variance(ctx: Context, singles: Singles, combos: np.ndarray) -> np.ndarray:
    """First-order variance (M, n_watch) of each watched quantity after the changes.

    With g the sensitivities to the internal parameters and Σ their covariance, a change
    on part column c scales that part's coefficient by s (0 replace, R_new/(R_b+R_new)
    for a parallel resistor, C_b/(C_b + C_new) for a parallel capacitor) and adds the new
    part's term: var = g'ᵀΣg' + Σ_c ((1 − s_c)·g_c·σ_new)²,
    g' = g − Σ_c (1 − s_c) g_c e_c.
    """
    m, k = combos.shape
    var = np.repeat(ctx.var0[None, :], m, axis=0)
    built = np.concatenate([ctx.built_ohms, ctx.built_farads])
    d_list, j_list = [], []
    for s in range(k):
        idx = combos[:, s]
        valid = idx >= 0
        safe = np.where(valid, idx, 0)
        col = singles.column[safe]
        v_b = built[col]
        v_new = singles.new_value[safe]
        kept = np.where(singles.is_capacitor(safe), v_b, v_new) / (v_b + v_new)
        keep = np.where(singles.action[safe] == PARALLEL, kept, 0.0)
        d = np.where(valid[:, None], (1.0 - keep)[:, None] * ctx.sens_col[:, col].T, 0.0)  # (M, nq)
        sd_new = singles.tolerance[safe] / math.sqrt(3.0)
        var += (d * sd_new[:, None]) ** 2
        j = ctx.param_of_col[col]
        j = np.where(valid, j, -1)
        has = j >= 0
        jj = np.where(has, j, 0)
        var -= 2.0 * np.where(has[:, None], d * ctx.cov_sens[jj], 0.0)
        d_list.append(np.where(has[:, None], d, 0.0))
        j_list.append(jj)
    for a in range(k):
        for b in range(k):
            cov_ab = ctx.covariance[j_list[a], j_list[b]]
            var += d_list[a] * d_list[b] * cov_ab[:, None]
    return np.clip(var, 0.0, None)


def evaluate(
    ctx: Context,
    singles: Singles,
    combos: np.ndarray,
    *,
    single_v: np.ndarray | None = None,
    keep_v: bool = False,
) -> Scores:
    """Solve every candidate exactly and score it (chunks of :func:`boards_per_call`
    boards).

    ``single_v`` (node voltages of every single change) seeds Newton at the first-order
    superposition of the changes' effects; otherwise it starts from the built board.
    """
    step = boards_per_call(ctx.circuit)
    parts = [_evaluate_chunk(ctx, singles, combos[sl], single_v, keep_v)
             for sl in chunks(combos.shape[0], step)]
    if len(parts) == 1:
        return parts[0]
    out = Scores.concatenate(parts)
    if keep_v:
        corners = (None if parts[0].corners is None
                   else concatenate_corners([p.corners for p in parts]))
        out = Scores(**{**out.__dict__, "v": np.concatenate([p.v for p in parts]),
                        "corners": corners})
    return out


def changed_parts(
    ctx: Context, singles: Singles, combos: np.ndarray, base_ohms: np.ndarray,
    base_farads: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Resistor values (M, nR), capacitor values (M, nC) after the changes and the
    resistors' power-share factors (M, nR).

    ``base_ohms`` and ``base_farads`` are the built values. The share factor turns the
    dissipation of the combined resistance into that of its hotter part:
    R_after / min(R_built, R_new) for a parallel change, 1 elsewhere. Capacitors in
    parallel add.
    """
    r, c = base_ohms.copy(), base_farads.copy()
    share = np.ones_like(r)
    rows = np.arange(r.shape[0])
    n_r = singles.resistor_count
    for s in range(combos.shape[1]):
        idx = combos[:, s]
        valid = idx >= 0
        cap = np.zeros_like(valid)
        cap[valid] = singles.is_capacitor(idx[valid])
        i, sel = idx[valid & ~cap], rows[valid & ~cap]
        col = singles.column[i]
        new = singles.new_value[i]
        par = singles.action[i] == PARALLEL
        built = r[sel, col]
        after = np.where(par, built * new / (built + new), new)
        r[sel, col] = after
        share[sel, col] = np.where(par, after / np.minimum(built, new), 1.0)
        i, sel = idx[cap], rows[cap]
        col = singles.column[i] - n_r
        new = singles.new_value[i]
        c[sel, col] = np.where(singles.action[i] == PARALLEL, c[sel, col] + new, new)
    return r, c, share


def _evaluate_chunk(ctx, singles, combos, single_v, keep_v) -> Scores:
    m = combos.shape[0]
    base_r = np.repeat(ctx.base_params.resistor_ohms, m, axis=0)
    base_c = np.repeat(ctx.base_params.capacitor_farads, m, axis=0)
    r, c, share = changed_parts(ctx, singles, combos, base_r, base_c)
    params = ctx.base_params.repeat(m).with_values(resistor_ohms=r, capacitor_farads=c)
    v0 = ctx.base.state.v
    if single_v is not None:
        v = np.repeat(v0, m, axis=0)
        for s in range(combos.shape[1]):
            idx = combos[:, s]
            valid = idx >= 0
            v[valid] += single_v[idx[valid]] - v0
        initial = DCState(v, _junctions(ctx.circuit, v), np.ones(m, bool), np.zeros(m, np.int64))
    else:
        initial = ctx.base.state
    sol = solve_batch(ctx.circuit, params, initial)
    hint = None if ctx.hint is None else take_corners(ctx.hint, np.zeros(m, np.intp))
    return score_solution(ctx, singles, combos, sol, share, keep_v=keep_v, hint=hint)


def score_solution(
    ctx: Context,
    singles: Singles,
    combos: np.ndarray,
    sol: BatchSolution,
    share: np.ndarray,
    *,
    keep_v: bool = False,
    hint: Corners | None = None,
) -> Scores:
    """Scores of solved candidates (``share``: see :func:`changed_parts`). With corner
    limits in the spec, ``hint`` (one row per candidate) are corners near theirs
    (:func:`reconcile.engine.sweep.corners_near`)."""
    m = combos.shape[0]
    corners = None
    if ctx.corner_names:
        corners = corners_near(sol.linear, hint)
    q = (
        np.column_stack([_quantity(ctx, sol, corners, n) for n in ctx.quantities])
        if ctx.quantities
        else np.zeros((m, 0))
    )
    fa = np.all(sol.region == 0, axis=1)
    if ctx.min_vce is None:
        head = np.ones(m, dtype=bool)
    else:
        head = np.all(ctx.circuit.polarity * sol.vce >= ctx.min_vce, axis=1)
    with np.errstate(invalid="ignore"):
        ratio = sol.resistor_power * share / ctx.ratings
    margin, worst, in_spec, robust = spec_scores(
        ctx, singles, combos, q[:, : ctx.n_spec], ctx.circuit.polarity * sol.vce
    )
    conv = sol.converged.copy()
    return Scores(
        combos=combos,
        q=q,
        vce=sol.vce,
        converged=conv,
        forward_active=fa & conv,
        headroom_ok=head & conv,
        power_ratio=ratio,
        margin=np.where(conv, margin, -np.inf),
        worst_case_margin=np.where(conv, worst, -np.inf),
        in_spec=in_spec & conv,
        headroom_robust=robust & conv,
        v=sol.state.v if keep_v else None,
        corners=corners if keep_v else None,
    )


def _quantity(ctx: Context, sol: BatchSolution, corners: Corners | None,
              name: str) -> np.ndarray:
    if name in CORNERS:
        return corner_values(corners, (name,))[0]
    return sol.quantity(name)


def first_order_state(
    ctx: Context, v_start: np.ndarray, dx: np.ndarray, dln_r: np.ndarray
) -> DCState:
    """A Newton seed: ``v_start`` (M, n + 1) moved by the built board's sensitivities for
    parameter steps ``dx`` (M, P; resistor parameters ignored) and ``dln_r`` (M, nR;
    capacitors do not move the DC state)."""
    v = v_start + dx @ ctx.v_sens + dln_r @ ctx.v_sens_col[: dln_r.shape[1]]
    m = v.shape[0]
    return DCState(v, _junctions(ctx.circuit, v), np.ones(m, bool), np.zeros(m, np.int64))


def _junctions(circuit: Circuit, v: np.ndarray) -> np.ndarray:
    """npn-frame (vbe, vbc) per transistor (M, nT, 2) from node voltages."""
    q = circuit.transistor_nodes
    pol = circuit.polarity
    vj = np.empty((v.shape[0], q.shape[0], 2))
    vj[:, :, 0] = pol * (v[:, q[:, 1]] - v[:, q[:, 2]])
    vj[:, :, 1] = pol * (v[:, q[:, 1]] - v[:, q[:, 0]])
    return vj


def merit(scores: Scores, merit_band: float) -> tuple[np.ndarray, np.ndarray]:
    """(tier, level) of each candidate, lower is better in both.

    Tier 0: meets spec with a non-negative worst-case margin and |VCE| at least
    ``min_vce`` ``k_sigma`` standard deviations down; 1: meets spec at the
    predicted board only; 2: misses. Level: minus the worst-case margin counted in whole
    steps of ``merit_band`` (margins closer than a step are equal merit).
    """
    meets = scores.meets
    worst = scores.worst_case_margin
    tier = np.where(meets & (worst >= 0.0) & scores.headroom_robust, 0, np.where(meets, 1, 2))
    finite = np.where(np.isfinite(worst), worst, -1e9)
    return tier, -np.floor(finite / merit_band)


def rank_order(scores: Scores, costs: np.ndarray, merit_band: float,
               change: np.ndarray | None = None) -> np.ndarray:
    """Indices of ``scores`` best first.

    By tier (:func:`merit`); within a meeting tier fewer changed parts, then the merit
    level, then the lower rework cost, then the exact worst-case margin, then the smaller
    ``change`` (:func:`combo_change`; ties of the margin come from one-sided limits).
    Among options that miss, the merit level comes before the number of parts.
    """
    tier, level = merit(scores, merit_band)
    worst = np.where(np.isfinite(scores.worst_case_margin), scores.worst_case_margin, -1e9)
    n = scores.n_changes
    failing = tier == 2
    first = np.where(failing, level, n)
    second = np.where(failing, n, level)
    if change is None:
        return np.lexsort((-worst, costs, second, first, tier))
    return np.lexsort((change, -worst, costs, second, first, tier))


def combo_change(ctx: Context, singles: Singles, combos: np.ndarray) -> np.ndarray:
    """How far each candidate moves its parts: Σ |ln(value after / value built)|."""
    built = np.concatenate([ctx.built_ohms, ctx.built_farads])
    total = np.zeros(combos.shape[0])
    for s in range(combos.shape[1]):
        idx = combos[:, s]
        valid = idx >= 0
        safe = np.where(valid, idx, 0)
        step = np.abs(np.log(singles.combined_value[safe] / built[singles.column[safe]]))
        total += np.where(valid, step, 0.0)
    return total


def combo_costs(
    singles: Singles, combos: np.ndarray, cost_replace: float, cost_parallel: float
) -> np.ndarray:
    """Rework cost of each candidate: the sum of its changes' costs."""
    total = np.zeros(combos.shape[0])
    for s in range(combos.shape[1]):
        idx = combos[:, s]
        valid = idx >= 0
        act = singles.action[np.where(valid, idx, 0)]
        total += np.where(valid, np.where(act == PARALLEL, cost_parallel, cost_replace), 0.0)
    return total
