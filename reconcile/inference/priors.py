"""The free parameters of a built board and what is known of them before any reading.

Each parameter is fitted in an internal coordinate in which its prior is Gaussian:

================  ===========  ==========================================  ==================
parameter         internal     prior (mean, one standard deviation)         hard bounds
================  ===========  ==========================================  ==================
resistor          ln R         ln(nominal), tolerance/√3                    nominal ÷/× 1000
capacitor         ln C         ln(nominal), tolerance/√3                    nominal ÷/× 1000
supply            V            nominal, max(tolerance/√3, 0.1 %)·|V|        ±50 % of nominal
Q.IS              log10 IS     log10(value), range as ±2σ (else 0.5)        range ÷/× 100
Q.beta            ln beta      ln(value), range as ±2σ (else 0.3)           1 … 10⁵
Q.VA (range)      ln VA        ln(value), range as ±2σ                      range ÷/× 10
Q.n (range)       n            value, range as ±2σ                          0.5 … 3
temperature       T (K)        ambient reading or board temperature, 3 K    −60 … +200 C
calibration       ln f         0, the instrument's systematic part          f in 0.5 … 2
================  ===========  ==========================================  ==================

Why these choices:

* A tolerance is a limit the maker guarantees with no distribution stated; JCGM 100:2008
  (GUM) 4.3.7 takes such a limit as a rectangular distribution, whose standard deviation
  is tolerance/√3. The fit uses a Gaussian of that width (in log space, so values stay
  positive and a percentage tolerance is symmetric).
* The hard bounds sit three decades away from the nominal for resistors and
  capacitors: a grossly wrong part (22k loaded for 2k2) stays visible as a value far
  outside its tolerance with a large prior pull, rather than being clipped at the
  tolerance edge where nothing would look wrong. Diagnosis reads those pulls.
* A device range ``{value, low, high}`` is read as a 95 % interval: σ is the larger of
  the two log distances from the value to the range ends, halved.
* A bench supply set to its nominal has a setting error of its own, hence the 0.1 %
  floor (common practice for a bench supply's set-point accuracy).
* A calibration factor belongs to an instrument's range, not to the board: see
  :mod:`reconcile.inference.calibration`.
* The junction temperature sits a little above ambient (self-heating of a few mW);
  3 K covers that and the ambient reading's own uncertainty (an assumed figure).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from reconcile.model.board import Board
from reconcile.model.kinds import ParameterKind, Transform
from reconcile.engine.circuit import Circuit, Parameters, nominal_parameters

DEFAULT_LOG10_IS_SD = 0.5
DEFAULT_LN_BETA_SD = 0.3
TEMPERATURE_SD_K = 3.0
SUPPLY_FLOOR = 0.001
PART_BOUND_FACTOR = 1000.0


@dataclass(frozen=True)
class FreeParameter:
    """One fitted parameter. ``key`` is the contract's name (``R1``, ``Q1.IS``, ...)."""

    key: str
    kind: ParameterKind
    ref: str  # part or transistor ref ('' for temperature)
    column: int  # column in the matching Parameters array
    transform: Transform
    prior_mean: float  # internal
    prior_sd: float  # internal
    lower: float  # internal
    upper: float  # internal
    nominal: float  # external
    unit: str
    tolerance_low: float | None = None  # external band a part may have
    tolerance_high: float | None = None

    def to_external(self, x: np.ndarray | float) -> np.ndarray:
        if self.transform == "log":
            return np.exp(x)
        if self.transform == "log10":
            return 10.0 ** np.asarray(x)
        return np.asarray(x, dtype=float)

    def to_external_into(self, x: np.ndarray, out: np.ndarray) -> np.ndarray:
        """:meth:`to_external` of an array, written into ``out`` (the same operations)."""
        if self.transform == "log":
            return np.exp(x, out=out)
        if self.transform == "log10":
            return np.power(10.0, x, out=out)
        out[...] = x
        return out

    def to_internal(self, value: float) -> float:
        if self.transform == "log":
            return math.log(value)
        if self.transform == "log10":
            return math.log10(value)
        return float(value)

    def external_slope(self, x: np.ndarray | float) -> np.ndarray:
        """d(external)/d(internal) at x (a number or an array of points)."""
        if self.transform == "log":
            return np.exp(x)
        if self.transform == "log10":
            return math.log(10.0) * 10.0 ** np.asarray(x, dtype=float)
        return 1.0 + 0.0 * np.asarray(x, dtype=float)


def _range_sd(value: float, low: float | None, high: float | None, fn) -> float | None:
    if low is None or high is None or not high > low:
        return None
    return max(fn(high) - fn(value), fn(value) - fn(low)) / 2.0


@dataclass(frozen=True)
class ParameterSpace:
    """Every free parameter of a board, in order, with the map to engine Parameters."""

    circuit: Circuit
    parameters: tuple[FreeParameter, ...]

    @property
    def keys(self) -> list[str]:
        return [p.key for p in self.parameters]

    @property
    def size(self) -> int:
        return len(self.parameters)

    @property
    def prior_mean(self) -> np.ndarray:
        return self._columns[0].copy()

    @property
    def prior_sd(self) -> np.ndarray:
        return self._columns[1].copy()

    @property
    def lower(self) -> np.ndarray:
        return self._columns[2].copy()

    @property
    def upper(self) -> np.ndarray:
        return self._columns[3].copy()

    @functools.cached_property
    def _columns(self) -> tuple[np.ndarray, ...]:
        """Prior mean, prior sd, lower and upper bound of every parameter (made once:
        the parameters are frozen; the properties above hand out copies)."""
        return tuple(np.array([getattr(p, name) for p in self.parameters])
                     for name in ("prior_mean", "prior_sd", "lower", "upper"))

    def index(self, key: str) -> int:
        return self.keys.index(key)

    def external(self, x: np.ndarray) -> np.ndarray:
        """Internal (M, P) → external values (M, P)."""
        x = np.atleast_2d(x)
        out = np.empty_like(x, dtype=float)
        for j, p in enumerate(self.parameters):
            out[:, j] = p.to_external(x[:, j])
        return out

    def to_parameters(self, x: np.ndarray, base: Parameters | None = None, *,
                      repeat: int = 1) -> Parameters:
        """Engine parameters for M internal vectors (M, P); other values from ``base``
        (one sample, default the board's nominal). With ``repeat``, each vector's
        parameters ``repeat`` times, consecutively (as ``Parameters.repeat`` of the
        result would give, without making the M rows first)."""
        x = np.atleast_2d(x)
        m = x.shape[0]
        if base is None:
            base = nominal_parameters(self.circuit, 1)
        # repeat makes new arrays, written below in place; a base of M samples is copied
        if base.n_samples == 1:
            p = base.repeat(m * repeat)
        else:
            p = base.repeat(repeat)
        out = np.empty(m)
        for j, fp in enumerate(self.parameters):
            if fp.kind == "calibration":
                continue  # an instrument's factor, not the board's (inference/calibration.py)
            fp.to_external_into(x[:, j], out)
            values = out if repeat == 1 or m == 1 else out.repeat(repeat)  # (1,) broadcasts
            if fp.kind == "temperature":
                p.temperature[:] = values
            else:
                getattr(p, PARAMETERS_FIELD[fp.kind])[:, fp.column] = values
        return p


PARAMETERS_FIELD = {
    "resistor": "resistor_ohms",
    "capacitor": "capacitor_farads",
    "supply": "supply_volts",
    "IS": "IS",
    "beta": "beta",
    "VA": "VA",
    "n": "n",
    "temperature": "temperature",
}
"""The :class:`Parameters` field each kind of free parameter sets."""


def _passive(
    ref: str, kind: str, column: int, nominal: float, tolerance: float, unit: str
) -> FreeParameter:
    """A resistor or capacitor: ln of its value, σ = tolerance/√3, bounds ÷/× 1000."""
    sd = max(tolerance, 1e-4) / math.sqrt(3.0)
    return FreeParameter(
        ref,
        kind,
        ref,
        column,
        "log",
        math.log(nominal),
        math.log1p(sd),
        math.log(nominal / PART_BOUND_FACTOR),
        math.log(nominal * PART_BOUND_FACTOR),
        nominal,
        unit,
        nominal * (1 - tolerance),
        nominal * (1 + tolerance),
    )


def build_space(
    circuit: Circuit,
    *,
    ambient_k: float | None = None,
    ambient_sd_k: float | None = None,
    fixed: tuple[str, ...] = (),
    calibration: tuple[FreeParameter, ...] = (),
) -> ParameterSpace:
    """The free parameters of ``circuit``'s board (see the module docstring).

    ``ambient_k`` (from a temperature reading) centres the junction-temperature prior;
    ``fixed`` lists keys to leave out (held at nominal); ``calibration`` holds the
    instruments' calibration factors, appended last
    (:func:`reconcile.inference.calibration.calibration_parameters`).
    """
    board: Board = circuit.board
    out: list[FreeParameter] = []

    def add(fp: FreeParameter) -> None:
        if fp.key not in fixed:
            out.append(fp)

    # a fixed part is not built at all: a board as built may hold a missing one at 0 F
    for col, ref in enumerate(circuit.resistor_refs):
        r = board.resistors[ref]
        if ref not in fixed:
            add(_passive(ref, "resistor", col, r.ohms, r.tolerance, "ohm"))
    for col, ref in enumerate(circuit.capacitor_refs):
        c = board.capacitors[ref]
        if ref not in fixed:
            add(_passive(ref, "capacitor", col, c.farads, c.tolerance, "F"))
    for col, ref in enumerate(circuit.supply_refs):
        add(_supply_parameter(ref, col, board.supplies[ref]))
    for col, ref in enumerate(circuit.transistor_refs):
        for fp in _transistor_parameters(ref, col, board.device_of(ref)):
            add(fp)
    if circuit.transistor_refs:
        add(_temperature_parameter(board, ambient_k, ambient_sd_k))
    for fp in calibration:
        add(fp)
    return ParameterSpace(circuit=circuit, parameters=tuple(out))


def _supply_parameter(ref: str, col: int, s) -> FreeParameter:
    """A supply's voltage: linear, sd from its tolerance (uniform) or the floor."""
    sd = max(s.tolerance / math.sqrt(3.0), SUPPLY_FLOOR) * abs(s.volts)
    half = 0.5 * abs(s.volts)
    return FreeParameter(
        ref,
        "supply",
        ref,
        col,
        "linear",
        s.volts,
        sd,
        s.volts - half,
        s.volts + half,
        s.volts,
        "V",
        s.volts - s.tolerance * abs(s.volts),
        s.volts + s.tolerance * abs(s.volts),
    )


def _transistor_parameters(ref: str, col: int, d) -> list[FreeParameter]:
    """A transistor's IS and beta, and VA and n where the board gives them a range.

    Positional fields of each :class:`FreeParameter`: key, kind, ref, column, transform,
    prior mean and sd and the hard bounds (internal coordinates), nominal, unit, and the
    band the board gives.
    """
    is_sd = _range_sd(d.IS.value, d.IS.low, d.IS.high, math.log10) or DEFAULT_LOG10_IS_SD
    lo = (d.IS.low or d.IS.value / 10) / 100
    hi = (d.IS.high or d.IS.value * 10) * 100
    out = [
        FreeParameter(f"{ref}.IS", "IS", ref, col, "log10", math.log10(d.IS.value), is_sd,
                      math.log10(lo), math.log10(hi), d.IS.value, "A", d.IS.low, d.IS.high),
    ]
    b_sd = _range_sd(d.beta.value, d.beta.low, d.beta.high, math.log) or DEFAULT_LN_BETA_SD
    out.append(
        FreeParameter(f"{ref}.beta", "beta", ref, col, "log", math.log(d.beta.value), b_sd,
                      0.0, math.log(1e5), d.beta.value, "", d.beta.low, d.beta.high)
    )
    if d.VA.has_range and math.isfinite(d.VA.value):
        va_sd = _range_sd(d.VA.value, d.VA.low, d.VA.high, math.log)
        out.append(
            FreeParameter(f"{ref}.VA", "VA", ref, col, "log", math.log(d.VA.value), va_sd,
                          math.log(d.VA.low / 10), math.log(d.VA.high * 10), d.VA.value, "V",
                          d.VA.low, d.VA.high)
        )
    if d.n.has_range:
        n_sd = _range_sd(d.n.value, d.n.low, d.n.high, float)
        out.append(
            FreeParameter(f"{ref}.n", "n", ref, col, "linear", d.n.value, n_sd, 0.5, 3.0,
                          d.n.value, "", d.n.low, d.n.high)
        )
    return out


def _temperature_parameter(
    board: Board, ambient_k: float | None, ambient_sd_k: float | None
) -> FreeParameter:
    """The junction temperature, centred on the ambient reading when there is one."""
    t0 = board.temperature if ambient_k is None else ambient_k
    t_sd = TEMPERATURE_SD_K if ambient_sd_k is None else math.hypot(TEMPERATURE_SD_K, ambient_sd_k)
    return FreeParameter(
        "temperature",
        "temperature",
        "",
        0,
        "linear",
        t0,
        t_sd,
        213.15,
        473.15,
        board.temperature,
        "K",
    )


def prior_draws(space: ParameterSpace, n: int, rng: np.random.Generator) -> np.ndarray:
    """(n, P) internal vectors drawn from the priors above, clipped to the hard bounds.

    The priors are independent Gaussians in the internal coordinates, so a draw is
    ``prior_mean + prior_sd * z``; the rows are drawn in order from ``rng``, so drawing
    in chunks gives the same boards as one draw of all of them.
    """
    z = rng.standard_normal((int(n), space.size))
    return np.clip(space.prior_mean + z * space.prior_sd, space.lower, space.upper)
