"""Solver-independent physics checks for any backend, and the verdict table of ``trapbench validate``.

Each check states an exact property of H = sum_s sum_i [p^2/(2 m_s) + V_s(x_i)] + g sum delta(x_up - x_down)
(units hbar = omega_ref = m0 = 1) and tests a backend's Results against it, solving extra variants
(g +- h, swapped species, g = 0, parity sectors) through the backend protocol only, so a plug-in
backend is checked exactly like a built-in one. A check whose inputs the backend does not provide
(a scalar it does not report, a problem it does not support) is skipped with the reason.

Checks (the property, and where it holds):

- ``non-interacting``: at g = 0 the levels are the oscillator towers sum_s omega_s sum_i (n_i + 1/2),
  with their parities (harmonic trap).
- ``references``: energies against ``problems.references.references_for`` (exact two-body roots,
  towers, the reference dataset's values from methods independent of the backend); a pass that rests on a
  reference looser than a tenth of the tolerance is "unverified" (the rule of ``bench.verdicts``).
- ``weak-coupling-slope``: dE0/dg at g = 0 by central differences (Richardson-extrapolated, steps h
  and h/2) against first-order perturbation theory c1 = sum_ij int phi_i^2 phi_j^2.
- ``hellmann-feynman``: the reported <sum delta> ("delta") equals dE0/dg by central differences.
- ``virial``: E = 2 <V_trap> + (g/2) dE/dg for a harmonic trap with contact interaction (from the
  scaling x -> x/L: T ~ L^-2, V ~ L^2, delta ~ L^-1, at the minimum of E(L); the exact two-body
  backend satisfies it to 1e-12 in the tests).
- ``com-tower``: with one trap frequency omega the centre of mass separates, so every level E has
  a partner at E + omega with at least the same multiplicity.
- ``parity-labels``: levels labelled even/odd in the full spectrum equal the levels of the even/odd
  sectors, and at g = 0 the labels match the exact parities (-1)^(sum of occupied n).
- ``antisymmetric-state``: for equal masses and frequencies the totally antisymmetric spatial state
  (all N particles in orbitals 0..N-1) feels no contact interaction, so E = omega N^2/2 is a level at
  every g (checked at |g|, where levels only rise from g = 0 and the state count is bounded).
- ``monotonic-bounds``: sum delta is a positive operator, so by the min-max principle every ordered
  level E_k(g) is non-decreasing in g: E_k(0) <= E_k(g) <= E_k(+inf) for g > 0 and E_k(g) <= E_k(0)
  for g < 0, with E_k(0) the oscillator towers and E_k(+inf) the hard-core levels of
  ``references_for`` (quantity "energy_g_inf"; equal masses, or 2+1 with any masses).
- ``species-swap``: relabelling up <-> down (counts, masses, frequencies) leaves the spectrum unchanged.
- ``normalization``: the ground state's densities integrate to N_s over x and its momentum
  distributions to N_s over p (the shared conventions of ``backends.result.OBSERVABLE_NAMES``); the
  momentum tail beyond the grid, 2 C / (3 p_max^3) from n_s(p) ~ C/p^4, is allowed for.
- ``contact-convention``: the reported contact equals (2 mu)^2 g^2 <sum delta> (the shared
  definition in ``backends.result.SCALAR_NAMES``), mu the reduced mass.

Tolerances: a value passes when |measured - expected| <= absolute + relative |expected| +
error_factor (backend's own error estimate for the values involved + reference uncertainty);
finite differences add error_factor * error / h. A backend that reports no error estimate is judged
at the absolute and relative tolerances alone.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..backends.base import support_of
from ..backends.result import Result
from ..problems.references import noninteracting_levels, references_for
from ..problems.spec import Problem
from .executor import UNSUPPORTED, Limits, execute
from .verdicts import reference_decides

MAX_ANTISYMMETRIC_STATES = 40
MIN_TOWER_STATES = 4  # the fewest levels that give 1+1 a tested centre-of-mass partner
DIFFERENCE_STEP = 0.02


@dataclass(frozen=True)
class CheckTolerance:
    """How close is close enough (see the module docstring)."""

    absolute: float = 1e-6
    relative: float = 1e-6
    error_factor: float = 3.0

    def allowed(self, expected: float, error: float = 0.0) -> float:
        return self.absolute + self.relative * abs(expected) + self.error_factor * error


@dataclass(frozen=True)
class CheckVerdict:
    """One check on one problem: status "pass", "fail", "skip" or "error", and why."""

    check: str
    problem: str
    status: str
    reason: str
    deviation: float | None = None
    allowed: float | None = None
    levels: tuple = ()  # per-level comparison rows of the "references" check (error-bar calibration)

    @property
    def failed(self) -> bool:
        return self.status in ("fail", "error")


class Skip(Exception):
    """The check cannot run here; the message says why."""


class TaskFailed(Exception):
    """The backend failed on a problem a check needed (its own message, e.g. "SolverError: ...")."""


class Runner:
    """Solves problems with one backend through the harness's executor, caching by problem key."""

    def __init__(self, backend: Any, params: dict[str, Any] | None = None, limits: Limits | None = None):
        self.backend = backend
        self.params = dict(params or {})
        self.limits = limits
        self._cache: dict[str, Result] = {}

    def solve(self, problem: Problem) -> Result:
        if problem.key not in self._cache:
            support = support_of(self.backend, problem, self.params)
            if not support:
                raise Skip(f"{self.backend.name} does not support {problem.describe()}: {support.reason}")
            outcome = execute(self.backend, problem, self.params, limits=self.limits)
            if outcome.status == UNSUPPORTED:
                raise Skip(outcome.error)
            if not outcome.ok:
                raise TaskFailed(outcome.error.splitlines()[0])
            self._cache[problem.key] = outcome.solved()
        return self._cache[problem.key]


# ----------------------------------------------------------------------------- helpers


def level_error(result: Result, index: int) -> float:
    """The backend's own error bar for level ``index`` (0 when it gives none)."""
    if result.energy_errors is not None and index < len(result.energy_errors):
        return abs(result.energy_errors[index])
    return abs(result.error_estimate) if result.error_estimate is not None else 0.0


def _with_states(problem: Problem, states: int, parity: str | None = None) -> Problem:
    changes = {"states": states, "observables": []}
    if parity is not None:
        changes["parity"] = parity
    return problem.with_targets(**changes)


def _compare_levels(
    measured: Result, expected: Sequence[float], tolerance: CheckTolerance, extra_errors: Sequence[float] | None = None
) -> tuple[float, float, int]:
    """Worst |E_i - expected_i| / allowed_i over the common levels: (deviation, allowed, index)."""
    worst = (0.0, tolerance.absolute, -1)
    ratio_worst = -1.0
    for i, (e, ref) in enumerate(zip(measured.energies, expected)):
        extra = extra_errors[i] if extra_errors is not None else 0.0
        allowed = tolerance.allowed(ref, level_error(measured, i) + extra)
        ratio = abs(e - ref) / allowed
        if ratio > ratio_worst:
            ratio_worst, worst = ratio, (abs(e - ref), allowed, i)
    return worst


def _derivative(runner: Runner, problem: Problem, g: float, step: float) -> tuple[float, float]:
    """dE0/dg at g by Richardson-extrapolated central differences (steps h, h/2), and its error bar."""
    values, errors = {}, []
    for h in (step, step / 2):
        for sign in (1, -1):
            result = runner.solve(_with_states(problem.at(g + sign * h), 1))
            values[sign * h] = result.energies[0]
            errors.append(level_error(result, 0))
    coarse = (values[step] - values[-step]) / (2 * step)
    fine = (values[step / 2] - values[-step / 2]) / step
    # propagated backend error: each energy enters with weight <= (4/3) / h
    return (4 * fine - coarse) / 3, max(errors) * 4 / step


def _verdict(name: str, problem: Problem, deviation: float, allowed: float, what: str) -> CheckVerdict:
    status = "pass" if deviation <= allowed else "fail"
    return CheckVerdict(name, problem.describe(), status, f"{what}: |deviation| {deviation:.2e} vs allowed {allowed:.2e}",
                   deviation, allowed)


# ----------------------------------------------------------------------------- the checks


def _skip_if_built_on(runner: Runner, route: str) -> None:
    """Skip a check whose exact value comes by a route the backend itself is built on (``capabilities.built_on``)."""
    if route in getattr(getattr(runner.backend, "capabilities", None), "built_on", ()):
        raise Skip(f"the backend is built on the route '{route}' this check compares with (capabilities.built_on)")


def check_noninteracting(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "non-interacting"
    if not problem.trap.is_harmonic:
        raise Skip("exact levels at g = 0 are known here for the harmonic trap only")
    _skip_if_built_on(runner, "oscillator-towers")
    free = _with_states(problem.at(0.0), max(problem.targets.states, 3))
    result = runner.solve(free)
    exact = noninteracting_levels(free, len(result.energies))
    deviation, allowed, index = _compare_levels(result, [e for e, _ in exact], tolerance)
    if deviation > allowed:
        return _verdict(name, problem, deviation, allowed, f"level {index} at g = 0 vs the oscillator tower")
    labels = [s.get("parity") if isinstance(s, dict) else None for s in result.states]
    if len(labels) == len(result.energies) and None not in labels:
        wrong = _parity_groups_mismatch(result.energies, labels, noninteracting_levels(free, len(exact) + 1), tolerance)
        if wrong:
            return CheckVerdict(name, problem.describe(), "fail", f"parity labels at g = 0: {wrong}")
    return _verdict(name, problem, deviation, allowed, f"{len(result.energies)} levels at g = 0 vs the oscillator tower")


def _parity_groups_mismatch(energies, labels, exact, tolerance: CheckTolerance) -> str:
    """Compare the parity labels of each complete degenerate group with the exact ones ("" if all agree).

    The levels already matched the tower rank by rank (within their error bars), so the group of exact
    levels k..l is compared with the labels of computed levels k..l. ``exact`` lists one level more than
    was computed, so that a group cut by the number of computed levels is recognised and left out.
    """
    groups: dict[float, list[int]] = {}
    for rank, (e, _) in enumerate(exact):
        groups.setdefault(round(e, 9), []).append(rank)
    for level, ranks in groups.items():
        if ranks[-1] >= min(len(energies), len(exact) - 1):  # beyond the computed levels, or possibly cut
            continue
        found = sorted(labels[r] for r in ranks)
        expected = sorted(exact[r][1] for r in ranks)
        if found != expected:
            return f"at E = {level:g} the labels are {found}, exact {expected}"
    return ""


def check_references(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    """Energies against the references that may grade this backend (never values it produced itself).

    The verdict rule of ``bench.verdicts``: a reference counts only where its uncertainty is at most a
    tenth of the tolerance it decides; a pass resting on looser references is "unverified".
    """
    name = "references"
    known = references_for(problem, for_backend=runner.backend)
    refs = sorted((r for r in known if r.quantity == "energy"), key=lambda r: r.state)
    coefficients = sorted((r for r in known if r.quantity == "K"), key=lambda r: r.state)
    if not refs and coefficients:
        return _check_strong_coupling_coefficients(runner, problem, tolerance, coefficients)
    if not refs:
        raise Skip("no reference energies are known for this problem")
    result = runner.solve(problem)
    count = min(len(refs), len(result.energies))
    deviation, allowed, index = _compare_levels(
        result, [r.value for r in refs[:count]], tolerance, [r.uncertainty for r in refs[:count]]
    )
    levels = tuple(
        {"backend": result.backend, "n_up": problem.up.count, "n_down": problem.down.count,
         "error_bar": level_error(result, i) if result.energy_errors or result.error_estimate is not None else None,
         "abs_error": abs(result.energies[i] - r.value), "ref_effective_uncertainty": r.uncertainty}
        for i, r in enumerate(refs[:count])
    )
    verdict = replace(_verdict(name, problem, deviation, allowed,
                               f"{count} levels vs {refs[0].kind} references (worst: level {index})"), levels=levels)
    loose = [i for i, r in enumerate(refs[:count]) if not reference_decides(r.uncertainty, tolerance.allowed(r.value))]
    if loose and verdict.status == "pass":
        return replace(verdict, status="unverified",
                       reason=f"levels {loose}: the reference uncertainty exceeds a tenth of the tolerance; " + verdict.reason)
    return verdict


def _check_strong_coupling_coefficients(runner: Runner, problem: Problem, tolerance: CheckTolerance, refs) -> CheckVerdict:
    """The states' "K" labels (E = E_inf - K/g) against the reference coefficients, for a backend that reports them."""
    result = runner.solve(problem)
    labels = [s.get("K") if isinstance(s, dict) else None for s in result.states]
    count = min(len(refs), len(labels))
    if not count or any(label is None for label in labels[:count]):
        raise Skip("no reference energies at this g, and the states carry no strong-coupling coefficient 'K'")
    worst = max(((abs(labels[i] - r.value), tolerance.allowed(r.value, r.uncertainty)) for i, r in enumerate(refs[:count])),
                key=lambda d: d[0] / d[1])
    return _verdict("references", problem, *worst, f"{count} strong-coupling coefficients K vs {refs[0].kind} references")


def check_weak_coupling_slope(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "weak-coupling-slope"
    _skip_if_built_on(runner, "first-order")
    slopes = [r for r in references_for(problem.at(0.0).with_targets(parity="any")) if r.quantity == "slope_g0"]
    if not slopes:
        raise Skip("first-order perturbation theory is available for the harmonic trap only")
    measured, error = _derivative(runner, problem.with_targets(parity="any"), 0.0, DIFFERENCE_STEP)
    expected = slopes[0].value
    deviation = abs(measured - expected)
    allowed = tolerance.allowed(expected, error) + abs(expected) * 1e-5  # O(h^4) remainder of the difference
    return _verdict(name, problem, deviation, allowed, f"dE0/dg at g = 0 = {measured:.8g}, first order {expected:.8g}")


def check_hellmann_feynman(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "hellmann-feynman"
    base = _with_states(problem, 1)
    result = runner.solve(base)
    if "delta" not in result.scalars:
        raise Skip(f"{result.backend} does not report the scalar 'delta' = <sum delta(x_up - x_down)>")
    g = problem.coupling
    step = DIFFERENCE_STEP * max(1.0, abs(g))
    slope, error = _derivative(runner, base, g, step)
    error += getattr(result, "scalar_errors", {}).get("delta", 0.0)
    reported = result.scalars["delta"]
    deviation = abs(reported - slope)
    allowed = tolerance.allowed(slope, error) + abs(slope) * 1e-5
    return _verdict(name, problem, deviation, allowed, f"<sum delta> = {reported:.8g}, dE0/dg = {slope:.8g}")


def check_virial(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "virial"
    if not problem.trap.is_harmonic:
        raise Skip("the virial relation E = 2<V> + (g/2) dE/dg needs a harmonic trap")
    base = _with_states(problem, 1)
    result = runner.solve(base)
    if "trap_energy" not in result.scalars:
        raise Skip(f"{result.backend} does not report the scalar 'trap_energy' = <V_trap>")
    g = problem.coupling
    scalar_errors = getattr(result, "scalar_errors", {})
    error = level_error(result, 0) + 2 * scalar_errors.get("trap_energy", 0.0)
    if "delta" in result.scalars:
        slope = result.scalars["delta"]
        error += abs(g) / 2 * scalar_errors.get("delta", 0.0)
    else:
        slope, difference_error = _derivative(runner, base, g, DIFFERENCE_STEP * max(1.0, abs(g)))
        error += abs(g) / 2 * difference_error
    predicted = 2 * result.scalars["trap_energy"] + g / 2 * slope
    deviation = abs(result.energies[0] - predicted)
    return _verdict(name, problem, deviation, tolerance.allowed(predicted, error),
                    f"E0 = {result.energies[0]:.8g}, 2<V> + (g/2) dE/dg = {predicted:.8g}")


def check_com_tower(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "com-tower"
    if not (problem.trap.is_harmonic and problem.equal_frequencies):
        raise Skip("the centre of mass separates only in a harmonic trap with one frequency")
    omega = problem.up.omega
    result = runner.solve(_with_states(problem, max(problem.targets.states, MIN_TOWER_STATES), "any"))
    energies = result.energies
    errors = [level_error(result, i) for i in range(len(energies))]
    top = energies[-1]
    tested = 0
    for i, e in enumerate(energies):
        target = e + omega
        allowed = tolerance.allowed(target, 2 * errors[i])
        if target > top - 2 * allowed:
            continue  # the partner's group may be cut off by the number of computed states
        tested += 1
        lower = sum(1 for f, err in zip(energies, errors) if abs(f - e) <= tolerance.allowed(e, errors[i] + err))
        upper = sum(1 for f, err in zip(energies, errors) if abs(f - target) <= tolerance.allowed(target, errors[i] + err))
        if upper < lower:
            return CheckVerdict(name, problem.describe(), "fail",
                           f"level {i} (E = {e:.8g}, multiplicity {lower}) has {upper} partners at E + omega = {target:.8g}")
    if not tested:
        raise Skip(f"no computed level lies one quantum below the highest one ({len(energies)} levels up to {top:.6g})")
    return CheckVerdict(name, problem.describe(), "pass", f"{tested} levels have their centre-of-mass partner at E + omega")


def check_parity_labels(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "parity-labels"
    if not problem.trap.is_symmetric:
        raise Skip("parity is not conserved in an asymmetric trap")
    full = runner.solve(_with_states(problem, problem.targets.states, "any"))
    labels = [s.get("parity") if isinstance(s, dict) else None for s in full.states]
    if len(labels) != len(full.energies) or None in labels:
        raise Skip(f"{full.backend} does not label its states with 'parity'")
    worst = (0.0, tolerance.absolute)
    for sector, sign in (("even", 1), ("odd", -1)):
        labelled = [e for e, p in zip(full.energies, labels) if p == sign]
        errors = [level_error(full, i) for i, p in enumerate(labels) if p == sign]
        if not labelled:
            continue
        part = runner.solve(_with_states(problem, len(labelled), sector))
        for i, (e, f) in enumerate(zip(labelled, part.energies)):
            allowed = tolerance.allowed(e, errors[i] + level_error(part, i))
            if abs(e - f) > allowed:
                return CheckVerdict(name, problem.describe(), "fail",
                               f"level labelled {sector} at E = {e:.8g} but the {sector} sector's level {i} is {f:.8g}",
                               abs(e - f), allowed)
            if abs(e - f) / allowed > worst[0] / worst[1]:
                worst = (abs(e - f), allowed)
    return _verdict(name, problem, *worst, "labelled levels equal the parity sectors' levels")


def check_antisymmetric_state(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "antisymmetric-state"
    if not (problem.trap.is_harmonic and problem.equal_masses and problem.equal_frequencies):
        raise Skip("the g-independent antisymmetric state needs equal masses and one harmonic frequency")
    if problem.up.count == 0 or problem.down.count == 0:
        raise Skip("with one species only, no level depends on g")
    omega, n = problem.up.omega, problem.n_particles
    target = omega * n * n / 2
    g = abs(problem.coupling) or 1.0
    free = _with_states(problem.at(0.0), MAX_ANTISYMMETRIC_STATES + 1, "any")
    needed = sum(1 for e, _ in noninteracting_levels(free) if e <= target + 1e-9)
    if needed > MAX_ANTISYMMETRIC_STATES:
        raise Skip(f"E = N^2/2 lies above the lowest {MAX_ANTISYMMETRIC_STATES} levels; too many states to compute")
    result = runner.solve(_with_states(problem.at(g), needed, "any"))
    if len(result.energies) < needed:
        raise Skip(f"{result.backend} returned {len(result.energies)} of the {needed} levels needed")
    deviations = [(abs(e - target), tolerance.allowed(target, level_error(result, i))) for i, e in enumerate(result.energies)]
    deviation, allowed = min(deviations, key=lambda d: d[0] / d[1])
    return _verdict(name, problem.at(g), deviation, allowed, f"nearest of {needed} levels to E = N^2/2 = {target:g}")


def check_monotonic_bounds(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "monotonic-bounds"
    if not problem.trap.is_harmonic:
        raise Skip("the bounding spectra are known for the harmonic trap only")
    g = problem.coupling
    if g == 0:
        raise Skip("at g = 0 the non-interacting check applies")
    result = runner.solve(problem)
    count = len(result.energies)
    lower = [e for e, _ in noninteracting_levels(problem, count)]
    upper = sorted((r for r in references_for(problem, for_backend=runner.backend) if r.quantity == "energy_g_inf"),
                   key=lambda r: r.state)
    bounds = []  # (level, bound, sign): sign * (E - bound) must be <= 0
    for i, e in enumerate(result.energies):
        bounds.append((i, lower[i], -1 if g > 0 else 1))
        if g > 0 and i < len(upper):
            bounds.append((i, upper[i].value, 1))
    worst = (0.0, tolerance.absolute)
    for i, bound, sign in bounds:
        excess = sign * (result.energies[i] - bound)
        allowed = tolerance.allowed(bound, level_error(result, i))
        if excess > allowed:
            side = "below its g = 0 value" if (sign < 0) == (g > 0) else "above its g = +inf value"
            return CheckVerdict(name, problem.describe(), "fail",
                           f"level {i} = {result.energies[i]:.8g} lies {side} {bound:.8g} by {excess:.2e}", excess, allowed)
        worst = max(worst, (max(excess, 0.0), allowed), key=lambda w: w[0] / w[1])
    what = "E(0) <= E(g) <= E(inf)" if upper and g > 0 else ("E(g) >= E(0)" if g > 0 else "E(g) <= E(0)")
    return _verdict(name, problem, *worst, f"{count} levels within {what}")


def check_species_swap(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "species-swap"
    swapped = replace(problem, up=replace(problem.down, name=problem.up.name), down=replace(problem.up, name=problem.down.name))
    if swapped.key == problem.key:
        raise Skip("the problem is symmetric under the swap; nothing to compare")
    original = runner.solve(problem)
    mirrored = runner.solve(swapped)
    count = min(len(original.energies), len(mirrored.energies))
    extra = [level_error(mirrored, i) for i in range(count)]
    deviation, allowed, index = _compare_levels(original, mirrored.energies[:count], tolerance, extra)
    return _verdict(name, problem, deviation, allowed, f"{count} levels with up and down exchanged (worst: level {index})")


NORMALIZATION_TOLERANCE = 1e-4  # relative: trapezoidal integration of smooth, decaying profiles


def check_normalization(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "normalization"
    result, reasons = None, []
    for wanted in (["density", "momentum"], ["density"], ["momentum"]):
        try:
            result = runner.solve(problem.with_targets(states=1, observables=wanted))
            break
        except Skip as exc:
            reasons.append(str(exc))
    if result is None:
        raise Skip(reasons[-1])
    counts = {"up": problem.up.count, "down": problem.down.count}
    _, p_max = problem.extent()
    tail = 2 * abs(result.scalars.get("contact", 0.0)) / (3 * p_max**3)
    tested, worst = [], (0.0, 1.0)
    for kind, axis in (("density", "x"), ("momentum", "p")):
        for species, count in counts.items():
            observable = result.observables.get(f"{kind}_{species}")
            if observable is None:
                continue
            grid = observable.axes[axis]
            integral = float(np.trapezoid(observable.values, grid))
            allowed = tolerance.allowed(count) + NORMALIZATION_TOLERANCE * count + (tail if kind == "momentum" else 0.0)
            tested.append(f"{kind}_{species}")
            if abs(integral - count) / allowed > worst[0] / worst[1]:
                worst = (abs(integral - count), allowed)
            if abs(integral - count) > allowed:
                return CheckVerdict(name, problem.describe(), "fail",
                               f"{kind}_{species} integrates to {integral:.8g}, expected N_{species} = {count}",
                               abs(integral - count), allowed)
    if not tested:
        raise Skip(f"{result.backend} returned no density_* or momentum_* observable")
    return _verdict(name, problem, *worst, f"{', '.join(tested)} integrate to N_s")


def check_contact_convention(runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    name = "contact-convention"
    result = runner.solve(_with_states(problem, 1))
    if not {"contact", "delta"} <= set(result.scalars):
        raise Skip(f"{result.backend} does not report both 'contact' and 'delta'")
    mu = problem.reduced_mass()
    expected = (2 * mu) ** 2 * problem.coupling**2 * result.scalars["delta"]
    deviation = abs(result.scalars["contact"] - expected)
    allowed = tolerance.absolute + 1e-9 * abs(expected)  # a definition: only rounding is allowed
    return _verdict(name, problem, deviation, allowed,
                    f"contact {result.scalars['contact']:.8g} vs (2 mu)^2 g^2 <sum delta> = {expected:.8g}")


CHECKS: dict[str, Callable[[Runner, Problem, CheckTolerance], CheckVerdict]] = {
    "non-interacting": check_noninteracting,
    "references": check_references,
    "weak-coupling-slope": check_weak_coupling_slope,
    "hellmann-feynman": check_hellmann_feynman,
    "virial": check_virial,
    "com-tower": check_com_tower,
    "parity-labels": check_parity_labels,
    "antisymmetric-state": check_antisymmetric_state,
    "monotonic-bounds": check_monotonic_bounds,
    "species-swap": check_species_swap,
    "normalization": check_normalization,
    "contact-convention": check_contact_convention,
}


def default_problems() -> list[Problem]:
    """Small problems that exercise every check: 1+1 and 2+1 at equal and unequal masses, both signs of g."""
    heavy = 20 / 3
    return [
        Problem.create(1, 1, 1.0, states=6, label="1+1 g=1"),
        Problem.create(1, 1, -2.0, states=6, label="1+1 g=-2"),
        Problem.create(1, 1, 2.0, mass_up=heavy, states=4, label="1+1 20:3 g=2"),
        Problem.create(2, 1, 1.5, states=4, label="2+1 g=1.5"),
        Problem.create(2, 1, 1.0, mass_up=heavy, states=3, label="2+1 20:3 g=1"),
        Problem.create(2, 1, 30.0, states=3, label="2+1 g=30"),
        Problem.create(2, 2, 2.0, states=3, label="2+2 g=2"),
    ]


def run_check(name: str, runner: Runner, problem: Problem, tolerance: CheckTolerance) -> CheckVerdict:
    """One check on one problem; skips and failures of the solver become verdicts, never exceptions."""
    try:
        return CHECKS[name](runner, problem, tolerance)
    except Skip as exc:
        return CheckVerdict(name, problem.describe(), "skip", str(exc))
    except TaskFailed as exc:  # a solver failure is a finding of the validation, reported as such
        return CheckVerdict(name, problem.describe(), "error", str(exc))
    except Exception as exc:  # so is a crash inside the check on what the backend returned
        return CheckVerdict(name, problem.describe(), "error", f"{exc.__class__.__name__}: {exc}")


def verdict_table(verdicts: Sequence[CheckVerdict]) -> str:
    """A plain-text table, one line per verdict, and a summary line."""
    width = max([len(v.problem) for v in verdicts] + [7])
    lines = [f"{'check':22s} {'problem':{width}s} {'verdict':7s} reason", "-" * (40 + width)]
    for v in verdicts:
        lines.append(f"{v.check:22s} {v.problem:{width}s} {v.status.upper():7s} {v.reason}")
    counts = {status: sum(1 for v in verdicts if v.status == status)
              for status in ("pass", "fail", "error", "unverified", "skip")}
    lines.append(", ".join(f"{count} {status}" for status, count in counts.items()))
    return "\n".join(lines)
