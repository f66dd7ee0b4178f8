"""The batched engine: compile a board, solve N variants of it in one call."""

from .batch import BatchSolution, solve_batch
from .circuit import Circuit, Parameters, compile_board, nominal_parameters
from .dc import DCState

__all__ = [
    "BatchSolution",
    "Circuit",
    "DCState",
    "Parameters",
    "compile_board",
    "nominal_parameters",
    "solve_batch",
]
