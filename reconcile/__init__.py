"""reconcile: fit a model of a built transistor board to bench readings.

Notebook API (imported lazily, so ``import reconcile`` stays cheap)::

    import reconcile
    board = reconcile.load_board("sample_data/preamp_ce.toml")
    sol = reconcile.solve(board)            # BoardSolution: .to_dict(), pandas views
    readings = reconcile.load_readings("sample_data/line_receiver_built.csv", board)
    fit = reconcile.fit(board, readings)    # FitResult
"""

from __future__ import annotations

from typing import Any

__version__ = "0.1.0"

_LAZY = {
    "load_board": ("reconcile.model.board_loader", "load_board"),
    "board_from_text": ("reconcile.model.board_loader", "board_from_text"),
    "solve": ("reconcile.engine.solution", "solve"),
    "load_readings": ("reconcile.data.readings", "load_readings"),
    "fit": ("reconcile.inference.fitting", "fit_board"),
}

__all__ = ["__version__", *_LAZY]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        module, attr = _LAZY[name]
        return getattr(importlib.import_module(module), attr)
    raise AttributeError(f"module 'reconcile' has no attribute {name!r}")
