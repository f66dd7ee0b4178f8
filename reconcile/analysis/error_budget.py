"""Split a spec miss into design, parts, devices and bench set-up.

For each spec quantity q (gain, input_resistance, ...), with T its target:

    q(fitted) − T  =  [q(nominal) − T]            design: the drawn board under the exact model
                   +  share(parts)                 resistors and capacitors as built
                   +  share(devices)               the transistors' IS, beta, VA, n
                   +  share(bench)                 supplies and junction temperature as on the bench

The three shares split q(fitted) − q(nominal) by Shapley attribution: each group's share
is its marginal effect (substituting its fitted values for the nominal ones) averaged
over the 3! = 6 orders in which the groups can be substituted. The shares therefore add
up exactly, and no group gains or loses from being substituted first. All 2³ = 8
partial boards are solved in one engine call.

Each share's standard uncertainty comes from Monte Carlo over the linearised posterior
(JCGM 101:2008 style): the same 8-board attribution for draws of the fitted parameters,
all in one further engine call.

The signal set-up (source and load resistance) and the meter are the same for the spec
and the bench in a board file, so they do not appear as a share; readings are already
predicted with the meter attached, so meter loading cannot bias the fitted board.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from reconcile.engine import compile_board, solve_batch
from reconcile.inference.fitting import FitResult
from reconcile.inference.priors import ParameterSpace

GROUPS = ("parts", "devices", "bench")
_GROUP_OF = {
    "resistor": "parts",
    "capacitor": "parts",
    "IS": "devices",
    "beta": "devices",
    "VA": "devices",
    "n": "devices",
    "supply": "bench",
    "temperature": "bench",
}
MC_DRAWS = 400


@dataclass(frozen=True)
class QuantityBudget:
    quantity: str
    target: float
    nominal: float
    fitted: float
    design: float
    shares: dict[str, float]
    share_stderr: dict[str, float]

    @property
    def total(self) -> float:
        return self.fitted - self.target

    def to_dict(self) -> dict:
        return {
            "target": self.target,
            "nominal": self.nominal,
            "fitted": self.fitted,
            "total": self.total,
            "design": self.design,
            **{g: self.shares[g] for g in GROUPS},
            "stderr": dict(self.share_stderr),
            "method": "Shapley over substitution orders (parts, devices, bench)",
        }


@dataclass(frozen=True)
class ErrorBudget:
    quantities: dict[str, QuantityBudget]

    def to_dict(self) -> dict:
        return {k: v.to_dict() for k, v in self.quantities.items()}


def _shapley_weights(n: int) -> dict[tuple[int, ...], float]:
    return {
        s: math.factorial(len(s)) * math.factorial(n - len(s) - 1) / math.factorial(n)
        for r in range(n)
        for s in itertools.combinations(range(n), r)
    }


def error_budget(fit: FitResult, *, rng: np.random.Generator | None = None) -> ErrorBudget | None:
    """The error budget of a fit, or None when the board has no spec targets or no
    [signal] set-up."""
    board = fit.board
    targets = {k: t for k, t in board.spec.targets.items()}
    if not targets or not (board.signal.input and board.signal.output):
        return None
    circuit = compile_board(board)
    space = ParameterSpace(circuit, fit.space.parameters)
    # an instrument's calibration factor (inference/calibration.py) is in no group: it
    # is not the board's, so it takes no share
    groups = np.array(
        [GROUPS.index(_GROUP_OF[p.kind]) if p.kind in _GROUP_OF else -1 for p in space.parameters]
    )
    subsets = list(itertools.product((0, 1), repeat=len(GROUPS)))  # 8 masks
    rng = rng or np.random.default_rng(0)
    draws = rng.multivariate_normal(fit.x, fit.covariance, size=MC_DRAWS, method="eigh")
    draws = np.clip(draws, space.lower, space.upper)
    centres = np.vstack([fit.x[None, :], draws])  # (1 + D, P)
    nominal = np.array([p.to_internal(p.nominal) for p in space.parameters])
    # (8, P): which parameters each partial board takes from the fit
    use = (groups[None, :] >= 0) & np.array(subsets, dtype=bool)[:, np.maximum(groups, 0)]
    xs = np.where(use[None, :, :], centres[:, None, :], nominal).reshape(-1, space.size)
    sol = solve_batch(circuit, space.to_parameters(xs))
    weights = _shapley_weights(len(GROUPS))
    index_of = {mask: i for i, mask in enumerate(subsets)}
    out = {}
    for name, target in targets.items():
        values = sol.quantity(name).reshape(len(centres), len(subsets))
        shares = np.zeros((len(centres), len(GROUPS)))
        for g in range(len(GROUPS)):
            for s, w in weights.items():
                if g in s:
                    continue
                without = tuple(1 if k in s else 0 for k in range(len(GROUPS)))
                with_g = tuple(1 if (k in s or k == g) else 0 for k in range(len(GROUPS)))
                shares[:, g] += w * (values[:, index_of[with_g]] - values[:, index_of[without]])
        nominal_q = float(values[0, index_of[(0, 0, 0)]])
        fitted_q = float(values[0, index_of[(1, 1, 1)]])
        sd = np.nanstd(shares[1:], axis=0, ddof=1)
        out[name] = QuantityBudget(
            quantity=name,
            target=target.value,
            nominal=nominal_q,
            fitted=fitted_q,
            design=nominal_q - target.value,
            shares={GROUPS[g]: float(shares[0, g]) for g in range(len(GROUPS))},
            share_stderr={GROUPS[g]: float(sd[g]) for g in range(len(GROUPS))},
        )
    return ErrorBudget(out)
