"""The backend protocol: the small interface every method implements.

A backend is a class with

- ``name`` (str), ``version`` (str), ``summary`` (one line: the method and its source);
- ``parameters``: a tuple of ``Parameter`` (numerical knobs with defaults and documentation);
- ``supports(problem) -> Support``: yes, or no with a reason a person can act on;
- ``compute(problem, params) -> Solution`` for a single-g problem.

Subclassing ``Backend`` gives ``solve(problem, **params) -> Result`` (parameter checking, timing,
provenance) and ``solve_scan`` for free. A third-party backend may also be any object with
``name``, ``supports`` and ``solve``; the registry accepts both.
"""

from __future__ import annotations

import difflib
import time
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar

from ..problems.errors import SpecError
from ..problems.spec import Problem
from .provenance import provenance
from .result import Result, Solution

_TRUE = {"true", "yes", "on", "1"}
_FALSE = {"false", "no", "off", "0"}


class Unsupported(ValueError):
    """The backend cannot solve this problem; the message says why."""


class SolverError(RuntimeError):
    """The numerical method failed (did not converge, ran out of basis, ...); the message says how."""


@dataclass(frozen=True)
class Support:
    """Answer of ``supports``: truthy when the backend can solve the problem, else carries the reason."""

    ok: bool
    reason: str = ""

    def __bool__(self) -> bool:
        return self.ok

    @classmethod
    def yes(cls, note: str = "") -> Support:
        return cls(True, note)

    @classmethod
    def no(cls, reason: str) -> Support:
        return cls(False, reason)


@dataclass(frozen=True)
class Parameter:
    """One numerical parameter of a backend: its type, default, allowed range and meaning."""

    name: str
    kind: type
    default: Any
    doc: str
    choices: tuple | None = None
    minimum: float | None = None
    allow_none: bool = False

    def coerce(self, value: Any, field: str) -> Any:
        """Validate ``value`` (a Python value or a string from the command line)."""
        if value is None or (isinstance(value, str) and value.lower() == "none"):
            if self.allow_none or self.default is None:
                return None
            raise SpecError(field, f"may not be None; give a {self.kind.__name__}")
        try:
            if isinstance(value, str) and self.kind is not str:
                value = self._parse(value)
            if self.kind is bool:
                if not isinstance(value, bool):
                    raise TypeError
            elif self.kind is float:
                if isinstance(value, bool) or not isinstance(value, (int, float)):
                    raise TypeError
                value = float(value)
            elif self.kind is int:
                if isinstance(value, bool) or not isinstance(value, int):
                    if isinstance(value, float) and value.is_integer():
                        value = int(value)
                    else:
                        raise TypeError
            elif self.kind in (list, tuple):
                if not isinstance(value, (list, tuple)):
                    raise TypeError
                value = tuple(value)
            elif not isinstance(value, self.kind):
                raise TypeError
        except (TypeError, ValueError):
            raise SpecError(field, f"got {value!r}; give a {self.kind.__name__} ({self.doc})") from None
        if self.choices is not None and value not in self.choices:
            raise SpecError(field, f"got {value!r}; allowed: {', '.join(map(str, self.choices))}")
        if self.minimum is not None and isinstance(value, (int, float)) and value < self.minimum:
            raise SpecError(field, f"got {value!r}; must be >= {self.minimum}")
        return value

    def _parse(self, text: str) -> Any:
        if self.kind is bool:
            if text.lower() in _TRUE:
                return True
            if text.lower() in _FALSE:
                return False
            raise ValueError(text)
        if self.kind is int:
            return int(text)
        if self.kind is float:
            return float(text)
        if self.kind in (list, tuple):
            return [float(p) if _is_number(p) else p for p in text.replace(";", ",").split(",") if p.strip()]
        return text


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


class Backend:
    """Base class for built-in and third-party backends (see the module docstring)."""

    name: ClassVar[str] = ""
    version: ClassVar[str] = "0"
    summary: ClassVar[str] = ""
    parameters: ClassVar[tuple[Parameter, ...]] = ()
    # Extra libraries whose versions belong in the provenance (e.g. ("quspin",)).
    libraries: ClassVar[tuple[str, ...]] = ()

    # ------------------------------------------------------------------ to implement
    def supports(self, problem: Problem) -> Support:
        raise NotImplementedError

    def compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        raise NotImplementedError

    # ------------------------------------------------------------------ provided
    def resolve_params(self, params: Mapping[str, Any]) -> dict[str, Any]:
        """Defaults overlaid with ``params``; unknown names and bad values raise SpecError."""
        known = {p.name: p for p in self.parameters}
        resolved = {p.name: p.default for p in self.parameters}
        for key, value in params.items():
            if key not in known:
                close = difflib.get_close_matches(key, list(known), n=1, cutoff=0.5)
                hint = f"did you mean '{close[0]}'?" if close else (
                    "known: " + ", ".join(known) if known else f"{self.name} takes no parameters"
                )
                raise SpecError(f"param.{key}", f"unknown parameter of backend '{self.name}'; {hint}")
            resolved[key] = known[key].coerce(value, f"param.{key}")
        return resolved

    def check(self, problem: Problem) -> None:
        """Raise Unsupported with the backend's reason when it cannot solve ``problem``."""
        if problem.targets.parity != "any" and not problem.trap.is_symmetric:
            raise Unsupported(f"{self.name}: a parity sector was requested but the trap is not symmetric")
        support = self.supports(problem)
        if not support:
            raise Unsupported(f"{self.name}: {support.reason}")

    def solve(self, problem: Problem, **params: Any) -> Result:
        """Solve a single-g problem (or the first point of a scan is refused: use ``solve_scan``)."""
        if problem.is_scan:
            raise ValueError("solve() takes one value of g; use solve_scan() for a scan")
        resolved = self.resolve_params(params)
        self.check(problem)
        wall, cpu = time.perf_counter(), time.process_time()
        solution = self.compute(problem, resolved)
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        return self._result(problem, resolved, solution, wall, cpu)

    def solve_scan(self, problem: Problem, **params: Any) -> list[Result]:
        """One Result per value of g, in the order of the scan."""
        return [self.solve(point, **params) for point in problem.points()]

    def _result(self, problem: Problem, params: dict, solution: Solution, wall: float, cpu: float) -> Result:
        order = sorted(range(len(solution.energies)), key=lambda i: solution.energies[i])
        if order != list(range(len(order))):
            raise SolverError(f"{self.name}: energies must be returned in ascending order")
        return Result(
            backend=self.name,
            backend_version=self.version,
            problem=problem.to_dict(),
            problem_key=problem.key,
            g=problem.coupling,
            energies=[float(e) for e in solution.energies],
            states=list(solution.states),
            observables=dict(solution.observables),
            scalars={k: float(v) for k, v in solution.scalars.items()},
            scalar_errors={k: float(v) for k, v in solution.scalar_errors.items()},
            params=dict(params),
            error_estimate=None if solution.error_estimate is None else float(solution.error_estimate),
            energy_errors=None if solution.energy_errors is None else [float(e) for e in solution.energy_errors],
            wall_time_s=wall,
            cpu_time_s=cpu,
            provenance=provenance(self.name, self.version, self.libraries),
            diagnostics=dict(solution.diagnostics),
            warnings=list(solution.warnings),
        )
