"""The common check suite: every contract and physics check that applies to a backend, chosen from what it declares.

``backend_checks(backend, params, tier)`` yields ``BackendCheck`` items -- one check on one problem each --
in the manner of a library's estimator checks: which checks run, and on which problems, follows from the
backend's declared ``capabilities`` (``backends.base.Capabilities``) and from what it admits, never from its
name. ``trapbench validate``, the project's own tests and a plug-in author's tests all run this one list:

    from trapbench.bench.check_suite import check_cases, assert_check

    @pytest.mark.parametrize("check", check_cases("my-method", params={"cutoff": 8}))
    def test_my_method(check):
        assert_check(check)

Contract checks (``CONTRACT_CHECKS``; the protocol of ``backends/base.py``, common practice):

- ``declaration``: name, version, summary, documented parameters and a ``Capabilities`` declaration;
- ``refusal``: a request outside the declared capabilities (an observable it does not offer, particle numbers,
  coupling sign, parity sectors, excited states) is refused with ``Unsupported`` naming what is missing,
  before any work;
- ``state-count``: as many ascending energies as asked for (1 and 3);
- ``parity-sector``: every state of an even (odd) sector request is labelled +1 (-1);
- ``observables``: every declared observable is returned under the shared names of ``backends/result.py``,
  finite, on its grids, with a finite non-negative error bar where one is given, and every scalar name is registered;
- ``error-bars``: a backend that declares error bars reports one finite, non-negative bar per energy.

Physics checks: those of ``bench.validation.CHECKS`` (exact properties of the Hamiltonian, each stated there
with its origin), run on the small problems the backend admits. Tiers: ``quick`` (the contract, and the
physics checks on the smallest admitted problem and the smallest one with three or more particles; the default of ``trapbench validate``) and
``thorough`` (every physics check on every admitted default problem, and the catalogue's references).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..backends import registry
from ..backends.base import Backend, Capabilities, support_of
from ..backends.result import OBSERVABLE_NAMES, SCALAR_NAMES
from ..problems.catalogue import entries as catalogue_entries
from ..problems.spec import OBSERVABLES, Problem
from .executor import UNSUPPORTED, execute
from .validation import CHECKS, Runner, Skip, TaskFailed, CheckTolerance, CheckVerdict, default_problems, run_check

TIERS = ("quick", "thorough")
QUICK_STATES = 3
QUICK_BUDGET_S = 100.0  # default time budget of `trapbench validate --tier quick`


@dataclass(frozen=True)
class BackendCheck:
    """One check (contract or physics) of one backend on one problem; ``run()`` gives its CheckVerdict."""

    name: str
    kind: str  # "contract" or "physics"
    problem: Problem | None
    run: Callable[[], CheckVerdict]

    @property
    def id(self) -> str:
        where = "" if self.problem is None else f"[{self.problem.describe()}]"
        return f"{self.kind}:{self.name}{where}"


# ----------------------------------------------------------------------------- contract checks


def _capabilities(backend: Any) -> Capabilities:
    """The declaration; a check that needs one skips a backend without it (``declaration`` fails instead)."""
    declared = getattr(backend, "capabilities", None)
    if not isinstance(declared, Capabilities):
        raise Skip(f"{backend.name} declares no capabilities to check against")
    return declared


def _verdict(name: str, problem: Problem | None, status: str, reason: str) -> CheckVerdict:
    return CheckVerdict(name, "-" if problem is None else problem.describe(), status, reason)


class BrokenContract(Exception):
    """The backend's answer broke the protocol (the base class's ContractError, or a wrong answer)."""


def _solve(backend: Any, problem: Problem, params: dict[str, Any]):
    """Solve through the executor: a refusal is a skip, a broken contract ``BrokenContract``, any other
    failure ``TaskFailed`` (an "error" verdict)."""
    support = support_of(backend, problem, params)
    if not support:
        raise Skip(f"{backend.name} does not admit {problem.describe()}: {support.reason}")
    outcome = execute(backend, problem, params)
    if outcome.status == UNSUPPORTED:
        raise Skip(outcome.error)
    if outcome.error_type == "ContractError":
        raise BrokenContract(outcome.error.removeprefix("ContractError: "))
    if not outcome.ok:
        raise TaskFailed(outcome.error.splitlines()[0])
    return outcome.solved()


def check_declaration(backend: Any, params: dict[str, Any]) -> CheckVerdict:
    name = "declaration"
    missing = [field for field in ("name", "version", "summary") if not getattr(backend, field, "")]
    if not isinstance(getattr(backend, "capabilities", None), Capabilities):
        missing.append("capabilities (a backends.base.Capabilities)")
    undocumented = [p.name for p in getattr(backend, "parameters", ()) if not getattr(p, "doc", "").strip()]
    if missing or undocumented:
        parts = ([f"missing {', '.join(missing)}"] if missing else []) + (
            [f"parameters without documentation: {', '.join(undocumented)}"] if undocumented else [])
        return _verdict(name, None, "fail", "; ".join(parts))
    return _verdict(name, None, "pass", "name, version, summary, capabilities and documented parameters declared")


def _outside_requests(problem: Problem, capabilities: Capabilities) -> list[tuple[str, Problem, str]]:
    """(what, problem, word the refusal must contain) for requests the declaration rules out."""
    requests = []
    for observable in OBSERVABLES:
        if observable not in capabilities.observables:
            requests.append((f"observable {observable}", problem.with_targets(states=1, observables=[observable]), observable))
    if capabilities.couplings == "repulsive":
        requests.append(("g < 0", problem.at(-abs(problem.coupling) or -1.0), "repulsive"))
    if not capabilities.parity_sectors:
        requests.append(("a parity sector", problem.with_targets(states=1, parity="even"), "parity"))
    if not capabilities.excited_states:
        requests.append(("excited states", problem.with_targets(states=3), "ground state"))
    if capabilities.particle_counts is not None:
        counts = {(problem.up.count + 1, problem.down.count), (problem.up.count, problem.down.count + 1)}
        for up, down in sorted(counts - set(capabilities.particle_counts)):
            requests.append((f"{up}+{down} particles", replace(problem, up=replace(problem.up, count=up),
                                                                down=replace(problem.down, count=down)), "particles"))
    return requests


def check_refusal(backend: Any, params: dict[str, Any], problem: Problem) -> CheckVerdict:
    name = "refusal"
    requests = _outside_requests(problem, _capabilities(backend))
    if not requests:
        raise Skip("the declaration rules nothing out on this problem")
    for what, request, word in requests:
        outcome = execute(backend, request, params)
        if outcome.status == UNSUPPORTED:
            if word not in outcome.error:
                return _verdict(name, problem, "fail",
                                f"{what} was refused, but the reason does not say '{word}': {outcome.error}")
            continue
        if outcome.ok:
            return _verdict(name, problem, "fail", f"{what} lies outside the declared capabilities but was computed")
        # anything but a clear refusal is a broken contract
        return _verdict(name, problem, "fail", f"{what}: expected a refusal, got {outcome.error.splitlines()[0]}")
    return _verdict(name, problem, "pass", f"refused {len(requests)} requests outside its capabilities with reasons")


def check_state_count(backend: Any, params: dict[str, Any], problem: Problem) -> CheckVerdict:
    name = "state-count"
    declared = getattr(backend, "capabilities", None)
    counts = (1,) if isinstance(declared, Capabilities) and not declared.excited_states else (1, 3)
    for states in counts:
        result = _solve(backend, problem.with_targets(states=states, observables=[]), params)
        energies = list(result.energies)
        if len(energies) != states:
            return _verdict(name, problem, "fail", f"asked for {states} states, got {len(energies)} energies")
        if any(b < a for a, b in zip(energies, energies[1:])) or not all(map(math.isfinite, energies)):
            return _verdict(name, problem, "fail", f"energies not finite and ascending: {energies}")
    return _verdict(name, problem, "pass", f"returned exactly {', '.join(map(str, counts))} ascending energies")


def check_parity_sector(backend: Any, params: dict[str, Any], problem: Problem) -> CheckVerdict:
    name = "parity-sector"
    if not _capabilities(backend).parity_sectors:
        raise Skip("the backend declares no parity sectors")
    states = 2 if _capabilities(backend).excited_states else 1
    for sector, sign in (("even", 1), ("odd", -1)):
        result = _solve(backend, problem.with_targets(states=states, parity=sector, observables=[]), params)
        labels = [s.get("parity") if isinstance(s, dict) else None for s in result.states]
        if len(labels) != len(result.energies) or any(label != sign for label in labels):
            return _verdict(name, problem, "fail", f"the {sector} sector returned states labelled {labels}")
    return _verdict(name, problem, "pass", "even and odd sector requests return states of that parity only")


def check_observables(backend: Any, params: dict[str, Any], problem: Problem) -> CheckVerdict:
    name = "observables"
    offered = list(_capabilities(backend).observables)
    if not offered:
        raise Skip("the backend declares no observables")
    result = _solve(backend, problem.with_targets(states=1, observables=offered), params)
    unregistered = [n for n in result.observables if n.split("@")[0] not in OBSERVABLE_NAMES]
    unregistered += [n for n in result.scalars if n.split("@")[0] not in SCALAR_NAMES]
    if unregistered:
        return _verdict(name, problem, "fail", f"unregistered names {unregistered}")
    for key, observable in result.observables.items():
        values = np.asarray(observable.values)
        if not np.all(np.isfinite(values)):
            return _verdict(name, problem, "fail", f"observable {key} has non-finite values")
        shape = tuple(len(axis) for axis in observable.axes.values())
        if values.shape != shape:
            return _verdict(name, problem, "fail", f"observable {key} has shape {values.shape}, its axes {shape}")
        if observable.error is not None and not (math.isfinite(observable.error) and observable.error >= 0):
            return _verdict(name, problem, "fail", f"observable {key} has error bar {observable.error!r}")
    bad = [k for k, v in result.scalars.items() if not math.isfinite(v)]
    if bad:
        return _verdict(name, problem, "fail", f"non-finite scalars {bad}")
    return _verdict(name, problem, "pass", f"{', '.join(offered)} returned under the shared names")


def check_error_bars(backend: Any, params: dict[str, Any], problem: Problem) -> CheckVerdict:
    name = "error-bars"
    if not _capabilities(backend).error_bars:
        raise Skip("the backend declares no error bars")
    result = _solve(backend, problem.with_targets(observables=[]), params)
    errors = result.energy_errors
    if errors is None or len(errors) != len(result.energies):
        return _verdict(name, problem, "fail", f"declares error bars but returned energy_errors = {errors}")
    if any(not math.isfinite(e) or e < 0 for e in errors):
        return _verdict(name, problem, "fail", f"error bars must be finite and >= 0, got {errors}")
    return _verdict(name, problem, "pass", f"{len(errors)} finite error bars")


CONTRACT_CHECKS: dict[str, Callable[..., CheckVerdict]] = {
    "refusal": check_refusal,
    "state-count": check_state_count,
    "parity-sector": check_parity_sector,
    "observables": check_observables,
    "error-bars": check_error_bars,
}


# ----------------------------------------------------------------------------- selection


def _guarded(name: str, problem: Problem | None, body: Callable[[], CheckVerdict]) -> Callable[[], CheckVerdict]:
    def run() -> CheckVerdict:
        try:
            return body()
        except Skip as exc:
            return _verdict(name, problem, "skip", str(exc))
        except BrokenContract as exc:
            return _verdict(name, problem, "fail", str(exc))
        except TaskFailed as exc:
            return _verdict(name, problem, "error", str(exc))
        except Exception as exc:  # a crash inside a check is a finding about the backend
            return _verdict(name, problem, "error", f"{exc.__class__.__name__}: {exc}")

    return run


def admitted_problems(backend: Any, params: dict[str, Any], problems: Iterable[Problem] | None = None) -> list[Problem]:
    """The candidate problems (default: ``validation.default_problems`` and, for a repulsive-only backend, the
    same at strong coupling) that the backend admits with ``params``, smallest first."""
    candidates = list(problems) if problems is not None else default_problems()
    declared = getattr(backend, "capabilities", None)
    if problems is None and isinstance(declared, Capabilities) and declared.couplings == "repulsive":
        candidates = [p.at(max(30.0, abs(p.coupling))) for p in candidates]
    found = []
    for problem in candidates:
        for point in problem.points():
            if support_of(backend, point, params):
                found.append(point)
    # smallest first; equal masses before unequal ones of the same size (cheaper for grid methods)
    return sorted(found, key=lambda p: (p.n_particles, not p.equal_masses, p.targets.states))


def quick_problems(admitted: Sequence[Problem]) -> list[Problem]:
    """The smallest admitted problem and the smallest with three or more particles (where interactions
    between more than one pair first show), each asking for at most ``QUICK_STATES`` levels."""
    chosen = list(admitted[:1])
    chosen += [p for p in admitted if p.n_particles >= 3][:1]
    return [p.with_targets(states=min(p.targets.states, QUICK_STATES)) for p in chosen]


def backend_checks(
    backend: Any,
    params: dict[str, Any] | None = None,
    tier: str = "quick",
    tolerance: CheckTolerance = CheckTolerance(),
    problems: Iterable[Problem] | None = None,
    only: Sequence[str] | None = None,
    catalogue_max_particles: int | None = None,
) -> list[BackendCheck]:
    """Every check that applies to ``backend`` (an instance or a registered name), in running order.

    ``tier`` "quick" runs at the backend's declared ``check_params`` (cheap settings; ``params`` override them)
    and keeps the physics checks to the ``quick_problems`` of the admitted default problems; "thorough" runs
    them on all, plus the references of the catalogue entries with at most ``catalogue_max_particles``
    particles (default 3 for "thorough", 0 for "quick"). Problems given explicitly are all checked, whatever
    the tier. ``only`` restricts the suite to the named checks (contract or physics).
    """
    if tier not in TIERS:
        raise ValueError(f"tier: got {tier!r}; allowed: {', '.join(TIERS)}")
    backend = registry.get(backend) if isinstance(backend, str) else backend
    params = dict(params or {})
    if tier == "quick":
        params = {**getattr(backend, "check_params", {}), **params}
    if isinstance(backend, Backend):
        params = backend.resolve_params(params)  # malformed parameters: SpecError before any work
    unknown = sorted(set(only or ()) - set(CONTRACT_CHECKS) - set(CHECKS) - {"declaration"})
    if unknown:
        raise ValueError(f"unknown check(s) {unknown}; known: declaration, {', '.join([*CONTRACT_CHECKS, *CHECKS])}")
    wanted = (lambda name: name in only) if only else (lambda name: True)
    problems = None if problems is None else list(problems)
    admitted = admitted_problems(backend, params, problems)
    runner = Runner(backend, params)
    checks = []
    if wanted("declaration"):
        checks.append(BackendCheck("declaration", "contract", None,
                                   _guarded("declaration", None, lambda: check_declaration(backend, params))))
    if admitted:
        smallest = admitted[0].with_targets(states=1)  # the contract checks ask for the states they need
        for name, function in CONTRACT_CHECKS.items():
            if wanted(name):
                checks.append(BackendCheck(name, "contract", smallest,
                                           _guarded(name, smallest, lambda f=function: f(backend, params, smallest))))
    chosen = admitted if tier == "thorough" or problems is not None else quick_problems(admitted)
    names = [name for name in CHECKS if wanted(name)]
    for problem in chosen:
        for name in names:
            checks.append(BackendCheck(name, "physics", problem,
                                       lambda n=name, p=problem: run_check(n, runner, p, tolerance)))
    limit = (3 if tier == "thorough" else 0) if catalogue_max_particles is None else catalogue_max_particles
    for entry in catalogue_entries():
        if entry.problem.n_particles <= limit and wanted("references"):
            checks.append(BackendCheck(
                "references", "physics", entry.problem,
                lambda e=entry: replace(run_check("references", runner, e.problem, tolerance), problem=e.name)))
    return checks


def run_checks(checks: Sequence[BackendCheck], progress: bool = False, budget_s: float | None = None) -> list[CheckVerdict]:
    """Run ``checks`` in order (a progress bar on stderr with ``progress``); one CheckVerdict each.

    With ``budget_s``, a check not yet started when that much wall time has passed is not run: its verdict
    is a skip that says so (a check already running is never cut short).
    """
    start = time.monotonic()
    iterator = checks
    if progress:
        from tqdm import tqdm

        iterator = tqdm(checks, desc="checks", unit="check", leave=False)
    verdicts = []
    for check in iterator:
        if budget_s is not None and time.monotonic() - start > budget_s:
            where = "-" if check.problem is None else check.problem.describe()
            verdicts.append(CheckVerdict(check.name, where, "skip",
                                    f"the time budget of {budget_s:g} s was spent; --tier thorough or --budget runs it"))
            continue
        verdicts.append(check.run())
    return verdicts


def validate(
    backend: Any,
    problems: Iterable[Problem] | None = None,
    params: dict[str, Any] | None = None,
    tolerance: CheckTolerance = CheckTolerance(),
    checks: Sequence[str] | None = None,
    catalogue_max_particles: int | None = None,
    tier: str = "quick",
    progress: bool = False,
    budget_s: float | None = None,
) -> list[CheckVerdict]:
    """The verdicts of ``backend_checks`` (what ``trapbench validate`` prints; ``budget_s`` as in
    ``run_checks``), then one "calibration" verdict per particle number whose error bars met decisive
    references (``calibration_verdicts``)."""
    suite = backend_checks(backend, params, tier, tolerance, problems, checks, catalogue_max_particles)
    verdicts = run_checks(suite, progress, budget_s)
    return verdicts + calibration_verdicts(verdicts)


def calibration_verdicts(verdicts: Sequence[CheckVerdict]) -> list[CheckVerdict]:
    """Error-bar calibration over the level comparisons of the "references" verdicts (``bench.verdicts``):
    per particle number, the share of levels with |E - ref| <= 2 error bars (fail below 95 %) and the
    median error bar / |E - ref|."""
    import pandas as pd

    from .verdicts import error_bar_calibration

    rows = [row for v in verdicts for row in v.levels]
    if not rows:
        return []
    table = error_bar_calibration(pd.DataFrame(rows))
    found = []
    for row in table.to_dict("records"):
        if not row["checked"]:
            continue
        status = "fail" if row["flag"] else "pass"
        found.append(CheckVerdict(
            "calibration", f"{row['backend']}, N = {row['N']}", status,
            f"{row['within 2 sigma']}/{row['checked']} levels within 2 error bars"
            f" ({100 * row['coverage at 2 sigma']:.0f} %, target >= 95 %); median bar/|E - ref| ="
            f" {row['median bar/abs(E - ref)']:.3g}"))
    return found


# ----------------------------------------------------------------------------- pytest helper


def check_cases(backend: Any, params: dict[str, Any] | None = None, tier: str = "quick",
                known_failures: dict[str, str] | None = None, **options: Any) -> list:
    """The checks of ``backend_checks`` as pytest parameters (ids = check ids); ``known_failures`` maps a check
    name (or a full id) to the reason it is expected to fail, which marks it xfail(strict=True)."""
    import pytest

    known = known_failures or {}
    cases = []
    for check in backend_checks(backend, params, tier, **options):
        reason = known.get(check.id) or known.get(check.name)
        marks = [pytest.mark.xfail(reason=reason, strict=True)] if reason else []
        cases.append(pytest.param(check, id=check.id, marks=marks))
    return cases


def assert_check(check: BackendCheck) -> CheckVerdict:
    """Run one check inside a test: a skip skips, a failure fails with the check's reason."""
    import pytest

    verdict = check.run()
    if verdict.status == "skip":
        pytest.skip(verdict.reason)
    assert not verdict.failed, f"{check.id}: {verdict.status}: {verdict.reason}"
    return verdict
