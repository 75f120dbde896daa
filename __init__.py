"""trapbench: interchangeable solvers for a few fermions in a one-dimensional trap.

State a problem once (``Problem``), solve it with any backend (``solve``), compare against
references and measure cost with the harness in ``trapbench.bench``.
"""

from importlib import metadata as _metadata

from .backends import Result, get as get_backend, names as backend_names
from .problems import Problem, SpecError, load_problem

try:
    __version__ = _metadata.version("trapbench")
except _metadata.PackageNotFoundError:  # running from an uninstalled source tree
    __version__ = "0+unknown"


def solve(problem: Problem, backend: str, **params) -> list[Result]:
    """Solve ``problem`` (one g or a scan) with the named backend; one Result per value of g."""
    return get_backend(backend).solve_scan(problem, **params)


__all__ = ["Problem", "Result", "SpecError", "__version__", "backend_names", "get_backend", "load_problem", "solve"]
