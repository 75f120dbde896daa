"""Reference values that any correct solver must reproduce, each with its source and uncertainty.

``references_for(problem)`` returns what is known for a single-g problem in the harmonic trap. Every
value is evaluated by ``trapbench.problems.exact`` (the formulas, sources and units are stated there);
nothing here imports a solver, and no uncertainty is calibrated on one.

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

Kinds: "exact" (closed form or exact root evaluated to ~1e-12), "derived" (a published method
evaluated here, uncertainty from its own convergence check), "published" (read from a cited table),
"recalled" (from memory; flagged as such), "computed" (the reference dataset). No published table has been copied into trapbench, so no
"published" values are given yet.
Units: hbar = omega_ref = 1, masses in m0; energies in hbar omega_ref, g in sqrt(hbar^3 omega_ref/m0).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from . import dataset
from .exact import busch, first_order, strong_coupling_direct, towers, wedges
from .spec import Problem

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
        Reference("K", i, k, uncertainty, SPIN_CHAIN_SOURCE, "derived", note)
        for i, k in enumerate(k_values[: problem.targets.states])
    ]


def _wedge_k_references(problem: Problem) -> list[Reference]:
    """K of the 2+1 hard-core wedge levels (unequal masses, parity "any"), where none is degenerate."""
    levels = wedge_spectrum(problem)
    if any(math.isnan(level.k) for level in levels):
        return []
    return [
        Reference("K", i, level.k, WEDGE_K_UNCERTAINTY, WEDGE_SOURCE, "derived",
                  f"{level.family} wedge; E = E_inf - K sqrt(omega)/g + O(1/g^2), masses in units of m0")
        for i, level in enumerate(levels)
    ]


def _infinite_coupling_references(problem: Problem) -> list[Reference]:
    up, down = problem.species
    if problem.equal_masses:
        values, source, kind = fermionized_levels(problem), FERMIONIZATION_SOURCE, "exact"
    elif (up.count, down.count) == (1, 1):
        values = busch.hard_core_two_body_levels(up.omega, problem.targets.states, _parity(problem))
        source, kind = BUSCH_SOURCE + "; limit lambda -> inf", "exact"
    elif _is_two_plus_one(problem) and problem.targets.parity == "any":
        values, source, kind = wedge_levels(problem), WEDGE_SOURCE, "derived"
    else:
        return []
    note = "levels at g = +inf; every level at finite g > 0 lies at or below its g = inf counterpart"
    return [Reference("energy_g_inf", i, float(v), 0.0, source, kind, note) for i, v in enumerate(values)]


def references_for(problem: Problem, for_backend: str | None = None) -> list[Reference]:
    """Every reference value trapbench knows for this single-g problem (empty if none).

    ``for_backend`` names the backend to be graded: a "computed" value of the reference dataset is then the
    value of the methods independent of it (``dataset.DatasetLevel.reference_for``), or left out.
    """
    g = problem.coupling
    if not problem.trap.is_harmonic:
        return []
    up, down = problem.species
    refs: list[Reference] = []
    exact_energies = g == 0.0 or up.count == 0 or down.count == 0 or (up.count == 1 and down.count == 1)
    if not exact_energies:
        refs += dataset_references(problem, for_backend)
    if g == 0.0 or up.count == 0 or down.count == 0:
        refs += [
            Reference("energy", i, e, 0.0, TOWER_SOURCE, "exact", "g = 0 or one species empty: no interaction acts")
            for i, (e, _) in enumerate(noninteracting_levels(problem))
        ]
    elif up.count == 1 and down.count == 1 and problem.equal_frequencies:
        note = (f"relative coupling lambda = g sqrt(mu/omega) = {relative_coupling(problem):.12g}; total energy"
                " including the centre of mass (n_cm + 1/2) omega")
        refs += [
            Reference("energy", i, e, 0.0, BUSCH_SOURCE, "exact", note)
            for i, (e, _) in enumerate(two_body_levels(problem))
        ]
    ground_parity = (-1) ** (up.count * (up.count - 1) // 2 + down.count * (down.count - 1) // 2)
    if problem.targets.parity in ("any", {1: "even", -1: "odd"}[ground_parity]):
        refs.append(Reference("slope_g0", 0, first_order_slope(problem), 0.0, FIRST_ORDER_SOURCE, "exact",
                              "dE0/dg at g = 0; independent of the problem's g"))
    if not (problem.equal_frequencies and up.count and down.count and g > 0):
        return refs
    if problem.equal_masses and problem.n_particles <= strong_coupling_direct.MAX_PARTICLES:
        refs += _spin_chain_k_references(problem)
    if not problem.equal_masses and _is_two_plus_one(problem) and problem.targets.parity == "any":
        refs += _wedge_k_references(problem)
    refs += _infinite_coupling_references(problem)
    return refs


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
            "computed", f"{level.status}: {level.note}", methods))
    return refs
