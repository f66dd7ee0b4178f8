"""The batched engine: compile a board, solve N variants of it in one call."""

from reconcile.engine.batch import BatchSolution, solve_batch
from reconcile.engine.circuit import Circuit, Parameters, compile_board, nominal_parameters
from reconcile.engine.dc import DCState

__all__ = [
    "BatchSolution",
    "Circuit",
    "DCState",
    "Parameters",
    "compile_board",
    "nominal_parameters",
    "solve_batch",
]
