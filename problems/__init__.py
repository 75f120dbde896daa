"""Problem specifications (plain validated data), reference values and suites."""

from .errors import SpecError
from .spec import OBSERVABLES, PARITY_SECTORS, TRAP_SHAPES, Problem, Species, Targets, Trap
from .toml_io import format_problem, load_problem, parse_problem, save_problem
from .units import CouplingConversion, olshanii_coupling

__all__ = [
    "OBSERVABLES",
    "PARITY_SECTORS",
    "TRAP_SHAPES",
    "CouplingConversion",
    "Problem",
    "SpecError",
    "Species",
    "Targets",
    "Trap",
    "format_problem",
    "load_problem",
    "olshanii_coupling",
    "parse_problem",
    "save_problem",
]
