"""Frequency response of a board: a sweep, its mid-band gain, its −3 dB corners and
what sets the low corner.

* :func:`find_corners` works on every sample of a :class:`LinearModel` at once. The
  mid-band gain is the largest |gain| over frequency: a log-spaced search grid from
  :data:`SEARCH_FROM_HZ` to :data:`SEARCH_TO_HZ` finds the grid point nearest the
  peak, then four rounds of ever finer grids around the best point refine it (to about
  1e-7 in log10 f; the gain is flat at its peak, so the peak value is exact to rounding). Each corner is then the root
  of |gain(f)| − mid/√2 on either side of the peak, bracketed by the grid points around
  the crossing nearest the peak and solved in log f by the Illinois variant of regula
  falsi (bracketing, superlinear), every iteration one batched engine call for all
  samples. The corners are therefore roots of the model's own response to
  :data:`ROOT_TOL_LOG` in log10 f, not points read off any grid. A corner with no
  crossing inside the search range does not exist within the model (NaN; ``null`` in
  JSON): a DC-coupled board has no low corner, and a board with no capacitance on its
  signal path (no ``ft``/``c_mu``, no probe capacitance) no high corner.
* :func:`corners_near` is the same search for boards close to known ones (trim's
  candidates and yield draws: part values changed from a board whose corners are
  known), in windows around the known peak and corners.
* :func:`low_corner_shares` tells each capacitor's part in the low corner two ways:
  the short-circuit time-constant hand estimate (each capacitor alone, with the others
  shorted, contributes 1/(2π·R·C) and the estimate is their sum), and the exact share
  from the solve, the elasticity −∂ln f_L/∂ln C of the root-found corner (worked out by
  a relative step of :data:`SHARE_STEP` in every capacitor, all in one batched call).
  Scaling every board capacitor by λ scales the low corner by 1/λ when the device
  capacitances do not reach down to it, so the exact shares sum to 1.
* :func:`sweep` is ``solve --sweep``: the response at log-spaced frequencies plus the
  above (docs/formats.md §6.4).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from reconcile.engine.small_signal import LinearModel
from reconcile.errors import InputError
from reconcile.model.values import parse_value

SEARCH_FROM_HZ = 1e-3
SEARCH_TO_HZ = 1e12
SEARCH_PER_DECADE = 8
ROOT_TOL_LOG = 1e-12
"""Corner tolerance in log10 f (a relative error in f of about 2.3e-12)."""
ZOOM_POINTS = 33
ZOOM_STEPS = 4
SHARE_STEP = 1e-4
DEFAULT_POINTS = 61
MAX_POINTS = 100_000
NEAR_SPAN = 1.0
"""Decades either side of a hinted peak that :func:`corners_near` searches."""
NEAR_STEP = 0.1
"""Decades either side of a hinted peak where :func:`corners_near` first looks."""
NEAR_POINTS = 9
FLAT_REL = 1e-12
"""Gains this close (relative) are level: a flat mid-band's peak value is any of them."""
NEAR_ROUNDS = 3
NEAR_BRACKET = 0.02
"""Decades past a hinted corner where :func:`corners_near` starts its bracket (widened
four-fold up to :data:`NEAR_WIDENINGS` times)."""
NEAR_WIDENINGS = 5
INV_SQRT2 = 1.0 / math.sqrt(2.0)


# ------------------------------------------------------------------ the range
@dataclass(frozen=True)
class SweepRange:
    """``FROM:TO[:POINTS]``: log-spaced frequencies from ``start_hz`` to ``stop_hz``."""

    start_hz: float
    stop_hz: float
    points: int = DEFAULT_POINTS

    @classmethod
    def from_text(cls, text: str, *, key: str = "--sweep") -> SweepRange:
        parts = [p.strip() for p in str(text).split(":")]
        form = "write FROM:TO[:POINTS], e.g. 10:1M or 10:1M:200"
        if len(parts) not in (2, 3) or not all(parts):
            raise InputError(f"{text!r} is not a frequency range: {form}", key=key)
        try:
            start, stop = (parse_value(p, "hertz") for p in parts[:2])
        except InputError as err:
            raise InputError(f"{text!r}: {err.message}; {form}", key=key) from err
        points = DEFAULT_POINTS
        if len(parts) == 3:
            if not parts[2].isdigit():
                raise InputError(f"{text!r}: POINTS must be a whole number, found "
                                 f"{parts[2]!r}", key=key)
            points = int(parts[2])
        if not (0.0 < start < stop < math.inf):
            raise InputError(f"{text!r}: give 0 < FROM < TO, both finite", key=key)
        if not 2 <= points <= MAX_POINTS:
            raise InputError(f"{text!r}: POINTS must be from 2 to {MAX_POINTS}", key=key)
        return cls(start, stop, points)

    def frequencies(self) -> np.ndarray:
        return np.logspace(math.log10(self.start_hz), math.log10(self.stop_hz), self.points)


# ------------------------------------------------------------------ corners
@dataclass(frozen=True)
class Corners:
    """Per sample (N,): mid-band gain and where it peaks, the −3 dB corners (Hz; NaN
    where the model has none)."""

    midband_gain: np.ndarray
    midband_frequency: np.ndarray
    low_corner: np.ndarray
    high_corner: np.ndarray


def _gain_at(linear: LinearModel, log_f: np.ndarray) -> np.ndarray:
    """|gain| of sample i at 10**log_f[i], (N,)."""
    return linear.response(10.0 ** log_f[:, None]).gain[:, 0]


def _refine_peak(linear: LinearModel, lo: np.ndarray, hi: np.ndarray) -> tuple:
    """Largest |gain| in [lo, hi] (log10 f) per sample: :data:`ZOOM_STEPS` rounds of a
    fine grid of :data:`ZOOM_POINTS` points around the best point so far, each round
    one batched call (the interval shrinks by ZOOM_POINTS/2 per round)."""
    n = len(lo)
    a, b = lo.copy(), hi.copy()
    t = np.linspace(0.0, 1.0, ZOOM_POINTS)
    for _ in range(ZOOM_STEPS):
        x = a[:, None] + (b - a)[:, None] * t[None, :]  # (N, Z)
        g = linear.response(10.0 ** x).gain
        j = np.nanargmax(np.where(np.isfinite(g), g, -np.inf), axis=1)
        best_x, best_g = x[np.arange(n), j], g[np.arange(n), j]
        h = (b - a) / (ZOOM_POINTS - 1)
        a, b = best_x - h, best_x + h
    return best_x, best_g


def _illinois(linear: LinearModel, lo, hi, f_lo, f_hi, target) -> np.ndarray:
    """Roots of |gain| − target in [lo, hi] (log10 f), per sample; f_lo, f_hi are the
    function's values at the ends (opposite signs). Each iteration solves only the
    samples whose bracket is still wider than :data:`ROOT_TOL_LOG`."""
    a, b, fa, fb = lo.copy(), hi.copy(), f_lo.copy(), f_hi.copy()
    side = np.zeros(len(a), dtype=np.int8)
    x = 0.5 * (a + b)
    active = np.arange(len(a))
    for _ in range(100):
        if active.size == 0:
            break
        i = active
        with np.errstate(divide="ignore", invalid="ignore"):
            xi = (a[i] * fb[i] - b[i] * fa[i]) / (fb[i] - fa[i])
        xi = np.where(np.isfinite(xi), xi, 0.5 * (a[i] + b[i]))
        fx = _gain_at(linear.take(i), xi) - target[i]
        same_a = np.sign(fx) == np.sign(fa[i])
        # replace the end whose sign fx shares; halve the other end's value when the
        # same end is kept twice running (Illinois)
        a[i], fa[i], b[i], fb[i] = (np.where(same_a, xi, a[i]), np.where(same_a, fx, fa[i]),
                                    np.where(same_a, b[i], xi), np.where(same_a, fb[i], fx))
        keep_b = same_a & (side[i] == 1)
        keep_a = ~same_a & (side[i] == -1)
        fb[i] = np.where(keep_b, 0.5 * fb[i], fb[i])
        fa[i] = np.where(keep_a, 0.5 * fa[i], fa[i])
        side[i] = np.where(same_a, 1, -1).astype(np.int8)
        x[i] = xi
        done = (np.abs(b[i] - a[i]) < ROOT_TOL_LOG) | (fx == 0.0)
        active = i[~done]
    return x


def find_corners(linear: LinearModel) -> Corners:
    """Mid-band gain and the −3 dB corners of every sample (see the module text)."""
    n = linear.params.n_samples
    grid = np.arange(math.log10(SEARCH_FROM_HZ),
                     math.log10(SEARCH_TO_HZ) + 0.5 / SEARCH_PER_DECADE,
                     1.0 / SEARCH_PER_DECADE)
    g = linear.response(10.0 ** grid).gain  # (N, K)
    k = len(grid)
    p = np.nanargmax(np.where(np.isfinite(g), g, -np.inf), axis=1)
    lo = grid[np.maximum(p - 1, 0)]
    hi = grid[np.minimum(p + 1, k - 1)]
    x_peak, g_peak = _refine_peak(linear, lo, hi)
    grid_peak = g[np.arange(n), p]
    better_grid = grid_peak > g_peak
    x_peak = np.where(better_grid, grid[p], x_peak)
    g_peak = np.where(better_grid, grid_peak, g_peak)
    target = g_peak * INV_SQRT2
    below = g < target[:, None]
    idx = np.arange(k)[None, :]
    low_j = np.where(below & (idx < p[:, None]), idx, -1).max(axis=1)
    high_j = np.where(below & (idx > p[:, None]), idx, k).min(axis=1)
    low = np.full(n, np.nan)
    high = np.full(n, np.nan)
    rows, a, b, fa = [], [], [], []
    for j, has, step in ((low_j, low_j >= 0, 1), (high_j, high_j < k, -1)):
        r = np.flatnonzero(has & np.isfinite(g_peak))
        rows.append(r)
        a.append(grid[j[r]])  # below the target
        b.append(np.where(j[r] + step == p[r], x_peak[r], grid[np.clip(j[r] + step, 0, k - 1)]))
        fa.append(g[r, j[r]] - target[r])
    every = np.concatenate(rows)
    if len(every):
        sub = linear.take(every)
        a_all, b_all = np.concatenate(a), np.concatenate(b)
        fb = _gain_at(sub, b_all) - target[every]
        roots = 10.0 ** _illinois(sub, a_all, b_all, np.concatenate(fa), fb, target[every])
        low[rows[0]] = roots[: len(rows[0])]
        high[rows[1]] = roots[len(rows[0]):]
    return Corners(midband_gain=g_peak, midband_frequency=10.0 ** x_peak,
                   low_corner=low, high_corner=high)


def _vertex(x: np.ndarray, g3: np.ndarray, h: float) -> np.ndarray:
    """The vertex in log10 f of the parabola through (x − h, x, x + h), kept within ±h
    (``x`` itself where the three points do not bend down)."""
    g_m, g_0, g_p = g3[:, 0], g3[:, 1], g3[:, 2]
    bend = g_m - 2.0 * g_0 + g_p
    with np.errstate(divide="ignore", invalid="ignore"):
        step = 0.5 * h * (g_m - g_p) / bend
    return x + np.where((bend < 0) & np.isfinite(step), np.clip(step, -h, h), 0.0)


def _parabola_rounds(linear, best_x, best_g, h: float, rounds: int) -> tuple:
    """``rounds`` parabola steps around the best point so far, each 16 times finer."""
    for _ in range(rounds):
        x3 = best_x[:, None] + h * np.array([-1.0, 0.0, 1.0])[None, :]
        xv = _vertex(best_x, linear.response(10.0 ** x3).gain, h)
        gv = _gain_at(linear, xv)
        better = np.isfinite(gv) & (gv > best_g)
        best_x, best_g = np.where(better, xv, best_x), np.where(better, gv, best_g)
        h /= 16.0
    return best_x, best_g


def _peak_near(linear: LinearModel, x_hint: np.ndarray) -> tuple:
    """Largest |gain| near ``x_hint`` (log10 f). Where the gain at the hint is above its
    neighbours :data:`NEAR_STEP` decades either side, the peak lies between them: two
    parabola steps from there (:func:`_parabola_rounds`). Elsewhere a grid of
    :data:`NEAR_POINTS` within :data:`NEAR_SPAN` decades, then :data:`NEAR_ROUNDS`
    parabola steps. Also returns where the gain still rises at the grid's edge (the peak
    may lie outside the window)."""
    n = len(x_hint)
    h = NEAR_STEP
    x3 = x_hint[:, None] + h * np.array([-1.0, 0.0, 1.0])[None, :]
    g3 = linear.response(10.0 ** x3).gain
    # the hint at least as high as both neighbours, to rounding (a flat mid-band)
    local = (g3[:, 1] >= np.maximum(g3[:, 0], g3[:, 2]) * (1.0 - FLAT_REL)) & np.all(
        np.isfinite(g3), axis=1)
    best_x, best_g, edge = x_hint.copy(), g3[:, 1].copy(), np.zeros(n, dtype=bool)
    if np.any(local):
        i = np.flatnonzero(local)
        sub = linear.take(i)
        xv = _vertex(x_hint[i], g3[i], h)
        gv = _gain_at(sub, xv)
        up = np.isfinite(gv) & (gv > best_g[i])
        start_x, start_g = np.where(up, xv, x_hint[i]), np.where(up, gv, best_g[i])
        best_x[i], best_g[i] = _parabola_rounds(sub, start_x, start_g, h / 16.0, 1)
    if not np.all(local):
        i = np.flatnonzero(~local)
        best_x[i], best_g[i], edge[i] = _peak_on_grid(linear.take(i), x_hint[i])
    return best_x, best_g, edge


def _peak_on_grid(linear: LinearModel, x_hint: np.ndarray) -> tuple:
    """:func:`_peak_near` where the peak is not between the hint's neighbours."""
    n = len(x_hint)
    t = np.linspace(-NEAR_SPAN, NEAR_SPAN, NEAR_POINTS)
    x = x_hint[:, None] + t[None, :]
    g = linear.response(10.0 ** x).gain
    g = np.where(np.isfinite(g), g, -np.inf)
    j = np.argmax(g, axis=1)
    best_x, best_g = x[np.arange(n), j], g[np.arange(n), j]
    inner = np.max(g[:, 1:-1], axis=1)
    # still rising at the window's edge (not merely flat across it)
    edge = ((j == 0) | (j == NEAR_POINTS - 1)) & ~(best_g <= inner * (1.0 + 1e-9))
    best_x, best_g = _parabola_rounds(linear, best_x, best_g, float(t[1] - t[0]), NEAR_ROUNDS)
    return best_x, best_g, edge


def _root_near(linear, x_hint, x_peak, target, side: int) -> np.ndarray:
    """The −3 dB crossing on one side of the peak (side −1: below it, +1: above it),
    bracketed between a point past ``x_hint`` (widened up to :data:`NEAR_WIDENINGS`
    times) and one :data:`NEAR_BRACKET` decades from it towards the peak where the gain
    there is above the target, else the peak; NaN where no bracket was found."""
    w = NEAR_BRACKET
    far = x_hint + side * w
    f_far = _gain_at(linear, far) - target
    for _ in range(NEAR_WIDENINGS):
        i = np.flatnonzero(~(f_far < 0.0))
        if i.size == 0:
            break
        w *= 4.0
        far[i] = x_hint[i] + side * w
        f_far[i] = _gain_at(linear.take(i), far[i]) - target[i]
    out = np.full(len(x_hint), np.nan)
    ok = f_far < 0.0
    if np.any(ok):
        sub = linear.take(np.flatnonzero(ok))
        peak = x_peak[ok]
        step = x_hint[ok] - side * NEAR_BRACKET
        near = np.minimum(step, peak) if side < 0 else np.maximum(step, peak)
        f_near = _gain_at(sub, near) - target[ok]
        above = f_near > 0.0
        near = np.where(above, near, peak)
        f_near = np.where(above, f_near, target[ok] * (math.sqrt(2.0) - 1.0))  # at the peak
        out[ok] = _illinois(sub, far[ok], near, f_far[ok], f_near, target[ok])
    return out


def corners_near(linear: LinearModel, hint: Corners) -> Corners:
    """:func:`find_corners` for boards close to known ones (``hint``, one row per sample:
    e.g. a board before a small change of part values), at a fraction of its cost.

    The peak is searched within :data:`NEAR_SPAN` decades of the hinted peak, each corner
    root-found (the same Illinois iteration, to :data:`ROOT_TOL_LOG`) in a bracket from
    the peak to just past the hinted corner. A corner the hint lacks (NaN) is taken to be
    missing here too: a change of values does not change which capacitors exist, so it
    keeps a DC-coupled board DC-coupled and a board without capacitance on its signal
    path without a high corner. Samples whose peak or corner falls outside these windows
    are solved by :func:`find_corners` in full.
    """
    n = linear.params.n_samples
    x_peak, g_peak, edge = _peak_near(linear, np.log10(hint.midband_frequency))
    target = g_peak * INV_SQRT2
    corners = [np.full(n, np.nan), np.full(n, np.nan)]
    redo = edge | ~np.isfinite(g_peak)
    for k, (hz, side) in enumerate(((hint.low_corner, -1), (hint.high_corner, 1))):
        has = np.isfinite(hz) & ~redo
        if np.any(has):
            idx = np.flatnonzero(has)
            root = _root_near(linear.take(idx), np.log10(hz[idx]), x_peak[idx],
                              target[idx], side)
            corners[k][idx] = 10.0 ** root
            redo[idx[~np.isfinite(root)]] = True
    out = Corners(g_peak, 10.0 ** x_peak, corners[0], corners[1])
    if np.any(redo):
        idx = np.flatnonzero(redo)
        full = find_corners(linear.take(idx))
        for name in ("midband_gain", "midband_frequency", "low_corner", "high_corner"):
            getattr(out, name)[idx] = getattr(full, name)
    return out


# ------------------------------------------------------------------ shares
@dataclass(frozen=True)
class CapacitorShare:
    """One capacitor's part in the low corner of one board."""

    ref: str
    farads: float
    resistance_seen: float  # ohms, the others shorted (short-circuit time constant)
    estimate_hz: float  # 1/(2π·R·C), its term in the hand estimate
    share: float  # exact: −∂ln f_L/∂ln C from the solve

    def to_dict(self) -> dict:
        return {"farads": self.farads, "resistance_seen": self.resistance_seen,
                "estimate_hz": self.estimate_hz, "share": self.share}


def with_stepped_capacitors(linear: LinearModel) -> LinearModel:
    """The first sample of ``linear`` followed by one copy per board capacitor with that
    capacitor larger by :data:`SHARE_STEP` (rows 0 … nC), for :func:`low_corner_shares`."""
    n_c = len(linear.circuit.capacitor_refs)
    stacked = linear.take(np.zeros(1 + n_c, dtype=np.intp))
    c_new = stacked.params.capacitor_farads.copy()
    c_new[1:] *= 1.0 + SHARE_STEP * np.eye(n_c)
    return LinearModel(stacked.circuit, stacked.params.with_values(capacitor_farads=c_new),
                       stacked.jac_ff, stacked.gm)


def low_corner_shares(stacked: LinearModel, corners: Corners) -> tuple[CapacitorShare, ...]:
    """Each capacitor's part in the low corner, from :func:`with_stepped_capacitors` and
    the corners of its rows."""
    refs = stacked.circuit.capacitor_refs
    low = corners.low_corner
    if not refs or not math.isfinite(low[0]):
        return ()
    one = stacked.take(slice(0, 1))
    farads = one.params.capacitor_farads[0]
    with np.errstate(invalid="ignore"):
        shares = -(np.log(low[1:]) - math.log(low[0])) / math.log1p(SHARE_STEP)
    out = []
    for k, ref in enumerate(refs):
        r_seen = float(one.resistance_seen(k)[0])
        # a missing capacitor (0 F, a board as built under a fault) sets no corner
        est = (1.0 / (2.0 * math.pi * r_seen * float(farads[k]))
               if r_seen > 0 and farads[k] > 0 else math.inf)
        out.append(CapacitorShare(ref, float(farads[k]), r_seen, float(est), float(shares[k])))
    return tuple(out)


# ------------------------------------------------------------------ the sweep
@dataclass(frozen=True)
class BoardSweep:
    """``solve --sweep``: the response per frequency and the corners of one board."""

    frequency: np.ndarray
    gain: np.ndarray
    gain_phase_deg: np.ndarray
    source_gain: np.ndarray
    input_resistance: np.ndarray
    output_resistance: np.ndarray
    midband_gain: float
    midband_frequency: float
    low_corner: float
    high_corner: float
    shares: tuple[CapacitorShare, ...]

    def __repr__(self) -> str:
        from reconcile.present.show import brief

        return brief(self)

    def report(self, console=None) -> None:
        """Print what ``reconcile solve --sweep`` prints of the sweep."""
        from reconcile.present.show import show

        show(self, console)

    @property
    def low_corner_estimate(self) -> float:
        """The short-circuit time-constant estimate of the low corner, Hz (NaN without one)."""
        if not self.shares:
            return math.nan
        return float(sum(s.estimate_hz for s in self.shares))

    def to_dict(self) -> dict:
        def num(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None

        points = [
            {"frequency": float(self.frequency[i]), "gain": num(self.gain[i]),
             "gain_phase_deg": num(self.gain_phase_deg[i]),
             "source_gain": num(self.source_gain[i]),
             "input_resistance": num(self.input_resistance[i]),
             "output_resistance": num(self.output_resistance[i])}
            for i in range(len(self.frequency))
        ]
        return {
            "points": points,
            "midband_gain": num(self.midband_gain),
            "midband_frequency": num(self.midband_frequency),
            "low_corner": num(self.low_corner),
            "high_corner": num(self.high_corner),
            "low_corner_estimate": num(self.low_corner_estimate),
            "low_corner_shares": {s.ref: s.to_dict() for s in self.shares},
        }


def sweep(linear: LinearModel, frequencies: np.ndarray) -> BoardSweep:
    """The sweep of the first sample of ``linear`` at ``frequencies`` (Hz)."""
    stacked = with_stepped_capacitors(linear)
    r = stacked.take(slice(0, 1)).response(np.asarray(frequencies, dtype=float))
    c = find_corners(stacked)
    low = float(c.low_corner[0])
    return BoardSweep(
        frequency=np.asarray(frequencies, dtype=float).copy(),
        gain=r.gain[0], gain_phase_deg=r.gain_phase_deg[0], source_gain=r.source_gain[0],
        input_resistance=r.input_resistance[0], output_resistance=r.output_resistance[0],
        midband_gain=float(c.midband_gain[0]), midband_frequency=float(c.midband_frequency[0]),
        low_corner=low, high_corner=float(c.high_corner[0]),
        shares=low_corner_shares(stacked, c),
    )
