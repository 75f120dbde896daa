"""Reference values that any correct solver must reproduce, each with its source and uncertainty.

``references_for(problem)`` returns what is known for a single-g problem in the harmonic trap:

- ``energy`` of the lowest levels of the requested parity sector:
  * non-interacting limit (g = 0, or one species empty, for which g does nothing): the oscillator
    towers E = sum_s omega_s sum_i (n_i + 1/2), enumerated exactly with multiplicities;
  * 1+1 at any masses and any g (same omega for both species): the exact solution of Busch et al.,
    Found. Phys. 28, 549 (1998), in its 1D form (derived here): the even relative levels e solve
        1/Gamma(1/4 - e/2) + (lambda/2) / Gamma(3/4 - e/2) = 0,   lambda = g sqrt(mu / omega),
    (the entire-function form of Gamma(3/4 - e/2)/Gamma(1/4 - e/2) = -lambda/2), odd relative levels
    are e = 3/2 + 2n, and E = omega (n_cm + 1/2 + e). Roots are found with mpmath to 30 digits;
  * equal masses and frequencies at large repulsive g: the strong-coupling asymptote
    E = omega (N^2/2 - K/g~), g~ = g sqrt(m/omega), with the K of the effective spin chain
    (``backends.spin_chain``). The neglected O(1/g~^2) term is NOT known for N > 2; for 1+1 its
    coefficient is (1 - ln 2) K^2 (expanding Busch's equation), so the uncertainty quoted is the
    estimate K^2/g~^2 (about three times the 1+1 coefficient); it is an estimate, not a bound.
  * 2+1 (or 1+2) with unequal masses at large repulsive g: E = E_inf - K sqrt(omega)/g from the
    hard-core wedges and the leakage through their walls (``wedge_spectrum``), with the estimate
    3 K^2/g^2 for the neglected term (calibrated against exact diagonalization, see WEDGE_STRONG_COUPLING_C2).
- ``slope_g0``: dE0/dg at g = 0 for the ground state, first-order perturbation theory,
  c1 = sum_{i < N_up} sum_{j < N_down} int phi_i^up(x)^2 phi_j^down(x)^2 dx (the non-interacting ground
  state of each species is one Slater determinant, so the first order is non-degenerate).
- ``K``: the strong-coupling coefficients themselves, state k = k-th largest K in the sector.
- ``energy_g_inf``: the levels at g = +inf (hard-core limit), the upper bounds of the levels at any
  finite g > 0 (each ordered level is non-decreasing in g because sum delta is a positive operator):
  * equal masses and frequencies: each level of N spinless fermions, omega (N^2/2 + q), repeated once
    per spin ordering, C(N, N_up) times (fermionization; Volosniev et al. 2014, Deuretzbacher et al. 2014);
    in a parity sector the orderings split by chain reversal R into (C +- P)/2 (P palindromic
    orderings), the state's parity being that of the spinless level times R;
  * 2+1 (or 1+2) with unequal masses, parity "any": in mass-scaled Jacobi coordinates the coincidence
    lines of the odd particle with the pair cut the relative plane into wedges; a 2D oscillator in a
    wedge of angle theta with hard walls has E_rel = omega (2 n + k pi/theta + 1). The two wedges with
    the odd particle outside (angle 2 theta_o) allow only modes odd about their bisector (the pair's
    antisymmetry), k even; the two wedges with the odd particle inside (angle theta_i each) are
    exchanged by the pair's antisymmetry and give one state per mode. The angles follow from the
    normals of x_i = x_j in mass-scaled coordinates: for particle j between i and k the sector angle
    is arccos sqrt(m_i m_k / ((m_i + m_j)(m_j + m_k))). (Derived here; the construction is that of
    e.g. Harshman et al., Phys. Rev. X 7, 041001 (2017), reference recalled.) For equal masses all
    sectors have angle pi/3 and the fermionized spectrum is recovered.

Kinds: "exact" (closed form or exact root evaluated to ~1e-12), "derived" (a published method
evaluated here), "published" (read from a cited table), "recalled" (from memory; flagged as such).
No published table has been copied into trapbench, so no "published" values are given yet.
Units: hbar = omega_ref = 1, masses in m0; energies in hbar omega_ref, g in sqrt(hbar^3 omega_ref/m0).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import mpmath
import numpy as np

from .spec import Problem

BUSCH_SOURCE = (
    "T. Busch, B.-G. Englert, K. Rzazewski, M. Wilkens, Found. Phys. 28, 549 (1998) (bibliographic details"
    " recalled); 1D form Gamma(3/4 - e/2)/Gamma(1/4 - e/2) = -lambda/2 re-derived for trapbench"
)
TOWER_SOURCE = "non-interacting oscillator levels omega_s (n + 1/2), Pauli principle (textbook result)"
FIRST_ORDER_SOURCE = "first-order perturbation theory: c1 = sum_ij int phi_i^2 phi_j^2 dx (textbook result)"
SPIN_CHAIN_SOURCE = (
    "effective spin chain: A. G. Volosniev et al., Nat. Commun. 5, 5300 (2014); F. Deuretzbacher et al.,"
    " Phys. Rev. A 90, 013611 (2014) (journal reference recalled); J. Levinsen et al., Sci. Adv. 1, e1500197"
    " (2015) (journal reference recalled); J_k evaluated in trapbench.backends.spin_chain"
)
# Estimated relative size of the neglected O(1/g^2) term: |c2| <= STRONG_COUPLING_C2 * K^2 (see docstring).
# Calibration: 1+1 exact (1 - ln 2) = 0.31; 2+1 equal masses from oscillator-ed at g = 20-40, 0.17 +- 0.05.
STRONG_COUPLING_C2 = 1.0
# The same for 2+1 with unequal masses, calibrated on oscillator-ed at g = 15-30: c2/K^2 = 2.0 +- 0.6 for
# a heavy pair (40/6 : 1, K = 0.76) and 0.2 for a light pair (6/40 : 1, K = 3.5); mass ratios outside
# that range are not calibrated.
WEDGE_STRONG_COUPLING_C2 = 3.0
# Energy asymptotes are offered only where the whole manifold stays well separated: g~ >= this * K_max.
STRONG_COUPLING_MIN_RATIO = 2.0
BUSCH_DIGITS = 30
BISECTION_STEPS = 110  # brackets are < 2^10 wide; 2^-100 leaves ~1e-27


@dataclass(frozen=True)
class Reference:
    """A known value of ``quantity`` for level ``state`` (0 = lowest of the problem's parity sector)."""

    quantity: str  # "energy", "slope_g0", "K"
    state: int
    value: float
    uncertainty: float  # absolute; 0 for exact closed forms evaluated to ~1e-12
    source: str
    kind: str  # "exact" | "published" | "derived" | "recalled"
    note: str = ""


# ----------------------------------------------------------------------------- non-interacting towers


@lru_cache(maxsize=None)
def _partition_counts(n_particles: int, max_quanta: int) -> tuple[int, ...]:
    """Number of ways to put q quanta on n fermions above their ground state = partitions of q into <= n parts."""
    counts = [1] + [0] * max_quanta
    for part in range(1, n_particles + 1):
        for q in range(part, max_quanta + 1):
            counts[q] += counts[q - part]
    return tuple(counts) if n_particles > 0 else tuple([1] + [0] * max_quanta)


def noninteracting_levels(problem: Problem, states: int | None = None) -> list[tuple[float, int]]:
    """The lowest ``states`` (energy, parity) levels at g = 0 in the problem's parity sector, with repeats.

    E = sum_s omega_s (N_s^2/2 + q_s), parity (-1)^(sum_s N_s (N_s - 1)/2 + q_s), multiplicity the
    number of partitions of q_s into at most N_s parts.
    """
    states = problem.targets.states if states is None else states
    wanted = {"any": None, "even": 1, "odd": -1}[problem.targets.parity]
    (up, down) = problem.species
    base = sum(s.omega * s.count**2 / 2 for s in (up, down))
    parity0 = (-1) ** (up.count * (up.count - 1) // 2 + down.count * (down.count - 1) // 2)
    max_quanta = 4
    while True:
        counts = [_partition_counts(s.count, max_quanta) for s in (up, down)]
        cut = base + min(s.omega if s.count else math.inf for s in (up, down)) * (max_quanta + 1)
        levels = []
        for q_up, m_up in enumerate(counts[0]):
            for q_down, m_down in enumerate(counts[1]):
                energy = base + up.omega * q_up + down.omega * q_down
                parity = parity0 * (-1) ** (q_up + q_down)
                if m_up * m_down and energy < cut and wanted in (None, parity):
                    levels += [(energy, parity)] * (m_up * m_down)
        levels.sort(key=lambda level: level[0])
        if len(levels) >= states:
            return levels[:states]
        max_quanta *= 2


# ----------------------------------------------------------------------------- two-body (Busch)


def _busch_function(e, lam):
    return mpmath.rgamma(0.25 - e / 2) + (lam / 2) * mpmath.rgamma(0.75 - e / 2)


@lru_cache(maxsize=4096)
def busch_even_level(lam: float, branch: int) -> float:
    """The ``branch``-th even relative level e (0 = lowest) of -1/2 d^2/dy^2 + y^2/2 + lam delta(y)."""
    with mpmath.workdps(BUSCH_DIGITS):
        lam_mp = mpmath.mpf(lam)
        upper = mpmath.mpf(1.5) + 2 * branch
        lower = upper - 2 if branch > 0 else min(mpmath.mpf(-0.5), -lam_mp**2 / 2 - 2)
        f_lower, f_upper = _busch_function(lower, lam_mp), _busch_function(upper, lam_mp)
        if f_lower * f_upper > 0:
            raise ArithmeticError(f"no sign change of Busch's function on [{lower}, {upper}] for lambda = {lam}")
        # bisection: the function is entire and changes sign exactly once on the bracket
        for _ in range(BISECTION_STEPS):
            middle = (lower + upper) / 2
            f_middle = _busch_function(middle, lam_mp)
            if f_middle * f_lower > 0:
                lower, f_lower = middle, f_middle
            else:
                upper = middle
        return float((lower + upper) / 2)


def two_body_levels(problem: Problem, states: int | None = None) -> list[tuple[float, int]]:
    """The lowest ``states`` (energy, parity) levels of 1+1 in the problem's parity sector (exact)."""
    states = problem.targets.states if states is None else states
    wanted = {"any": None, "even": 1, "odd": -1}[problem.targets.parity]
    omega = problem.up.omega
    lam = problem.coupling * math.sqrt(problem.reduced_mass() / omega)
    ladder = states + 2
    relative = [(busch_even_level(lam, n), 1) for n in range(ladder)] + [(1.5 + 2 * n, -1) for n in range(ladder)]
    levels = [
        (omega * (n_cm + 0.5 + e), (-1) ** n_cm * parity)
        for n_cm in range(ladder)
        for e, parity in relative
        if wanted in (None, (-1) ** n_cm * parity)
    ]
    levels.sort(key=lambda level: level[0])
    return levels[:states]


# ----------------------------------------------------------------------------- g = +infinity

FERMIONIZATION_SOURCE = (
    "fermionization at g = +inf: A. G. Volosniev et al., Nat. Commun. 5, 5300 (2014); F. Deuretzbacher et al.,"
    " Phys. Rev. A 90, 013611 (2014) (journal reference recalled)"
)
WEDGE_SOURCE = (
    "hard-wall wedges of the 2D relative oscillator at g = +inf, derived in trapbench.problems.references"
    " (construction as in N. L. Harshman et al., Phys. Rev. X 7, 041001 (2017), reference recalled)"
)


def _palindromes(n: int, n_up: int) -> int:
    """Number of spin orderings of n_up ups among n sites that read the same backwards."""
    if n % 2 == 0:
        return math.comb(n // 2, n_up // 2) if n_up % 2 == 0 else 0
    return math.comb((n - 1) // 2, (n_up - 1) // 2 if n_up % 2 else n_up // 2)


def fermionized_levels(problem: Problem, states: int | None = None) -> list[float]:
    """Lowest levels at g = +inf for equal masses and frequencies, in the problem's parity sector."""
    states = problem.targets.states if states is None else states
    wanted = {"any": None, "even": 1, "odd": -1}[problem.targets.parity]
    n, n_up, omega = problem.n_particles, problem.up.count, problem.up.omega
    total = math.comb(n, n_up)
    palindromes = _palindromes(n, n_up)
    reversal_count = {1: (total + palindromes) // 2, -1: (total - palindromes) // 2}
    levels: list[float] = []
    max_quanta = 0
    while len(levels) < states:
        counts = _partition_counts(n, max_quanta)
        q = max_quanta
        spinless_parity = (-1) ** (n * (n - 1) // 2 + q)
        copies = counts[q] * (total if wanted is None else reversal_count[wanted * spinless_parity])
        levels += [omega * (n * n / 2 + q)] * copies
        max_quanta += 1
    return levels[:states]


@dataclass(frozen=True)
class WedgeLevel:
    """One level of 2+1 at g = +inf: energy, its 1/g coefficient K (E = E_inf - K sqrt(omega)/g), family."""

    energy: float
    k: float
    family: str  # "outside" (odd particle left or right of the pair) or "inside" (odd particle in the middle)


def _wedge_wall_integral(theta: float, nu: float, radial: int) -> float:
    """int_0^inf |(1/rho) d psi/d phi|^2 d rho on one wall, psi normalized in a wedge of angle theta.

    psi = N rho^nu L_n^nu(rho^2) exp(-rho^2/2) sin(nu phi); with t = rho^2 the integrals are
    Gamma-weighted Laguerre moments, done by scipy.integrate.quad.
    """
    from scipy import integrate, special

    def moment(power: float) -> float:
        value, _ = integrate.quad(lambda t: t**power * special.eval_genlaguerre(radial, nu, t) ** 2 * math.exp(-t),
                                  0, math.inf, limit=200, epsabs=0, epsrel=1e-13)
        return value / 2

    norm2 = 1.0 / (theta / 2 * moment(nu))  # int rho^(2 nu + 1) L^2 e^(-rho^2) d rho = moment(nu)
    return norm2 * nu * nu * moment(nu - 1.5)


def wedge_spectrum(problem: Problem, states: int | None = None) -> list[WedgeLevel]:
    """Lowest levels at g = +inf of 2+1 (or 1+2), any masses, with their strong-coupling slopes K.

    Near g = +inf a hard wall of the relative plane turns into a delta line of strength g sqrt(mu)
    (mu = reduced mass of the pair member and the odd particle, units of m0); to first order the
    wave function leaks as psi(wall) = (d psi/d s)/(2 g sqrt(mu)), and Hellmann-Feynman integrated
    from g to inf gives E = E_inf - K/g with K = sum over walls of int |d psi/d s|^2 / (4 sqrt(mu)).
    A state of one wedge (or the antisymmetric pair of inside wedges) touches its walls only, and
    levels of different families do not mix at this order unless they are degenerate (then K is
    reported as NaN; the centre of mass is untouched by the walls, so only levels with the same
    centre-of-mass quantum number can mix). For equal masses K reduces to the diagonal elements of
    the spin chain.
    """
    states = problem.targets.states if states is None else states
    pair, odd = (problem.up, problem.down) if problem.up.count == 2 else (problem.down, problem.up)
    big, small = pair.mass, odd.mass
    mu = big * small / (big + small)
    theta_outside = math.acos(math.sqrt(small * big / ((small + big) * 2 * big)))  # a pair member in the middle
    theta_inside = math.acos(big / (big + small))  # the odd particle in the middle
    ladder = states + 2
    # (family, wedge angle, exponent nu, copies): outside wedges have angle 2 theta_o and only modes odd
    # about their bisector (the pair's antisymmetry), nu = j pi / theta_o; the two inside wedges give
    # one antisymmetric state per mode, nu = k pi / theta_i
    modes = [("outside", 2 * theta_outside, j * math.pi / theta_outside, 2) for j in range(1, ladder + 1)]
    modes += [("inside", theta_inside, k * math.pi / theta_inside, 1) for k in range(1, ladder + 1)]
    omega = problem.up.omega
    candidates = []
    for family, theta, nu, copies in modes:
        for radial in range(ladder):
            relative = 2 * radial + nu + 1
            for com in range(ladder):
                candidates.append((relative + com + 0.5, family, theta, nu, radial, copies, com))
    candidates.sort()
    chosen = []
    for candidate in candidates:
        chosen += [candidate] * candidate[5]
        if len(chosen) >= states:
            break
    levels = []
    for energy, family, theta, nu, radial, _, com in chosen[:states]:
        # the walls act on the relative motion only: states mix if they share the centre-of-mass quantum
        # number and the energy but are different relative modes
        mixed = any(abs(c[0] - energy) < 1e-9 and c[6] == com and (c[1], c[3], c[4]) != (family, nu, radial)
                    for c in candidates)
        k = math.nan if mixed else 2 * _wedge_wall_integral(theta, nu, radial) / (4 * math.sqrt(mu))
        levels.append(WedgeLevel(omega * energy, k, family))
    return levels


def wedge_levels(problem: Problem, states: int | None = None) -> list[float]:
    """Lowest levels at g = +inf of a 2+1 (or 1+2) system with any masses (parity "any"); see the docstring."""
    return [level.energy for level in wedge_spectrum(problem, states)]


def _wedge_strong_coupling_references(problem: Problem) -> list[Reference]:
    """E = E_inf - K sqrt(omega)/g for 2+1 with unequal masses, where g is large against K."""
    omega = problem.up.omega
    g_scaled = problem.coupling / math.sqrt(omega)
    levels = wedge_spectrum(problem)
    if any(math.isnan(level.k) for level in levels) or g_scaled < STRONG_COUPLING_MIN_RATIO * max(l.k for l in levels):
        return []
    refs = []
    for i, level in enumerate(levels):
        refs.append(Reference("K", i, level.k, 1e-10, WEDGE_SOURCE, "derived",
                              f"{level.family} wedge; E = E_inf - K sqrt(omega)/g + O(1/g^2), masses in units of m0"))
        refs.append(Reference(
            "energy", i, level.energy - omega * level.k / g_scaled,
            omega * WEDGE_STRONG_COUPLING_C2 * level.k**2 / g_scaled**2,
            WEDGE_SOURCE, "derived",
            f"asymptote E_inf - K/g at g = {problem.coupling:.6g}; the uncertainty 3 K^2/g^2 estimates the neglected"
            " O(1/g^2) term (calibrated on exact diagonalization for mass ratios 40/6 and 6/40), it is not a bound"))
    return refs


def _infinite_coupling_references(problem: Problem) -> list[Reference]:
    up, down = problem.species
    if problem.equal_masses:
        values, source, kind = fermionized_levels(problem), FERMIONIZATION_SOURCE, "exact"
    elif (up.count, down.count) == (1, 1):
        # Busch's even relative levels tend to e = 3/2 + 2n and join the odd ones, for any masses: each
        # E = omega (n_cm + 2 + 2n) holds one state of each parity
        copies = 2 if problem.targets.parity == "any" else 1
        ladder = problem.targets.states + 1
        values = sorted(up.omega * (n_cm + 2 + 2 * n) for n_cm in range(ladder) for n in range(ladder) for _ in range(copies))
        values = values[: problem.targets.states]
        source, kind = BUSCH_SOURCE + "; limit lambda -> inf", "exact"
    elif sorted((up.count, down.count)) == [1, 2] and problem.targets.parity == "any":
        values, source, kind = wedge_levels(problem), WEDGE_SOURCE, "derived"
    else:
        return []
    note = "levels at g = +inf; every level at finite g > 0 lies at or below its g = inf counterpart"
    return [Reference("energy_g_inf", i, float(v), 0.0, source, kind, note) for i, v in enumerate(values)]


# ----------------------------------------------------------------------------- first order


def first_order_slope(problem: Problem) -> float:
    """c1 = dE0/dg at g = 0: sum over occupied orbitals of int phi_i^up(x)^2 phi_j^down(x)^2 dx.

    Orbitals of width b_s = 1/sqrt(m_s omega_s); the integrand is a polynomial times
    exp(-(1/b_up^2 + 1/b_down^2) x^2), integrated exactly by Gauss-Hermite quadrature.
    """
    from ..backends.spin_chain import oscillator_orbitals

    up, down = problem.species
    if up.count == 0 or down.count == 0:
        return 0.0
    alpha = 1.0 / up.oscillator_length**2 + 1.0 / down.oscillator_length**2
    u, w = np.polynomial.hermite.hermgauss(up.count + down.count + 4)
    x = u / math.sqrt(alpha)
    densities = []
    for s in (up, down):
        b = s.oscillator_length
        phi, _ = oscillator_orbitals(s.count, x / b)
        # phi(x/b)^2 / b without its Gaussian factor exp(-x^2/b^2), which the quadrature weight carries
        densities.append(np.sum(phi**2, axis=0) * np.exp((x / b) ** 2) / b)
    return float(np.sum(w * densities[0] * densities[1]) / math.sqrt(alpha))


# ----------------------------------------------------------------------------- assembly


def _strong_coupling_references(problem: Problem) -> list[Reference]:
    from ..backends.spin_chain import spin_chain_spectrum

    up = problem.up
    spectrum = spin_chain_spectrum(up.count, problem.down.count)
    wanted = {"any": None, "even": 1, "odd": -1}[problem.targets.parity]
    k_values = [k for k, p in zip(spectrum.k_values, spectrum.spatial_parity) if wanted in (None, p)]
    k_values = k_values[: problem.targets.states]
    n = problem.n_particles
    omega = up.omega
    g_scaled = problem.coupling * math.sqrt(up.mass / omega)
    refs = [
        Reference(
            "K",
            i,
            float(k),
            10 * spectrum.couplings.convergence + 1e-12,
            SPIN_CHAIN_SOURCE,
            "derived",
            "E = N^2/2 - K/g + O(1/g^2) in units hbar = m = omega = 1; state i = i-th largest K in the sector",
        )
        for i, k in enumerate(k_values)
    ]
    exact_two_body = up.count == 1 and problem.down.count == 1
    if not exact_two_body and g_scaled > 0 and g_scaled >= STRONG_COUPLING_MIN_RATIO * max(spectrum.k_values):
        refs += [
            Reference(
                "energy",
                i,
                float(omega * (n * n / 2 - k / g_scaled)),
                float(omega * STRONG_COUPLING_C2 * k * k / g_scaled**2),
                SPIN_CHAIN_SOURCE,
                "derived",
                f"asymptote N^2/2 - K/g at g = {g_scaled:.6g} (units of the species); the uncertainty K^2/g^2 is an"
                " estimate of the neglected O(1/g^2) term (its coefficient is (1 - ln 2) K^2 for 1+1), not a bound",
            )
            for i, k in enumerate(k_values)
        ]
    return refs


def references_for(problem: Problem) -> list[Reference]:
    """Every reference value trapbench knows for this single-g problem (empty if none)."""
    g = problem.coupling
    if not problem.trap.is_harmonic:
        return []
    up, down = problem.species
    refs: list[Reference] = []
    free = g == 0.0 or up.count == 0 or down.count == 0
    if free:
        refs += [
            Reference("energy", i, e, 0.0, TOWER_SOURCE, "exact", "g = 0 or one species empty: no interaction acts")
            for i, (e, _) in enumerate(noninteracting_levels(problem))
        ]
    elif up.count == 1 and down.count == 1 and problem.equal_frequencies:
        lam = g * math.sqrt(problem.reduced_mass() / up.omega)
        refs += [
            Reference(
                "energy",
                i,
                e,
                0.0,
                BUSCH_SOURCE,
                "exact",
                f"relative coupling lambda = g sqrt(mu/omega) = {lam:.12g}; total energy including the centre of"
                " mass (n_cm + 1/2) omega",
            )
            for i, (e, _) in enumerate(two_body_levels(problem))
        ]
    ground_parity = (-1) ** (up.count * (up.count - 1) // 2 + down.count * (down.count - 1) // 2)
    if problem.targets.parity in ("any", {1: "even", -1: "odd"}[ground_parity]):
        refs.append(
            Reference(
                "slope_g0",
                0,
                first_order_slope(problem),
                0.0,
                FIRST_ORDER_SOURCE,
                "exact",
                "dE0/dg at g = 0; independent of the problem's g",
            )
        )
    if problem.equal_masses and problem.equal_frequencies and up.count and down.count and g > 0:
        from ..backends.spin_chain import chain_is_tractable

        if chain_is_tractable(up.count, down.count):
            refs += _strong_coupling_references(problem)
    if problem.equal_frequencies and up.count and down.count and g > 0:
        refs += _infinite_coupling_references(problem)
        if not problem.equal_masses and sorted((up.count, down.count)) == [1, 2] and problem.targets.parity == "any":
            refs += _wedge_strong_coupling_references(problem)
    return refs
