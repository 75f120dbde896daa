"""Solvers ("backends") behind one protocol, and the registry that finds them."""

from .base import Backend, Capabilities, ContractError, Parameter, SolverError, Support, Unsupported, support_of
from .registry import all_backends, get, names
from .result import Observable, Result, Solution, results_to_dataframe

__all__ = [
    "Backend",
    "Capabilities",
    "ContractError",
    "Observable",
    "Parameter",
    "Result",
    "Solution",
    "SolverError",
    "Support",
    "Unsupported",
    "all_backends",
    "get",
    "names",
    "results_to_dataframe",
    "support_of",
]
