"""Repairing the faults of a hypothesis: the drawn design restored, and the posterior of
the repaired board that trim starts from.

Under a hypothesis (``--assume``, or a decisive diagnosis: :mod:`reconcile.pipeline.
policies`) the board is fitted as built (:func:`reconcile.diagnosis.faults.as_built`).
Its repair restores the drawn design: a missing or open part is fitted anew, a wrong or
shorted one replaced with the drawn value, a reversed transistor turned round. The
repaired board's posterior keeps what the fit learnt of every other part and device; a
part fitted anew is a fresh one, anywhere in its drawn tolerance (its prior), unrelated
to the rest. Trim's baseline on that posterior is the repair's predicted spec and
yield; its options are standard-value reworks of the repaired board.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from reconcile.diagnosis.assumed import Assumption
from reconcile.engine import compile_board
from reconcile.inference.fitting import FitResult
from reconcile.inference.priors import ParameterSpace, build_space
from reconcile.model.board import Board
from reconcile.model.values import format_si

__all__ = [
    "Posterior",
    "Repair",
    "apply_repair",
    "hypothesis_dict",
    "hypothesis_json",
    "repair_of",
    "repaired_posterior",
]


def hypothesis_dict(assumption: Assumption, source: str, probability: float | None) -> dict:
    """A hypothesis worked under, in full: ``{"hypothesis", "faults", "source",
    "probability"}`` (what the store keeps in ``analyses.assumed``)."""
    return {"hypothesis": assumption.label, "faults": assumption.to_list(), "source": source,
            "probability": probability}


def hypothesis_json(full: dict | None) -> dict:
    """The keys a result's JSON gives the hypothesis it worked under (docs/formats.md
    §6.4): ``assumed``, its faults (``[]``: the board as drawn), and ``hypothesis``,
    ``{"label", "source", "probability"}`` (None as drawn)."""
    if full is None:
        return {"assumed": [], "hypothesis": None}
    return {"assumed": full["faults"], "hypothesis": {
        "label": full["hypothesis"], "source": full["source"],
        "probability": full["probability"]}}


@dataclass(frozen=True)
class Posterior:
    """A board's linearised posterior (what :func:`reconcile.trim.rework.trim` starts
    from, as it does from a fit): parameters, MAP vector, covariance (internal)."""

    space: ParameterSpace
    x: np.ndarray
    covariance: np.ndarray


@dataclass(frozen=True)
class Repair:
    """The repair of a hypothesis: its faults and what to do on the bench for each.

    ``source`` is ``assumed`` (``--assume``) or ``diagnosis`` (a decisive leading
    hypothesis, its ``probability``).
    """

    assumption: Assumption
    source: str
    probability: float | None
    steps: tuple[dict, ...]

    @property
    def label(self) -> str:
        return self.assumption.label

    def hypothesis_dict(self) -> dict:
        return hypothesis_dict(self.assumption, self.source, self.probability)

    def to_dict(self) -> dict:
        return self.hypothesis_dict() | {"steps": [dict(s) for s in self.steps]}


def repair_of(assumption: Assumption, source: str, probability: float | None = None) -> Repair:
    """What restoring the drawn design means for each assumed fault (a part read out of
    circuit at its drawn value needs nothing)."""
    drawn = assumption.drawn
    known = dict(assumption.known)
    steps = []
    for f in assumption.faults:
        if f.kind == "reversed":
            q = drawn.transistors[f.ref]
            steps.append({"ref": f.ref, "action": "turn", "value": None, "text": (
                f"turn {f.ref} round: collector to {q.c}, emitter to {q.e}, as drawn")})
            continue
        part = drawn.resistors.get(f.ref) or drawn.capacitors[f.ref]
        value, unit = (part.ohms, "ohm") if f.ref in drawn.resistors else (part.farads, "F")
        if f.ref in known and abs(known[f.ref] / value - 1.0) <= part.tolerance:
            continue
        if f.kind in ("open", "missing"):
            action, verb = "fit", f"fit {f.ref} ({format_si(value, unit, 3)} as drawn)"
        else:
            action, verb = "replace", f"replace {f.ref} with the drawn {format_si(value, unit, 3)}"
        steps.append({"ref": f.ref, "action": action, "value": value, "text": verb})
    return Repair(assumption, source, probability, tuple(steps))


def repaired_posterior(repair: Repair, fit: FitResult) -> Posterior:
    """The drawn board's posterior after ``repair``, from the fit of the board as built
    under its hypothesis: every part the repair fits anew at its prior (independent of
    the rest), every other parameter as fitted."""
    drawn = repair.assumption.drawn
    fresh = {s["ref"] for s in repair.steps if s["action"] != "turn"}
    prior = {fp.key: fp for fp in build_space(compile_board(drawn)).parameters}
    params = list(fit.space.parameters)
    keys = [fp.key for fp in params]
    x = np.asarray(fit.x, float).copy()
    cov = np.asarray(fit.covariance, float).copy()
    for ref in sorted(fresh):
        fp = prior[ref]
        if ref in keys:
            j = keys.index(ref)
            params[j] = fp
        else:
            params.append(fp)
            keys.append(ref)
            x = np.append(x, 0.0)
            cov = np.pad(cov, ((0, 1), (0, 1)))
            j = len(keys) - 1
        x[j] = fp.prior_mean
        cov[j, :] = 0.0
        cov[:, j] = 0.0
        cov[j, j] = fp.prior_sd**2
    return Posterior(ParameterSpace(compile_board(drawn), tuple(params)), x, cov)


def apply_repair(board: Board, repair: Repair) -> Board:
    """``board`` (a board as really built, e.g. a simulation's hidden truth) after
    ``repair``: each part fitted anew or replaced at its drawn value (a good new part,
    no leak), each reversed transistor turned round as drawn."""
    drawn = repair.assumption.drawn
    for step in repair.steps:
        ref = step["ref"]
        if step["action"] == "turn":
            board = board.replace_part(drawn.transistors[ref])
        elif ref in board.resistors:
            board = board.with_resistor_ohms(ref, step["value"])
        else:
            board = board.replace_part(dataclasses.replace(
                board.capacitors[ref], farads=step["value"], leak_siemens=0.0))
    return board
