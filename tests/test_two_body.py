"""The exact two-body backend against independent high-precision evaluations and known limits.

Source of the equation: T. Busch et al., Found. Phys. 28, 549 (1998), 1D case:
Gamma(3/4 - e/2) / Gamma(1/4 - e/2) = -lambda/2 with lambda = g sqrt(mu), E = n + 1/2 + e.
The reference roots here are found by mpmath (30 digits) directly on that ratio, an implementation
independent of the backend's reformulation, and by ODE shooting of the relative problem
(trapbench.problems.exact.relative_shooting), which does not use the Gamma-function form at all.
"""

import math

import mpmath
import numpy as np
import pytest

from trapbench.backends import get
from trapbench.problems import Problem

from trapbench.problems.exact.relative_shooting import even_level, ground_energy

mpmath.mp.dps = 30


def mpmath_ground_energy(g: float, mass_ratio: float) -> float:
    """Total ground-state energy of 1+1 with m_up = 1, m_down = mass_ratio, by mpmath root finding."""
    mu = mpmath.mpf(mass_ratio) / (1 + mpmath.mpf(mass_ratio))
    lam = mpmath.mpf(g) * mpmath.sqrt(mu)

    def ratio_equation(e):
        return mpmath.gamma(mpmath.mpf(3) / 4 - e / 2) / mpmath.gamma(mpmath.mpf(1) / 4 - e / 2) + lam / 2

    tiny = mpmath.mpf(10) ** -25
    if g > 0:
        bracket = (mpmath.mpf(1) / 2 + tiny, mpmath.mpf(3) / 2 - tiny)
    else:
        bracket = (-(lam**2) / 2 - 2, mpmath.mpf(1) / 2 - tiny)
    e = mpmath.findroot(ratio_equation, bracket, solver="anderson")
    return float(e + mpmath.mpf(1) / 2)


@pytest.fixture(scope="module")
def backend():
    return get("two-body")


@pytest.mark.parametrize("mass_ratio", [1.0, 20 / 3, 3 / 20])
@pytest.mark.parametrize("g", [-5.0, -2.0, -0.3, 0.7, 2.0, 10.0])
def test_ground_state_matches_mpmath(backend, g, mass_ratio):
    result = backend.solve(Problem.create(1, 1, g, mass_down=mass_ratio))
    assert abs(result.energies[0] - mpmath_ground_energy(g, mass_ratio)) <= 1e-10


@pytest.mark.parametrize("g", [-10.0, -1.0, 1.0, 5.0, 50.0])
def test_even_relative_levels_match_ode_shooting(backend, g):
    # the three lowest even relative levels with the COM in its ground state, E = 1/2 + e_n(g / sqrt(2))
    levels = backend.spectrum(Problem.create(1, 1, g, states=12))
    even_com0 = [s["energy"] for s in levels if s["com"] == 0 and s["relative_parity"] == 1][:3]
    expected = [0.5 + even_level(g / math.sqrt(2), n) for n in range(3)]
    assert np.allclose(even_com0, expected, atol=2e-11, rtol=0)


def test_mass_imbalance_table_and_reference_mass_change(backend):
    # kappa = 20/3 at g = 5 and kappa = 3/20 at g = 10, against ODE shooting with lambda = g sqrt(mu)
    heavy = backend.solve(Problem.create(1, 1, 5.0, mass_down=20 / 3)).energies[0]
    assert abs(heavy - ground_energy(5.0, 1.0, 20 / 3)) < 1e-10
    light_ref = backend.solve(Problem.create(1, 1, 10.0, mass_down=3 / 20)).energies[0]
    assert abs(light_ref - ground_energy(10.0, 1.0, 3 / 20)) < 1e-10
    # the same system with the heavy species as reference: g' = g sqrt(m0'/m0) = g sqrt(3/20)
    # (g is in units of sqrt(hbar^3 omega / m0): dimensional analysis)
    heavy_ref = backend.solve(Problem.create(1, 1, 10.0 * math.sqrt(3 / 20), mass_down=20 / 3)).energies[0]
    assert abs(light_ref - heavy_ref) < 1e-11


def test_non_interacting_towers(backend):
    # g = 0: E = n_up + n_down + 1 with degeneracy n + 1 (two independent oscillators)
    result = backend.solve(Problem.create(1, 1, 0.0, states=10))
    assert result.energies == pytest.approx([1, 2, 2, 3, 3, 3, 4, 4, 4, 4], abs=1e-13)
    assert [s["degeneracy"] for s in result.states] == [1, 2, 2, 3, 3, 3, 4, 4, 4, 4]


def test_spectrum_contains_g_independent_odd_levels_and_com_tower(backend):
    result = backend.solve(Problem.create(1, 1, 3.3, states=8))
    energies = np.array(result.energies)
    # odd relative states do not feel the contact interaction: E = 2, 3, 4 ... (1/2 + 3/2 + n)
    assert np.min(np.abs(energies - 2.0)) < 1e-13 and np.min(np.abs(energies - 3.0)) < 1e-13
    # centre-of-mass tower: E0 + 1 and E0 + 2 are eigenvalues (common frequency)
    for shift in (1, 2):
        assert np.min(np.abs(energies - (energies[0] + shift))) < 1e-12


def test_parity_sectors(backend):
    even = backend.solve(Problem.create(1, 1, 1.0, states=3, parity="even"))
    odd = backend.solve(Problem.create(1, 1, 1.0, states=3, parity="odd"))
    assert all(s["parity"] == 1 for s in even.states) and all(s["parity"] == -1 for s in odd.states)
    # odd sector: E = 2 (odd relative, COM 0) and E0 + 1 (even relative, COM 1); E0 by ODE shooting
    e0 = ground_energy(1.0)
    assert odd.energies[:2] == pytest.approx(sorted([e0 + 1, 2.0]), abs=1e-11)


@pytest.mark.parametrize("mass_ratio", [1.0, 20 / 3])
def test_strong_repulsion_limit(backend, mass_ratio):
    # E = 2 - 2/(sqrt(pi mu) g) + O(g^-2): Busch's equation expanded about e = 3/2 (derived here;
    # Gamma(eps/2) ~ 2/eps, Gamma(-1/2) = -2 sqrt(pi)), so K = 2/sqrt(pi mu)
    mu = mass_ratio / (1 + mass_ratio)
    for g in (1e3, 1e4):
        energy = backend.solve(Problem.create(1, 1, g, mass_down=mass_ratio)).energies[0]
        assert abs(energy - (2 - 2 / (math.sqrt(math.pi * mu) * g))) < 5 / g**2


@pytest.mark.parametrize("mass_ratio", [1.0, 20 / 3])
def test_strong_attraction_limit(backend, mass_ratio):
    # deeply bound pair: relative energy -mu g^2/2 (1D delta bound state, common practice); plus
    # COM 1/2; the next term 1/(4 lambda^2), lambda^2 = mu g^2, from Stirling's series of Busch's equation
    # (derived here; equal masses: E = -g^2/4 + 1/2 + 1/(2 g^2))
    mu = mass_ratio / (1 + mass_ratio)
    g = -40.0
    energy = backend.solve(Problem.create(1, 1, g, mass_down=mass_ratio)).energies[0]
    lam2 = g * g * mu
    assert abs(energy + mu * g * g / 2 - 0.5 - 1 / (4 * lam2)) < 5 / lam2**2


def test_first_order_slope(backend):
    # E = 1 + g/sqrt(2 pi) - (ln 2 / (2 pi)) g^2 + O(g^3), equal masses: Busch's equation expanded about
    # e = 1/2 (derived here; the linear term is also first-order perturbation theory)
    g = 1e-3
    energy = backend.solve(Problem.create(1, 1, g)).energies[0]
    assert abs(energy - (1 + g / math.sqrt(2 * math.pi) - math.log(2) / (2 * math.pi) * g * g)) < 1e-9


@pytest.mark.parametrize("g", [-1.0, 2.0])
def test_hellmann_feynman_virial_and_contact(backend, g):
    result = backend.solve(Problem.create(1, 1, g))
    # Hellmann-Feynman: <delta> = dE/dg, here a fourth-order central difference (step 0.01, truncation
    # ~1e-10) of ODE-shooting energies
    h = 0.01
    energy = {k: ground_energy(g + k * h) for k in (-2, -1, 1, 2)}
    expected = (8 * (energy[1] - energy[-1]) - (energy[2] - energy[-2])) / (12 * h)
    assert abs(result.scalars["delta"] - expected) < 2e-9
    # virial theorem for a harmonic trap with a contact interaction: E = 2<V> + (g/2) dE/dg
    assert abs(result.energies[0] - 2 * result.scalars["trap_energy"] - g / 2 * result.scalars["delta"]) < 1e-9
    assert result.scalars["contact"] == pytest.approx(g * g * result.scalars["delta"], rel=1e-12)  # (2 mu)^2 = 1


def test_contact_at_strong_coupling_approaches_k(backend):
    # C = g^2 dE/dg -> K = 2 sqrt(2/pi) for equal masses (the 1/g coefficient of Busch's equation, derived here)
    result = backend.solve(Problem.create(1, 1, 1e5))
    assert abs(result.scalars["contact"] - 2 * math.sqrt(2 / math.pi)) < 1e-4


def test_density_and_momentum_distribution(backend):
    problem = Problem.create(1, 1, 0.0, observables=["density", "momentum"], grid_points=401, x_max=8.0, p_max=8.0)
    result = backend.solve(problem)
    x = result.observables["density_up"].axes["x"]
    # g = 0: each particle in the oscillator ground state, n(x) = exp(-x^2)/sqrt(pi) (common practice)
    assert np.allclose(result.observables["density_up"].values, np.exp(-x * x) / math.sqrt(math.pi), atol=1e-9)
    p = result.observables["momentum_down"].axes["p"]
    assert np.allclose(result.observables["momentum_down"].values, np.exp(-p * p) / math.sqrt(math.pi), atol=1e-7)


def test_heavy_light_densities_and_momentum_tail(backend):
    problem = Problem.create(
        1, 1, 8.0, mass_down=20 / 3, observables=["density", "momentum"], grid_points=801, x_max=6.0, p_max=20.0
    )
    result = backend.solve(problem)
    for label in ("up", "down"):
        density = result.observables[f"density_{label}"]
        assert abs(np.trapezoid(density.values, density.axes["x"]) - 1) < 1e-8
    # the heavy particle is more localized: its density at the centre is higher
    assert result.observables["density_down"].values[400] > result.observables["density_up"].values[400]
    # Tan: n(p) -> C/(2 pi p^4) with integral dp n = 1 (Barth & Zwerger, Ann. Phys. 326, 2544 (2011),
    # normalization converted from integral dk/(2 pi)); the light particle's tail
    momentum = result.observables["momentum_up"]
    p, values = momentum.axes["p"], momentum.values
    tail = (p > 17) & (p < 19.5)
    estimate = np.mean(values[tail] * 2 * math.pi * p[tail] ** 4)
    assert abs(estimate / result.scalars["contact"] - 1) < 0.05


def test_rejects_other_particle_numbers_with_reason(backend):
    support = backend.admits(Problem.create(2, 1, 1.0))
    assert not support and "1+1" in support.reason
    support = backend.admits(Problem.create(1, 1, 1.0, omega_down=2.0))
    assert not support and "trap frequencies" in support.reason
