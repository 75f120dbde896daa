"""Reference values that any correct solver must reproduce, each with its source and uncertainty.

``references_for(problem)`` returns what is known for a single-g problem in the harmonic trap. Every
value is evaluated by ``trapbench.problems.exact`` (the formulas, sources and units are stated there);
nothing here runs a solver (a graded backend's declarations are read from the registry), and no
uncertainty is calibrated on one.

- ``energy`` of the lowest levels of the requested parity sector, only where exact:
  * non-interacting limit (g = 0, or one species empty, for which g does nothing): the oscillator
    towers, enumerated exactly with multiplicities (``exact.towers``);
  * 1+1 at any masses and any g (common omega): the roots of Busch's equation in 30-digit arithmetic
    (``exact.busch``; T. Busch et al., Found. Phys. 28, 549 (1998)).
- ``slope_g0``: dE0/dg at g = 0 for the ground state, first-order perturbation theory (``exact.first_order``).
- ``K``: the strong-coupling coefficients of E = E_inf - K/g + O(1/g^2), state k = k-th largest K in the
  sector, for g > 0:
  * equal masses and frequencies, N <= 4: eigenvalues of the spin chain whose exchange integrals J_k are
    computed by direct quadrature of their defining integral (``exact.strong_coupling_direct``), a route
    that shares no code with the ``strong-coupling`` solver (which uses the 1D reduction of
    ``exact.exchange``); the quoted uncertainty is that route's quadrature difference;
  * 2+1 (or 1+2) with unequal masses, parity "any": the wall integrals of the hard-core wedges
    (``exact.wedges``), where no two levels are degenerate at this order.
- ``energy_g_inf``: the levels at g = +inf (hard-core limit), the upper bounds of the levels at any
  finite g > 0 (each ordered level is non-decreasing in g because sum delta is a positive operator):
  fermionized towers for equal masses and frequencies (``exact.towers``), Busch's lambda -> inf limit
  for 1+1 with any masses, the hard-core wedges for 2+1 with any masses (parity "any").

Not offered: finite-g energies from the asymptotic formulas (N^2/2 - K/g near fermionization, E_inf - K/g
for the wedges, E0 + c1 g at small g). Their truncation error is O(1/g^2) (resp. O(g^2)) with a
coefficient known for 1+1 only ((1 - ln 2) K^2 from Busch's equation); for N > 2 it is not bounded, so
such a value cannot grade a method to any threshold. The exact coefficients ("K", "energy_g_inf",
"slope_g0") are given instead.

- ``energy`` from the reference dataset (``problems.dataset``, kind "computed") for 3 to 12 particles at finite g:
  values of trapbench's own independent methods admitted by the dataset's agreement rule; a backend that
  produced a value is graded only against the other methods' values (``references_for(..., for_backend=)``).

Routes (``ROUTES``): each value names the computation it comes from. A backend declares the routes its own
method is built on (``capabilities.built_on``) and the particle counts whose exact energies it takes as
input (``capabilities.calibrated_on``); ``references_for(problem, for_backend=...)`` then leaves out every
value of those routes, and every energy at those counts, because such a value shares the formula it would
grade (or is the constant calibrated on it) and the agreement would prove nothing. Where another route to
the same value exists it is offered instead: the 1+1 levels by ODE shooting of the relative problem
(``exact.relative_shooting``) for a backend built on Busch's equation.

Kinds: "exact" (closed form or exact root evaluated to ~1e-12), "derived" (a published method
evaluated here, uncertainty from its own convergence check), "published" (read from a cited table),
"recalled" (from memory; flagged as such), "computed" (the reference dataset). No published table has been copied into trapbench, so no
"published" values are given yet.
Units: hbar = omega_ref = 1, masses in m0; energies in hbar omega_ref, g in sqrt(hbar^3 omega_ref/m0).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

from . import dataset
from .exact import busch, first_order, relative_shooting, strong_coupling_direct, towers, wedges
from .spec import Problem

# The computations reference values come from; a backend built on one is never graded by it.
ROUTES = {
    "busch-roots": "roots of Busch's equation for 1+1 (exact.busch), and its lambda -> inf limit",
    "relative-shooting": "ODE shooting of the 1+1 relative problem (exact.relative_shooting)",
    "oscillator-towers": "non-interacting oscillator levels with the Pauli principle (exact.towers)",
    "first-order": "first-order perturbation theory, c1 = int rho_up rho_down dx (exact.first_order)",
    "spin-chain-quadrature": "strong-coupling K by direct quadrature of the exchange integrals (exact.strong_coupling_direct)",
    "hard-core-wedges": "2+1 hard-core wedges of the relative plane (exact.wedges)",
    "fermionization": "fermionized towers at g = +inf (exact.towers)",
    "dataset": "the shipped reference dataset (problems.dataset), graded per method family",
}

BUSCH_SOURCE = (
    "T. Busch, B.-G. Englert, K. Rzazewski, M. Wilkens, Found. Phys. 28, 549 (1998) (bibliographic details"
    " recalled); 1D form Gamma(3/4 - e/2)/Gamma(1/4 - e/2) = -lambda/2 re-derived for trapbench, roots with mpmath"
)
TOWER_SOURCE = "non-interacting oscillator levels omega_s (n + 1/2), Pauli principle (textbook result)"
FIRST_ORDER_SOURCE = "first-order perturbation theory: c1 = sum_ij int phi_i^2 phi_j^2 dx (textbook result)"
SPIN_CHAIN_SOURCE = (
    "effective spin chain: A. G. Volosniev et al., Nat. Commun. 5, 5300 (2014); F. Deuretzbacher et al.,"
    " Phys. Rev. A 90, 013611 (2014) (journal references recalled); J_k by direct nested Gauss-Legendre"
    " quadrature of their defining integral in trapbench.problems.exact.strong_coupling_direct"
)
SHOOTING_SOURCE = (
    "ODE shooting of the 1+1 relative problem with scipy's DOP853 and Brent's method (common practice, no"
    " source; e.g. Press et al., Numerical Recipes, 3rd ed. (2007), section 18.1), in"
    " trapbench.problems.exact.relative_shooting; shares nothing with Busch's equation"
)
FERMIONIZATION_SOURCE = (
    "fermionization at g = +inf: A. G. Volosniev et al., Nat. Commun. 5, 5300 (2014); F. Deuretzbacher et al.,"
    " Phys. Rev. A 90, 013611 (2014) (journal reference recalled)"
)
WEDGE_SOURCE = (
    "hard-wall wedges of the 2D relative oscillator at g = +inf, derived in trapbench.problems.exact.wedges"
    " (construction as in N. L. Harshman et al., Phys. Rev. X 7, 041001 (2017), reference recalled)"
)
# scipy.integrate.quad at epsrel 1e-13 on smooth Laguerre moments; agrees with mpmath.quad to 4e-15 (tested)
WEDGE_K_UNCERTAINTY = 1e-10


@dataclass(frozen=True)
class Reference:
    """A known value of ``quantity`` for level ``state`` (0 = lowest of the problem's parity sector)."""

    quantity: str  # "energy", "energy_g_inf", "slope_g0", "K"
    state: int
    value: float
    uncertainty: float  # absolute; 0 for exact closed forms evaluated to ~1e-12
    source: str
    kind: str  # "exact" | "published" | "derived" | "recalled" | "computed"
    note: str = ""
    methods: tuple[str, ...] = ()  # backends whose results make up a "computed" value (none for closed forms)
    route: str = ""  # the computation behind the value, a key of ROUTES


def _parity(problem: Problem) -> int | None:
    return {"any": None, "even": 1, "odd": -1}[problem.targets.parity]


# ----------------------------------------------------------------------------- Problem -> exact formula


def noninteracting_levels(problem: Problem, states: int | None = None) -> list[tuple[float, int]]:
    """The lowest ``states`` (energy, parity) levels at g = 0 in the problem's parity sector, with repeats."""
    states = problem.targets.states if states is None else states
    counts = (problem.up.count, problem.down.count)
    return towers.noninteracting_levels(counts, (problem.up.omega, problem.down.omega), states, _parity(problem))


def relative_coupling(problem: Problem) -> float:
    """lambda = g sqrt(mu / omega) of the 1+1 relative problem (common omega)."""
    return problem.coupling * math.sqrt(problem.reduced_mass() / problem.up.omega)


def two_body_levels(problem: Problem, states: int | None = None) -> list[tuple[float, int]]:
    """The lowest ``states`` (energy, parity) levels of 1+1 in the problem's parity sector (exact)."""
    states = problem.targets.states if states is None else states
    return busch.two_body_levels(relative_coupling(problem), problem.up.omega, states, _parity(problem))


def fermionized_levels(problem: Problem, states: int | None = None) -> list[float]:
    """Lowest levels at g = +inf for equal masses and frequencies, in the problem's parity sector."""
    states = problem.targets.states if states is None else states
    return towers.fermionized_levels(problem.up.count, problem.down.count, problem.up.omega, states, _parity(problem))


def wedge_spectrum(problem: Problem, states: int | None = None) -> list[wedges.WedgeLevel]:
    """Lowest levels at g = +inf of 2+1 (or 1+2), any masses, both parities, with their slopes K."""
    states = problem.targets.states if states is None else states
    pair, odd = (problem.up, problem.down) if problem.up.count == 2 else (problem.down, problem.up)
    return wedges.wedge_spectrum(pair.mass, odd.mass, problem.up.omega, states)


def wedge_levels(problem: Problem, states: int | None = None) -> list[float]:
    """Lowest levels at g = +inf of a 2+1 (or 1+2) system with any masses (parity "any")."""
    return [level.energy for level in wedge_spectrum(problem, states)]


def first_order_slope(problem: Problem) -> float:
    """c1 = dE0/dg at g = 0 (see ``exact.first_order``)."""
    up, down = problem.species
    return first_order.ground_state_slope(up.count, up.oscillator_length, down.count, down.oscillator_length)


# ----------------------------------------------------------------------------- reference assembly


def _is_two_plus_one(problem: Problem) -> bool:
    return sorted((problem.up.count, problem.down.count)) == [1, 2]


def _spin_chain_k_references(problem: Problem) -> list[Reference]:
    """K of the equal-mass spin chain by the direct-quadrature route (N <= 4)."""
    k_values, uncertainty = strong_coupling_direct.strong_coupling_k_values(
        problem.up.count, problem.down.count, _parity(problem)
    )
    note = "E = N^2/2 - K/g + O(1/g^2) in units hbar = m = omega = 1; state i = i-th largest K in the sector"
    return [
        Reference("K", i, k, uncertainty, SPIN_CHAIN_SOURCE, "derived", note, route="spin-chain-quadrature")
        for i, k in enumerate(k_values[: problem.targets.states])
    ]


def _wedge_k_references(problem: Problem) -> list[Reference]:
    """K of the 2+1 hard-core wedge levels (unequal masses, parity "any"), where none is degenerate."""
    levels = wedge_spectrum(problem)
    if any(math.isnan(level.k) for level in levels):
        return []
    return [
        Reference("K", i, level.k, WEDGE_K_UNCERTAINTY, WEDGE_SOURCE, "derived",
                  f"{level.family} wedge; E = E_inf - K sqrt(omega)/g + O(1/g^2), masses in units of m0",
                  route="hard-core-wedges")
        for i, level in enumerate(levels)
    ]


def _infinite_coupling_references(problem: Problem) -> list[Reference]:
    up, down = problem.species
    if problem.equal_masses:
        values, source, kind, route = fermionized_levels(problem), FERMIONIZATION_SOURCE, "exact", "fermionization"
    elif (up.count, down.count) == (1, 1):
        values = busch.hard_core_two_body_levels(up.omega, problem.targets.states, _parity(problem))
        source, kind, route = BUSCH_SOURCE + "; limit lambda -> inf", "exact", "busch-roots"
    elif _is_two_plus_one(problem) and problem.targets.parity == "any":
        values, source, kind, route = wedge_levels(problem), WEDGE_SOURCE, "derived", "hard-core-wedges"
    else:
        return []
    note = "levels at g = +inf; every level at finite g > 0 lies at or below its g = inf counterpart"
    return [Reference("energy_g_inf", i, float(v), 0.0, source, kind, note, route=route) for i, v in enumerate(values)]


def references_for(problem: Problem, for_backend=None) -> list[Reference]:
    """Every reference value trapbench knows for this single-g problem (empty if none) that may grade
    ``for_backend``.

    ``for_backend`` is the backend to be graded (its name, or the backend object itself), or None for every
    value. For a backend, a "computed" value of the reference dataset is the value of the methods independent
    of it (``dataset.DatasetLevel.reference_for``) or left out; values of the routes it is built on
    (``capabilities.built_on``) are left out, the 1+1 levels then coming by ODE shooting instead of Busch's
    equation; at the particle counts it is calibrated on (``capabilities.calibrated_on``) no energy and no
    strong-coupling coefficient is offered. A name is looked up in the backend registry; a backend that
    is not installed declares nothing.
    """
    name, built_on, _ = _declarations(for_backend)
    g = problem.coupling
    if not problem.trap.is_harmonic:
        return []
    up, down = problem.species
    refs: list[Reference] = []
    exact_energies = g == 0.0 or up.count == 0 or down.count == 0 or (up.count == 1 and down.count == 1)
    if not exact_energies:
        refs += dataset_references(problem, name)
    if g == 0.0 or up.count == 0 or down.count == 0:
        refs += [
            Reference("energy", i, e, 0.0, TOWER_SOURCE, "exact", "g = 0 or one species empty: no interaction acts",
                      route="oscillator-towers")
            for i, (e, _) in enumerate(noninteracting_levels(problem))
        ]
    elif up.count == 1 and down.count == 1 and problem.equal_frequencies:
        refs += _two_body_references(problem, shooting="busch-roots" in built_on)
    ground_parity = (-1) ** (up.count * (up.count - 1) // 2 + down.count * (down.count - 1) // 2)
    if problem.targets.parity in ("any", {1: "even", -1: "odd"}[ground_parity]):
        refs.append(Reference("slope_g0", 0, first_order_slope(problem), 0.0, FIRST_ORDER_SOURCE, "exact",
                              "dE0/dg at g = 0; independent of the problem's g", route="first-order"))
    if problem.equal_frequencies and up.count and down.count and g > 0:
        if problem.equal_masses and problem.n_particles <= strong_coupling_direct.MAX_PARTICLES:
            refs += _spin_chain_k_references(problem)
        if not problem.equal_masses and _is_two_plus_one(problem) and problem.targets.parity == "any":
            refs += _wedge_k_references(problem)
        refs += _infinite_coupling_references(problem)
    refs = [r for r in refs if r.route not in built_on]
    if is_calibrated_on(problem, for_backend):
        refs = [r for r in refs if r.quantity not in ("energy", "K")]
    return refs


def is_calibrated_on(problem: Problem, for_backend) -> bool:
    """Whether ``for_backend`` takes this problem's exact energies as input (``capabilities.calibrated_on``,
    at g != 0): then no energy may grade it here, from any route or store."""
    return problem.coupling != 0.0 and (problem.up.count, problem.down.count) in _declarations(for_backend)[2]


def _two_body_references(problem: Problem, shooting: bool) -> list[Reference]:
    """The 1+1 levels: Busch's roots, or (``shooting``) the same levels by ODE shooting."""
    lam = relative_coupling(problem)
    note = (f"relative coupling lambda = g sqrt(mu/omega) = {lam:.12g}; total energy including the centre of"
            " mass (n_cm + 1/2) omega")
    if shooting:
        levels = relative_shooting.two_body_levels(lam, problem.up.omega, problem.targets.states, _parity(problem))
        return [Reference("energy", i, e, relative_shooting.UNCERTAINTY, SHOOTING_SOURCE, "derived", note,
                          route="relative-shooting") for i, (e, _) in enumerate(levels)]
    return [Reference("energy", i, e, 0.0, BUSCH_SOURCE, "exact", note, route="busch-roots")
            for i, (e, _) in enumerate(two_body_levels(problem))]


def _declarations(backend) -> tuple[str | None, frozenset[str], frozenset[tuple[int, int]]]:
    """(name, routes built on, particle counts calibrated on) of the backend to be graded."""
    if backend is None:
        return None, frozenset(), frozenset()
    if isinstance(backend, str):
        return (backend, *_registered_declarations(backend))
    capabilities = getattr(backend, "capabilities", None)
    return (getattr(backend, "name", None), frozenset(getattr(capabilities, "built_on", ())),
            frozenset(tuple(c) for c in getattr(capabilities, "calibrated_on", ())))


@lru_cache(maxsize=64)
def _registered_declarations(name: str) -> tuple[frozenset[str], frozenset[tuple[int, int]]]:
    from ..backends import registry  # the registry reads entry points; no solver runs here

    try:
        backend = registry.get(name)
    except (registry.UnknownBackend, ImportError):
        return frozenset(), frozenset()
    return _declarations(backend)[1:]


def dataset_references(problem: Problem, for_backend: str | None = None) -> list[Reference]:
    """Energies of the shipped reference dataset (``problems.dataset``) for this problem, parity "any" only."""
    if problem.targets.parity != "any":
        return []
    data = dataset.load()
    entry = data.lookup(problem)
    if entry is None:
        return []
    refs = []
    for level in entry.levels:
        if level.state >= problem.targets.states:
            continue
        graded = level.reference_for(for_backend)
        if graded is None:
            continue
        value, uncertainty, methods = graded
        refs.append(Reference(
            "energy", level.state, value, uncertainty, f"{dataset.SOURCE} v{data.version} ({', '.join(methods)})",
            "computed", f"{level.status}: {level.note}", methods, route="dataset"))
    return refs
