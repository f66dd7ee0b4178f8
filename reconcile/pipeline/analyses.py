"""The fit step as the command line and the store run it: fit, error budget, next reading."""

from __future__ import annotations

from dataclasses import dataclass

from reconcile.model.board import Board
from reconcile.inference.fitting import FitResult, fit_board
from reconcile.analysis.error_budget import ErrorBudget, error_budget
from reconcile.analysis.next_reading import Suggestion, suggest_next
from reconcile.data.readings import Reading


@dataclass(frozen=True)
class FitOutcome:
    fit: FitResult
    budget: ErrorBudget | None
    suggestions: list[Suggestion]

    def to_dict(self) -> dict:
        out = self.fit.to_dict()
        out["error_budget"] = self.budget.to_dict() if self.budget is not None else None
        # the version-1 name, kept readable for one version (README: migration notes)
        out["miss_budget"] = out["error_budget"]
        out["next_readings"] = [s.to_dict() for s in self.suggestions]
        return out


def run_fit(board: Board, readings: list[Reading], *, model_meter: bool = True) -> FitOutcome:
    """Fit, then the error budget (when the board has a spec) and the next readings."""
    result = fit_board(board, readings, model_meter=model_meter)
    return FitOutcome(result, error_budget(result), suggest_next(result))
