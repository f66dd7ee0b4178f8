"""reconcile: fit a model of a built transistor board to bench readings.

Notebook API (imported lazily, so ``import reconcile`` stays cheap)::

    import reconcile
    board = reconcile.load_board("sample_data/line_receiver_cb.toml")
    sol = reconcile.solve(board)            # BoardSolution: .to_dict(), pandas views
    readings = reconcile.load_readings("sample_data/line_receiver_built.csv", board)
    fit = reconcile.fit(board, readings)    # FitResult
    diag = reconcile.diagnose(board, readings)
    rework = reconcile.trim(board, fit)     # TrimResult
    fit.report()                            # prints what `reconcile fit` prints

    # or every step at once, with the pipeline's rules (a trim from a fit that does not
    # explain the readings carries a warning):
    inputs = reconcile.AnalysisInputs.from_objects(board, readings)
    analysis = reconcile.analyse(inputs)    # Analysis: .fit, .diagnosis, .trim

Every exported result type has a one-line ``repr`` and a ``report()`` method.
"""

from __future__ import annotations

from typing import Any

__version__ = "0.1.0"

_LAZY = {
    # loading
    "load_board": ("reconcile.model.board_loader", "load_board"),
    "board_from_text": ("reconcile.model.board_loader", "board_from_text"),
    "load_readings": ("reconcile.data.readings", "load_readings"),
    # the analyses
    "solve": ("reconcile.engine.solution", "solve"),
    "fit": ("reconcile.inference.fitting", "fit_board"),
    "diagnose": ("reconcile.diagnosis.diagnose", "diagnose"),
    "trim": ("reconcile.trim", None),  # the package, callable as the function (trim/__init__.py)
    "characterise_lot": ("reconcile.lot.characterise", "run_lot"),
    # the pipeline
    "AnalysisInputs": ("reconcile.pipeline.inputs", "AnalysisInputs"),
    "AnalysisOptions": ("reconcile.pipeline.inputs", "AnalysisOptions"),
    "analyse": ("reconcile.pipeline.analyses", "analyse"),
    "fit_step": ("reconcile.pipeline.analyses", "fit_step"),
    "diagnose_step": ("reconcile.pipeline.analyses", "diagnose_step"),
    "trim_step": ("reconcile.pipeline.analyses", "trim_step"),
    # inputs and result types
    "Board": ("reconcile.model.board", "Board"),
    "Reading": ("reconcile.data.readings", "Reading"),
    "BoardSolution": ("reconcile.engine.solution", "BoardSolution"),
    "FitResult": ("reconcile.inference.fitting", "FitResult"),
    "Diagnosis": ("reconcile.diagnosis.diagnose", "Diagnosis"),
    "Hypothesis": ("reconcile.diagnosis.scoring", "Hypothesis"),
    "TrimResult": ("reconcile.trim.rework", "TrimResult"),
    "LotResult": ("reconcile.lot.characterise", "LotResult"),
    "FitOutcome": ("reconcile.pipeline.analyses", "FitOutcome"),
    "TrimOutcome": ("reconcile.pipeline.analyses", "TrimOutcome"),
    "Analysis": ("reconcile.pipeline.analyses", "Analysis"),
    # errors
    "InputError": ("reconcile.errors", "InputError"),
    "ReconcileError": ("reconcile.errors", "ReconcileError"),
}

__all__ = ["__version__", *_LAZY]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        module, attr = _LAZY[name]
        found = importlib.import_module(module)
        return found if attr is None else getattr(found, attr)
    raise AttributeError(f"module 'reconcile' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
