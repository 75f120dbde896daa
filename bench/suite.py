"""Benchmark suites: problems x backends x parameter ladders, with tolerances per quantity.

A suite is a TOML file (built-in ones live in ``trapbench/problems/suites``)::

    name = "quick"
    description = "..."
    timeout = 120            # default wall-time limit per task, seconds
    memory = 2048            # default memory cap per task, MiB

    [tolerances]             # per quantity: a value agrees when |x - x_ref| <= abs + rel * |x_ref|
    energy = { abs = 1e-9, rel = 1e-7 }
    contact = { rel = 1e-4 }

    [[problems]]
    name = "1+1 g=2"          # unique; the rest is the schema of a problem file (``Problem.from_dict``)
    up = { count = 1 }
    down = { count = 1 }
    interaction = { g = [-2.0, 2.0] }   # a scan becomes one task per g

    [[problems]]
    name = "from the catalogue"
    catalogue = "some-entry"  # a named catalogue problem (``trapbench.problems.catalogue``)

    [[backends]]
    name = "lattice-ed"
    problems = ["1+1 g=2"]    # optional: a subset of the problems (default: all)
    params = { x_max = 7.0 }  # fixed parameters of every task
    ladder = [{ spacing = 0.2 }, { spacing = 0.1 }]   # each rung overlays params ...
    grid = { chi = [16, 32] }  # ... and/or the cartesian product of these lists
    timeout = 60               # optional per-backend limits
    memory = 1024

Every malformed field raises ``SpecError`` naming it (e.g. ``backends[1].ladder[0].spacing``), when
the suite is loaded, before anything runs: a backend name that is not installed (with the closest
installed name), and every parameter set of every rung against the backend's declared
``parameters`` and against what it accepts for each of its problems. A rung is out of range when
the backend admits a problem under its default parameters but refuses it under the rung's; a
problem the backend refuses whatever the parameters stays in the suite and is recorded as
``unsupported`` when it runs.
"""

from __future__ import annotations

import hashlib
import itertools
import json
import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from importlib import resources
from pathlib import Path
from typing import Any

from ..problems.errors import SpecError, did_you_mean, reject_unknown_keys, show
from ..problems.spec import Problem

DEFAULT_TIMEOUT_S = 600.0
DEFAULT_MEMORY_MIB = 4096.0
SUITE_KEYS = ("name", "description", "timeout", "memory", "tolerances", "problems", "backends")
BACKEND_KEYS = ("name", "problems", "params", "ladder", "grid", "timeout", "memory", "tolerances")
TOLERANCE_KEYS = ("abs", "rel")


@dataclass(frozen=True)
class Tolerance:
    """Agreement rule for one quantity: |x - x_ref| <= abs + rel * |x_ref|."""

    abs: float = 0.0
    rel: float = 0.0

    def allowed(self, reference: float) -> float:
        return self.abs + self.rel * abs(reference)

    def agrees(self, value: float, reference: float) -> bool:
        return abs(value - reference) <= self.allowed(reference)

    def to_dict(self) -> dict:
        return {"abs": self.abs, "rel": self.rel}


DEFAULT_TOLERANCES = {"energy": Tolerance(abs=1e-9, rel=1e-6)}


@dataclass(frozen=True)
class SuiteProblem:
    """A named problem of a suite (possibly a scan over g)."""

    name: str
    problem: Problem
    catalogue: str | None = None


@dataclass(frozen=True)
class BackendPlan:
    """One backend's part of a suite: which problems, and the parameter sets to try on each."""

    name: str
    problems: tuple[str, ...]
    param_sets: tuple[dict, ...]
    timeout_s: float
    memory_mib: float
    tolerances: dict[str, Tolerance]


@dataclass(frozen=True)
class Task:
    """One unit of work: a backend with one parameter set on one single-g problem.

    ``key`` identifies the computation (problem physics, backend, parameters) and is what the store
    resumes on, so two suites that share a task share its result.
    """

    problem_name: str
    problem: Problem
    backend: str
    params: dict
    timeout_s: float
    memory_mib: float

    @property
    def key(self) -> str:
        return task_key(self.problem.key, self.backend, self.params)

    @property
    def params_json(self) -> str:
        return canonical_params(self.params)


def canonical_params(params: Mapping) -> str:
    return json.dumps(params, sort_keys=True, separators=(",", ":"), default=str)


def task_key(problem_key: str, backend: str, params: Mapping) -> str:
    text = f"{problem_key}|{backend}|{canonical_params(params)}"
    return hashlib.sha256(text.encode()).hexdigest()[:20]


@dataclass(frozen=True)
class Suite:
    """A validated suite; ``tasks()`` expands it into the list of work items, in a stable order."""

    name: str
    description: str
    problems: tuple[SuiteProblem, ...]
    backends: tuple[BackendPlan, ...]
    tolerances: dict[str, Tolerance] = field(default_factory=dict)
    source: str = ""

    def problem(self, name: str) -> SuiteProblem:
        for p in self.problems:
            if p.name == name:
                return p
        raise KeyError(name)

    def tasks(self) -> list[Task]:
        """Every (backend, parameter set, problem point); a computation named twice (the same physics
        under two problem names) is listed once, under its first name."""
        tasks: dict[str, Task] = {}
        for plan in self.backends:
            for pname in plan.problems:
                for point in self.problem(pname).problem.points():
                    for params in plan.param_sets:
                        task = Task(pname, point, plan.name, dict(params), plan.timeout_s, plan.memory_mib)
                        tasks.setdefault(task.key, task)
        return list(tasks.values())

    def restricted_to(self, backends: list[str]) -> "Suite":
        """The same suite with only the named backends' plans (e.g. to run again what one backend changed);
        the tasks keep their keys, so their results land beside the suite's other results in a store."""
        named = {plan.name for plan in self.backends}
        for name in backends:
            if name not in named:
                hint = did_you_mean(name, sorted(named), cutoff=0.4)
                raise SpecError("--backend", f"suite '{self.name}' runs no backend '{name}' (it runs "
                                             f"{', '.join(sorted(named))}){'; ' + hint if hint else ''}")
        return replace(self, backends=tuple(plan for plan in self.backends if plan.name in backends))

    def tolerance(self, quantity: str, backend: str | None = None) -> Tolerance:
        """The tolerance for ``quantity`` (a backend's own entry first, then the suite's, then the default)."""
        for plan in self.backends:
            if plan.name == backend and quantity in plan.tolerances:
                return plan.tolerances[quantity]
        if quantity in self.tolerances:
            return self.tolerances[quantity]
        return DEFAULT_TOLERANCES.get(quantity, DEFAULT_TOLERANCES["energy"])

    @property
    def tolerance_table(self) -> dict[str, dict]:
        merged = {**DEFAULT_TOLERANCES, **self.tolerances}
        return {k: v.to_dict() for k, v in merged.items()}


# ----------------------------------------------------------------------------- parsing


def _positive(value: Any, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
        raise SpecError(where, f"got {show(value)}; give a positive number")
    return float(value)


def _tolerances(data: Any, where: str) -> dict[str, Tolerance]:
    if not isinstance(data, Mapping):
        raise SpecError(where, f"got {show(data)}; give a table quantity = {{ abs = ..., rel = ... }}")
    out = {}
    for quantity, rule in data.items():
        here = f"{where}.{quantity}"
        if isinstance(rule, (int, float)) and not isinstance(rule, bool):
            rule = {"rel": rule}
        if not isinstance(rule, Mapping) or not rule:
            raise SpecError(here, f"got {show(rule)}; give {{ abs = ..., rel = ... }} (either or both)")
        reject_unknown_keys(rule, TOLERANCE_KEYS, here)
        values = {}
        for key in TOLERANCE_KEYS:
            if key in rule:
                v = rule[key]
                if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v < 0:
                    raise SpecError(f"{here}.{key}", f"got {show(v)}; give a number >= 0")
                values[key] = float(v)
        out[str(quantity)] = Tolerance(**values)
    return out


def _suite_problem(data: Any, where: str, names: set[str]) -> SuiteProblem:
    if not isinstance(data, Mapping):
        raise SpecError(where, f"got {show(data)}; give a table with 'name' and a problem")
    data = dict(data)
    name = data.pop("name", None)
    if not isinstance(name, str) or not name.strip():
        raise SpecError(f"{where}.name", f"got {show(name)}; every problem needs a unique, non-empty name")
    if name in names:
        raise SpecError(f"{where}.name", f"'{name}' is used twice; problem names must be unique")
    catalogue = data.pop("catalogue", None)
    if catalogue is not None:
        if data:
            first = next(iter(data))
            raise SpecError(f"{where}.{first}", "a catalogue problem takes only 'name' and 'catalogue'")
        if not isinstance(catalogue, str):
            raise SpecError(f"{where}.catalogue", f"got {show(catalogue)}; give a catalogue entry name")
        try:
            from ..problems import catalogue as catalogue_module
        except ImportError:
            raise SpecError(f"{where}.catalogue", "the problem catalogue is not available in this installation")
        try:
            entry = catalogue_module.get(catalogue)
        except (KeyError, LookupError, SpecError) as exc:
            raise SpecError(f"{where}.catalogue", f"no catalogue entry '{catalogue}' ({exc})") from None
        return SuiteProblem(name, entry.problem, catalogue)
    try:
        problem = Problem.from_dict(data)
    except SpecError as exc:
        raise SpecError(f"{where}.{exc.field}", exc.reason) from None
    return SuiteProblem(name, problem)


def _param_table(data: Any, where: str) -> dict:
    if not isinstance(data, Mapping):
        raise SpecError(where, f"got {show(data)}; give a table of parameter = value")
    return dict(data)


def _param_sets(data: Mapping, where: str) -> list[tuple[dict, str]]:
    """Parameter sets with the field each came from (for error messages)."""
    base = _param_table(data.get("params", {}), f"{where}.params")
    rungs: list[tuple[dict, str]] = [({}, f"{where}.params")]
    if "ladder" in data:
        ladder = data["ladder"]
        if not isinstance(ladder, list) or not ladder:
            raise SpecError(f"{where}.ladder", f"got {show(ladder)}; give a non-empty list of parameter tables")
        rungs = [(_param_table(r, f"{where}.ladder[{i}]"), f"{where}.ladder[{i}]") for i, r in enumerate(ladder)]
    combos: list[tuple[dict, str]] = [({}, "")]
    if "grid" in data:
        grid = _param_table(data["grid"], f"{where}.grid")
        for key, values in grid.items():
            if not isinstance(values, list) or not values:
                raise SpecError(f"{where}.grid.{key}", f"got {show(values)}; give a non-empty list of values")
        keys = list(grid)
        combos = [(dict(zip(keys, vals)), f"{where}.grid") for vals in itertools.product(*(grid[k] for k in keys))]
    out = []
    for rung, rung_where in rungs:
        for combo, combo_where in combos:
            out.append(({**base, **rung, **combo}, combo_where or rung_where))
    return out


def _validate_params(backend: Any, params: dict, where: str) -> None:
    """Check a parameter set against the backend's declared parameters (protocol backends without
    ``resolve_params`` are checked when their tasks run)."""
    if not hasattr(backend, "resolve_params"):
        return
    try:
        backend.resolve_params(params)
    except SpecError as exc:
        name = exc.field.removeprefix("param.")
        raise SpecError(f"{where}.{name}", exc.reason) from None


def _admits(backend: Any, problem: Problem, params: dict) -> tuple[bool, str]:
    """(yes, reason) of ``backend.admits`` (declared capabilities and ``supports`` with parameters)."""
    try:
        support = backend.admits(problem, params)
    except SpecError as exc:
        return False, str(exc)
    return bool(support), getattr(support, "reason", "")


def _check_rungs(backend: Any, sets: list[tuple[dict, str]], points: list[tuple[str, Problem]]) -> None:
    """Refuse a parameter set under which the backend declines a problem it admits with its defaults."""
    if not hasattr(backend, "admits"):
        return
    for pname, point in points:
        if not _admits(backend, point, {})[0]:
            continue  # refused whatever the parameters: recorded as unsupported when it runs
        for params, set_where in sets:
            accepted, reason = _admits(backend, point, params)
            if not accepted:
                raise SpecError(set_where, f"outside the range of backend '{backend.name}' for problem '{pname}'"
                                           f" (g={point.coupling:g}): {reason}")


def _installed_backend(name: str, where: str):
    """The backend called ``name``; SpecError naming the field when it is unknown or cannot be imported."""
    from ..backends import registry

    try:
        return registry.get(name)
    except registry.UnknownBackend:
        installed = registry.names()
        hint = did_you_mean(name, installed, otherwise="installed: " + ", ".join(installed), cutoff=0.4)
        raise SpecError(where, f"no backend named {show(name)}; {hint} (see `trapbench backends`)") from None
    except ImportError as exc:
        raise SpecError(where, f"backend '{name}' cannot be imported here ({exc}); install its dependencies") from None


def _backend_plan(data: Any, where: str, problems: list[SuiteProblem], defaults: tuple[float, float]) -> BackendPlan:
    if not isinstance(data, Mapping):
        raise SpecError(where, f"got {show(data)}; give a table with at least 'name'")
    reject_unknown_keys(data, BACKEND_KEYS, where)
    name = data.get("name")
    if not isinstance(name, str) or not name.strip():
        raise SpecError(f"{where}.name", f"got {show(name)}; give a backend name (see `trapbench backends`)")
    problem_names = [p.name for p in problems]
    chosen = data.get("problems", problem_names)
    if not isinstance(chosen, list) or not chosen:
        raise SpecError(f"{where}.problems", f"got {show(chosen)}; give a non-empty list of problem names")
    for i, pname in enumerate(chosen):
        if pname not in problem_names:
            raise SpecError(f"{where}.problems[{i}]", f"no problem named {show(pname)} in this suite")
    sets = _param_sets(data, where)
    backend = _installed_backend(name, f"{where}.name")
    for params, set_where in sets:
        _validate_params(backend, params, set_where)
    by_name = {p.name: p.problem for p in problems}
    _check_rungs(backend, sets, [(pname, point) for pname in chosen for point in by_name[pname].points()])
    unique: dict[str, dict] = {}
    for params, _ in sets:
        unique.setdefault(canonical_params(params), params)
    timeout = _positive(data["timeout"], f"{where}.timeout") if "timeout" in data else defaults[0]
    memory = _positive(data["memory"], f"{where}.memory") if "memory" in data else defaults[1]
    tolerances = _tolerances(data.get("tolerances", {}), f"{where}.tolerances")
    return BackendPlan(name, tuple(chosen), tuple(unique.values()), timeout, memory, tolerances)


def suite_from_dict(data: Any, source: str = "<suite>") -> Suite:
    """Validate a suite mapping (as read from TOML); every error names its field."""
    if not isinstance(data, Mapping):
        raise SpecError("suite", f"got {show(data)}; expected a table")
    reject_unknown_keys(data, SUITE_KEYS, "")
    name = data.get("name", Path(source).stem)
    if not isinstance(name, str) or not name.strip():
        raise SpecError("name", f"got {show(name)}; give the suite a name")
    description = data.get("description", "")
    if not isinstance(description, str):
        raise SpecError("description", f"got {show(description)}; give a string")
    timeout = _positive(data["timeout"], "timeout") if "timeout" in data else DEFAULT_TIMEOUT_S
    memory = _positive(data["memory"], "memory") if "memory" in data else DEFAULT_MEMORY_MIB
    raw_problems = data.get("problems")
    if not isinstance(raw_problems, list) or not raw_problems:
        raise SpecError("problems", "missing or empty; give at least one [[problems]] table")
    problems: list[SuiteProblem] = []
    for i, raw in enumerate(raw_problems):
        problems.append(_suite_problem(raw, f"problems[{i}]", {p.name for p in problems}))
    raw_backends = data.get("backends")
    if not isinstance(raw_backends, list) or not raw_backends:
        raise SpecError("backends", "missing or empty; give at least one [[backends]] table")
    plans = tuple(_backend_plan(b, f"backends[{i}]", problems, (timeout, memory)) for i, b in enumerate(raw_backends))
    tolerances = _tolerances(data.get("tolerances", {}), "tolerances")
    return Suite(name, description, tuple(problems), plans, tolerances, source)


def parse_suite(text: str, source: str = "<string>") -> Suite:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(source, f"not valid TOML ({exc}); check the syntax at that line") from None
    return suite_from_dict(data, source)


def builtin_suites() -> list[str]:
    """Names of the suites shipped with trapbench."""
    folder = resources.files("trapbench.problems") / "suites"
    if not folder.is_dir():
        return []
    return sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))


def load_suite(name_or_path: str | Path) -> Suite:
    """A built-in suite by name (e.g. ``quick``) or a suite TOML file by path."""
    path = Path(name_or_path)
    if path.suffix != ".toml" and not path.exists():
        folder = resources.files("trapbench.problems") / "suites"
        candidate = folder / f"{name_or_path}.toml"
        if not candidate.is_file():
            raise SpecError("suite", f"no built-in suite '{name_or_path}' and no such file; built-in: "
                            + ", ".join(builtin_suites()))
        return parse_suite(candidate.read_text(encoding="utf-8"), f"{name_or_path}.toml")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(str(path), f"cannot read the suite file ({exc.__class__.__name__}: {exc})") from None
    return parse_suite(text, str(path))
