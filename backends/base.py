"""The backend protocol: the small interface every method implements.

A backend is a class with

- ``name`` (str), ``version`` (str), ``summary`` (one line: the method and its source);
- ``parameters``: a tuple of ``Parameter`` (numerical knobs with defaults and documentation);
- ``capabilities``: a ``Capabilities`` declaring what it can compute (particle numbers, masses, trap
  shapes, couplings, parity sectors, excited states, observables, scalars, error bars);
- ``supports(problem, params) -> Support`` (optional): method-specific limits beyond the declared
  capabilities, seen with the resolved parameters, answered yes or no with a reason a person can act on;
- ``compute(problem, params) -> Solution`` for a single-g problem.

Subclassing ``Backend`` gives ``solve(problem, **params) -> Result`` and ``solve_scan`` for free, and
enforces the contract on both sides of ``compute``: before it, a request outside the declared
capabilities is refused with the reason (``Unsupported``); after it, the solution must honour the
request -- as many ascending energies as asked for, every state in the requested parity sector,
every requested observable present, only registered scalar and observable names -- or the result is
refused (``ContractError``). Nothing is dropped silently. Warnings that libraries emit during
``compute`` (``warnings`` and ``logging``) are captured into ``diagnostics["library_messages"]``,
never printed over a progress bar.
"""

from __future__ import annotations

import logging
import math
import time
import warnings
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar

from ..problems.errors import SpecError, did_you_mean
from ..problems.spec import OBSERVABLES, Problem
from .provenance import provenance
from .result import OBSERVABLE_NAMES, SCALAR_NAMES, Result, Solution

_TRUE = {"true", "yes", "on", "1"}
_FALSE = {"false", "no", "off", "0"}


class Unsupported(ValueError):
    """The backend cannot solve this problem; the message says why."""


class SolverError(RuntimeError):
    """The numerical method failed (did not converge, ran out of basis, ...); the message says how."""


class ContractError(SolverError):
    """A backend's solution does not honour the request (missing states or observables, wrong sector)."""


@dataclass(frozen=True)
class Support:
    """Answer of ``supports``: truthy when the backend can solve the problem, else carries the reason."""

    ok: bool
    reason: str = ""

    def __bool__(self) -> bool:
        return self.ok

    @classmethod
    def yes(cls) -> Support:
        return cls(True)

    @classmethod
    def no(cls, reason: str) -> Support:
        return cls(False, reason)



# What each observable of a problem's targets (``problems.spec.OBSERVABLES``) obliges a solution to
# contain for every species with particles ("{s}" is "up"/"down") or for the pair, in the shared names
# of ``result.OBSERVABLE_NAMES`` and ``result.SCALAR_NAMES``.
REQUIRED_OUTPUT = {
    "density": ("observables", ("density_{s}",)),
    "momentum": ("observables", ("momentum_{s}",)),
    "obdm": ("observables", ("obdm_{s}",)),
    "pair_position": ("observables", ("pair_position",)),
    "pair_momentum": ("observables", ("pair_momentum",)),
    "noise": ("observables", ("noise",)),
    "contact": ("scalars", ("delta", "contact")),
    "trap_energy": ("scalars", ("trap_energy",)),
}
assert set(REQUIRED_OUTPUT) == set(OBSERVABLES)
COUPLING_RANGES = ("any", "repulsive")


@dataclass(frozen=True)
class Capabilities:
    """What a backend can compute, declared once beside its code and enforced by ``Backend``.

    - ``particle_counts``: the (N_up, N_down) pairs it solves, or None for any;
      ``max_particles`` caps N_up + N_down (None: no cap);
    - ``trap_shapes``: the ``problems.spec.TRAP_SHAPES`` it handles;
    - ``unequal_masses`` / ``unequal_frequencies``: whether the species may differ;
    - ``couplings``: "any", or "repulsive" (g > 0 only);
    - ``parity_sectors``: it can restrict to the even or odd sector of a symmetric trap;
    - ``excited_states``: it computes more than the ground state;
    - ``observables``: the target observables (``problems.spec.OBSERVABLES``) it computes, at least for the
      lowest state;
    - ``error_bars``: it reports an error bar per energy (``energy_errors``);
    - ``built_on``: the reference routes (``problems.references.ROUTES``) whose formula or code the method
      itself uses: a value of such a route never grades it (another route to the same value may);
    - ``calibrated_on``: the (N_up, N_down) whose exact energies the method takes as input (e.g. a coupling
      fitted to the two-body spectrum): there its energies are exact by construction, and no energy
      reference grades it at any finite g.
    """

    particle_counts: tuple[tuple[int, int], ...] | None = None
    max_particles: int | None = None
    trap_shapes: tuple[str, ...] = ("harmonic",)
    unequal_masses: bool = True
    unequal_frequencies: bool = True
    couplings: str = "any"
    parity_sectors: bool = True
    excited_states: bool = True
    observables: tuple[str, ...] = ()
    error_bars: bool = False
    built_on: tuple[str, ...] = ()
    calibrated_on: tuple[tuple[int, int], ...] = ()

    def __post_init__(self) -> None:
        from ..problems.references import ROUTES

        unknown_routes = set(self.built_on) - set(ROUTES)
        if unknown_routes:
            raise ValueError(f"capabilities.built_on: unknown route(s) {sorted(unknown_routes)}; known: {', '.join(ROUTES)}")
        if any(len(counts) != 2 or min(counts) < 0 for counts in self.calibrated_on):
            raise ValueError(f"capabilities.calibrated_on: give (N_up, N_down) pairs of counts >= 0 (got {self.calibrated_on!r})")
        unknown = set(self.observables) - set(OBSERVABLES)
        if unknown:
            raise ValueError(f"capabilities.observables: unknown {sorted(unknown)}; known: {', '.join(OBSERVABLES)}")
        if self.couplings not in COUPLING_RANGES:
            raise ValueError(f"capabilities.couplings: got {self.couplings!r}; allowed: {', '.join(COUPLING_RANGES)}")

    def refusal(self, problem: Problem) -> str | None:
        """Why ``problem`` lies outside these capabilities (a sentence a person can act on), or None."""
        counts = (problem.up.count, problem.down.count)
        if self.particle_counts is not None and counts not in self.particle_counts:
            allowed = " or ".join(f"{u}+{d}" for u, d in self.particle_counts)
            return f"needs exactly {allowed} particles (got {counts[0]}+{counts[1]})"
        if self.max_particles is not None and problem.n_particles > self.max_particles:
            return f"{problem.n_particles} particles exceed the {self.max_particles} this method handles"
        if problem.trap.shape not in self.trap_shapes:
            return f"needs a trap of shape {' or '.join(repr(t) for t in self.trap_shapes)} (got '{problem.trap.shape}')"
        if not self.unequal_masses and not problem.equal_masses:
            return f"needs equal masses (got {problem.up.mass:g} and {problem.down.mass:g})"
        if not self.unequal_frequencies and not problem.equal_frequencies:
            return f"needs equal trap frequencies (got {problem.up.omega:g} and {problem.down.omega:g})"
        if self.couplings == "repulsive" and any(g <= 0 for g in problem.g):
            return "describes only the repulsive branch g > 0"
        if problem.targets.parity != "any" and not self.parity_sectors:
            return f"does not resolve parity sectors; ask for parity 'any' (got '{problem.targets.parity}')"
        if problem.targets.states > 1 and not self.excited_states:
            return f"computes the ground state only; ask for targets.states = 1 (got {problem.targets.states})"
        missing = [name for name in problem.targets.observables if name not in self.observables]
        if missing:
            offered = ", ".join(self.observables) or "none"
            return f"does not compute the observable(s) {', '.join(missing)} (it offers: {offered})"
        return None

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

    @property
    def kind_text(self) -> str:
        """What a value must be, in words: 'an integer', 'a number', 'true or false', 'a comma-separated list', 'text'."""
        return {int: "an integer (2e7 style allowed)", float: "a number", bool: "true or false",
                list: "a comma-separated list", tuple: "a comma-separated list", str: "text"}.get(self.kind, self.kind.__name__)

    def coerce(self, value: Any, field: str) -> Any:
        """Validate ``value`` (a Python value or a string from the command line)."""
        if value is None or (isinstance(value, str) and value.lower() == "none"):
            if self.allow_none or self.default is None:
                return None
            raise SpecError(field, f"may not be None; give {self.kind_text}")
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
            raise SpecError(field, f"got {value!r}; give {self.kind_text} ({self.doc})") from None
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
            return _parse_int(text)
        if self.kind is float:
            return float(text)
        if self.kind in (list, tuple):
            return [float(p) if _is_number(p) else p for p in text.replace(";", ",").split(",") if p.strip()]
        return text


def _parse_int(text: str) -> int:
    """A whole number written plainly or in exponent form ("20000000", "2e7", "2.5e3")."""
    try:
        return int(text)
    except ValueError:
        value = float(text)
        if not math.isfinite(value) or not value.is_integer():
            raise ValueError(text) from None
        return int(value)


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
    capabilities: ClassVar[Capabilities] = Capabilities()
    # Cheap parameters for the quick tier of the common check suite (``trapbench validate``): enough to
    # exercise every code path in seconds, not to be accurate. The user's --param values override them.
    check_params: ClassVar[dict[str, Any]] = {}
    # Extra libraries whose versions belong in the provenance (e.g. ("quspin",)).
    libraries: ClassVar[tuple[str, ...]] = ()
    # Modules the sweep's task server imports once before its first task, besides this backend's own, so that
    # every forked task inherits what they load (heavy imports; a module whose import warms compiled kernels).
    # Their import must not raise: an error would stop the server.
    preload: ClassVar[tuple[str, ...]] = ()

    # ------------------------------------------------------------------ to implement
    def supports(self, problem: Problem, params: dict[str, Any] | None = None) -> Support:
        """Method-specific limits beyond ``capabilities`` (e.g. a basis too large for ``params``)."""
        return Support.yes()

    def compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        raise NotImplementedError

    # ------------------------------------------------------------------ provided
    def resolve_params(self, params: Mapping[str, Any]) -> dict[str, Any]:
        """Defaults overlaid with ``params``; unknown names and bad values raise SpecError."""
        known = {p.name: p for p in self.parameters}
        resolved = {p.name: p.default for p in self.parameters}
        for key, value in params.items():
            if key not in known:
                hint = did_you_mean(key, known, otherwise="known: " + ", ".join(known) if known
                                    else f"{self.name} takes no parameters")
                raise SpecError(f"param.{key}", f"unknown parameter of backend '{self.name}'; {hint}")
            resolved[key] = known[key].coerce(value, f"param.{key}")
        return resolved

    def admits(self, problem: Problem, params: Mapping[str, Any] | None = None) -> Support:
        """The full answer for every point of ``problem``: declared capabilities, then ``supports``."""
        if problem.targets.parity != "any" and not problem.trap.is_symmetric:
            return Support.no("a parity sector was requested but the trap is not symmetric")
        refusal = self.capabilities.refusal(problem)
        if refusal:
            return Support.no(refusal)
        resolved = self.resolve_params(params or {})
        for point in problem.points():
            support = self.supports(point, resolved)
            if not support:
                return support
        return Support.yes()

    def check(self, problem: Problem, params: Mapping[str, Any] | None = None) -> None:
        """Raise Unsupported with the backend's reason when it cannot solve ``problem``."""
        support = self.admits(problem, params)
        if not support:
            raise Unsupported(f"{self.name}: {support.reason}")

    def solve(self, problem: Problem, **params: Any) -> Result:
        """Solve a single-g problem (a scan is refused: use ``solve_scan``)."""
        if problem.is_scan:
            raise ValueError("solve() takes one value of g; use solve_scan() for a scan")
        resolved = self.resolve_params(params)
        self.check(problem, resolved)
        wall, cpu = time.perf_counter(), time.process_time()
        with captured_library_messages() as messages:
            solution = self.compute(problem, resolved)
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        if messages:
            solution.diagnostics["library_messages"] = messages
        verify_solution(self.name, problem, solution)
        return self._result(problem, resolved, solution, wall, cpu)

    def solve_scan(self, problem: Problem, **params: Any) -> list[Result]:
        """One Result per value of g, in the order of the scan."""
        return [self.solve(point, **params) for point in problem.points()]

    def _result(self, problem: Problem, params: dict, solution: Solution, wall: float, cpu: float) -> Result:
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


def support_of(backend: Any, problem: Problem, params: Mapping[str, Any] | None = None) -> Support:
    """What any registered backend says about ``problem``: ``admits`` for a ``Backend`` subclass, else the
    plain protocol's ``supports(problem)`` (a plug-in that implements only ``name``/``supports``/``solve``)."""
    if isinstance(backend, Backend):
        return backend.admits(problem, params)
    return backend.supports(problem)


def verify_solution(backend: str, problem: Problem, solution: Solution) -> None:
    """Raise ContractError unless ``solution`` honours the request of ``problem`` (see the module docstring)."""
    wanted = problem.targets.states
    energies = list(solution.energies)
    if len(energies) != wanted:
        raise ContractError(f"{backend}: returned {len(energies)} energies for targets.states = {wanted}")
    if any(not math.isfinite(e) for e in energies):
        raise ContractError(f"{backend}: returned a non-finite energy {energies}")
    if any(b < a for a, b in zip(energies, energies[1:])):
        raise ContractError(f"{backend}: energies must be returned in ascending order (got {energies})")
    if solution.energy_errors is not None and len(solution.energy_errors) != wanted:
        raise ContractError(f"{backend}: {len(solution.energy_errors)} energy_errors for {wanted} energies")
    if problem.targets.parity != "any":
        sign = 1 if problem.targets.parity == "even" else -1
        for k in range(wanted):
            parity = solution.states[k].get("parity") if k < len(solution.states) else None
            if parity != sign:
                raise ContractError(
                    f"{backend}: state {k} has parity {parity!r}, outside the requested '{problem.targets.parity}' sector"
                )
    for kind, name in _required_names(problem):
        present = solution.observables if kind == "observables" else solution.scalars
        if name not in present:
            raise ContractError(f"{backend}: the requested output '{name}' is missing from the solution's {kind}")
    for kind, names, registry_names in (
        ("observable", solution.observables, OBSERVABLE_NAMES),
        ("scalar", solution.scalars, SCALAR_NAMES),
    ):
        unknown = sorted(n for n in names if n.split("@")[0] not in registry_names)
        if unknown:
            raise ContractError(
                f"{backend}: unregistered {kind} name(s) {unknown}; use the shared names of backends/result.py"
            )
    stray = sorted(set(solution.scalar_errors) - set(solution.scalars))
    if stray:
        raise ContractError(f"{backend}: scalar_errors for scalars it does not report: {stray}")


def _required_names(problem: Problem) -> list[tuple[str, str]]:
    species = [label for label, s in zip(("up", "down"), problem.species) if s.count]
    both = len(species) == 2
    found = []
    for target in problem.targets.observables:
        kind, templates = REQUIRED_OUTPUT[target]
        for template in templates:
            if "{s}" in template:
                found += [(kind, template.format(s=s)) for s in species]
            elif kind == "scalars" or both:
                found.append((kind, template))
    return found


class captured_library_messages:
    """Context manager collecting ``warnings`` and WARNING-or-worse ``logging`` records of libraries.

    Yields a list that fills with one "category: message" line per distinct message (with a count when
    repeated), so a solve never prints a library's chatter over a progress bar; the lines end up in the
    result's ``diagnostics["library_messages"]`` (shown by ``trapbench solve -v`` and kept in the store).
    """

    def __enter__(self) -> list[str]:
        self.lines: list[str] = []
        self._counts: dict[str, int] = {}
        self._warnings = warnings.catch_warnings(record=True)
        self._records = self._warnings.__enter__()
        warnings.simplefilter("always")
        self._handler = _ListHandler(self._note)
        root = logging.getLogger()
        root.addHandler(self._handler)
        return self.lines

    def _note(self, line: str) -> None:
        self._counts[line] = self._counts.get(line, 0) + 1

    def __exit__(self, *exc_info: Any) -> None:
        logging.getLogger().removeHandler(self._handler)
        for record in self._records:
            self._note(f"{record.category.__name__}: {record.message}")
        self._warnings.__exit__(*exc_info)
        self.lines.extend(line if n == 1 else f"{line} (x{n})" for line, n in self._counts.items())


class _ListHandler(logging.Handler):
    def __init__(self, note) -> None:
        super().__init__(level=logging.WARNING)
        self._note_line = note

    def emit(self, record: logging.LogRecord) -> None:
        if not record.name.startswith("trapbench"):
            self._note_line(f"{record.name}: {record.getMessage()}")
