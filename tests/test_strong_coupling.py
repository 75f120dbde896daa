"""The strong-coupling spin chain and backend against independent routes.

Sources, named beside each check: the defining integral of J_k (Volosniev et al., Nat. Commun. 5, 5300
(2014); Deuretzbacher et al., Phys. Rev. A 90, 013611 (2014); journal references from memory) by the
references' direct nested quadrature and by scipy.integrate; K(1+1) from the expansion of Busch's
equation (T. Busch et al., Found. Phys. 28, 549 (1998); expansion derived here); the exact two-body
backend at large g; SU(2) symmetry (the 2+2 chain contains the 3+1 spectrum); oscillator-ed at large g.
"""

import math

import numpy as np
import pytest
from scipy import integrate

from trapbench.backends.base import Unsupported
from trapbench.backends.registry import get
from trapbench.backends.spin_chain import spin_chain_spectrum
from trapbench.problems.exact.exchange import cumulative_overlaps, exchange_coefficients, ordered_densities
from trapbench.problems.exact.oscillator import hermite_functions_with_derivatives as oscillator_orbitals
from trapbench.problems.exact.strong_coupling_direct import direct_exchange_coefficients, strong_coupling_k_values
from trapbench.problems.spec import Problem

ROOT_2PI = math.sqrt(2 * math.pi)


@pytest.mark.parametrize("n", [2, 3, 4])
def test_exchange_coefficients_agree_with_direct_quadrature(n):
    # the solver's 1D reduction against nested Gauss-Legendre quadrature of the defining integral
    coefficients = exchange_coefficients(n)
    direct = direct_exchange_coefficients(n)
    assert list(coefficients.values) == pytest.approx(direct.values, abs=1e-11 + direct.uncertainty)
    assert coefficients.convergence < 1e-12


@pytest.mark.parametrize("counts", [(3, 1), (2, 2)])
def test_k_spectra_agree_with_the_direct_route(counts):
    # eigenvalues by reversal sectors (solver) against H_spin + c R with quadrature J_k (references)
    k_values, uncertainty = strong_coupling_k_values(*counts)
    assert list(spin_chain_spectrum(*counts).k_values) == pytest.approx(k_values, abs=1e-10 + uncertainty)


def test_exchange_coefficients_closed_forms_and_mirror_symmetry():
    # sqrt(2/pi): K(1+1) = 2 J_1 is the 1/g coefficient of Busch's equation (expansion derived here)
    assert exchange_coefficients(2).values[0] == pytest.approx(2 / ROOT_2PI, abs=1e-13)
    # 27/(8 sqrt(2 pi)): closed form from memory, also checked by dblquad below
    assert exchange_coefficients(3).values[0] == pytest.approx(27 / (8 * ROOT_2PI), abs=1e-13)
    for n in (7, 9, 12):
        values = exchange_coefficients(n).values
        assert values == pytest.approx(values[::-1], abs=1e-11)


def test_three_body_exchange_by_direct_two_dimensional_quadrature():
    # scipy.integrate.dblquad of the defining integral (Volosniev et al. 2014)
    # J_1(N=3) = int dz int_{y > z} |d/dx_1 det[phi_j(x_i)]|^2 at x_1 = x_2 = z, x_3 = y (Phi_F = det/sqrt(3!))
    def integrand(y, z):
        phi_z, dphi_z = oscillator_orbitals(3, np.array([z]))
        phi_y, _ = oscillator_orbitals(3, np.array([y]))
        return np.linalg.det(np.array([dphi_z[:, 0], phi_z[:, 0], phi_y[:, 0]])) ** 2

    value, _ = integrate.dblquad(integrand, -9, 9, lambda z: z, lambda z: 9, epsabs=1e-11, epsrel=1e-11)
    assert exchange_coefficients(3).values[0] == pytest.approx(value, abs=1e-9)


def test_cumulative_overlaps_by_quadrature():
    z = np.array([-1.3, 0.2, 2.1])
    overlaps = cumulative_overlaps(5, z)
    for a, point in zip(overlaps, z):
        for j, l in [(0, 0), (3, 3), (4, 4), (1, 4), (2, 3)]:
            expected, _ = integrate.quad(
                lambda x: np.prod(oscillator_orbitals(5, np.array([x]))[0][[j, l], 0]), -np.inf, point, epsabs=1e-14
            )
            assert a[j, l] == pytest.approx(expected, abs=1e-12)


def test_ordered_densities_two_particles_by_quadrature():
    # rho_1(x) = int_{y > x} det[phi(x), phi(y)]^2 dy for Phi_F = det/sqrt(2)
    x = np.array([-1.0, 0.0, 0.7])
    rho = ordered_densities(2, x)
    for i, point in enumerate(x):
        def det2(y):
            a, _ = oscillator_orbitals(2, np.array([point, y]))
            return (a[0, 0] * a[1, 1] - a[1, 0] * a[0, 1]) ** 2
        expected, _ = integrate.quad(det2, point, np.inf, epsabs=1e-14)
        assert rho[0, i] == pytest.approx(expected, abs=1e-12)
    grid = np.linspace(-9, 9, 3001)
    rho = ordered_densities(4, grid)
    assert np.trapezoid(rho, grid, axis=1) == pytest.approx([1, 1, 1, 1], abs=1e-10)
    phi, _ = oscillator_orbitals(4, grid)
    assert np.max(np.abs(rho.sum(axis=0) - (phi**2).sum(axis=0))) < 1e-12


def test_k_two_body_and_three_body_closed_forms():
    # K(1+1) = 2 sqrt(2/pi) (Busch expansion, derived here); 2+1: eigenvalues 3 J, J, 0 of the 3-site chain
    # with J_1 = J_2 = J = 27/(8 sqrt(2 pi)) (H_spin diagonalized by hand; J from memory, checked above)
    assert spin_chain_spectrum(1, 1).k_values == pytest.approx([2 * math.sqrt(2 / math.pi), 0], abs=1e-12)
    assert spin_chain_spectrum(2, 1).k_values == pytest.approx([81 / (8 * ROOT_2PI), 27 / (8 * ROOT_2PI), 0], abs=1e-12)


def test_su2_multiplets_appear_in_every_sector():
    # the (N_up, N_down) sector holds every multiplet with S >= |N_up - N_down|/2
    small = spin_chain_spectrum(4, 1).k_values
    large = spin_chain_spectrum(3, 2).k_values
    for k in small:
        assert np.min(np.abs(large - k)) < 1e-10


@pytest.fixture(scope="module")
def backend():
    return get("strong-coupling")


def test_backend_matches_exact_two_body_at_large_g(backend):
    exact = get("two-body")
    for g in (40.0, 200.0):
        problem = Problem.create(1, 1, g, states=2)
        strong = backend.solve(problem)
        reference = exact.solve(problem)
        assert [s["parity"] for s in strong.states] == [s["parity"] for s in reference.states]
        for e, e_exact, error in zip(strong.energies, reference.energies, strong.energy_errors):
            assert abs(e - e_exact) <= error
        # the deviation is the known next order (1 - ln 2) K^2/g^2 (expansion of Busch's equation)
        k = 2 * math.sqrt(2 / math.pi)
        next_order = (reference.energies[0] - strong.energies[0]) * g**2 / k**2
        assert next_order == pytest.approx(1 - math.log(2), rel=4 / g)  # O(1/g^3) remainder
        assert strong.energies[1] == 2.0  # the spin-symmetric state is exact at every g


def test_backend_parities_agree_with_weak_coupling_ground_state(backend):
    # the g = 0 ground state of N_up + N_down has parity (-1)^(N_up(N_up-1)/2 + N_down(N_down-1)/2),
    # and parity is conserved along g, so the g -> inf ground state has the same parity
    for counts in ((2, 1), (3, 1), (2, 2), (3, 2), (3, 3), (4, 4)):
        expected = (-1) ** (counts[0] * (counts[0] - 1) // 2 + counts[1] * (counts[1] - 1) // 2)
        assert backend.solve(Problem.create(*counts, 100.0)).states[0]["parity"] == expected


def test_backend_units_scale_with_mass_and_frequency(backend):
    # E = omega (N^2/2 - K / (g sqrt(m/omega))) by dimensional analysis
    m, w = 2.0, 3.0
    result = backend.solve(Problem.create(2, 1, 30.0, mass_up=m, mass_down=m, omega_up=w, omega_down=w))
    k = 81 / (8 * ROOT_2PI)
    assert result.energies[0] == pytest.approx(w * (4.5 - k / (30.0 * math.sqrt(m / w))), abs=1e-12)
    assert result.scalars["contact"] == pytest.approx((m * w) ** 1.5 * k, rel=1e-12)


def test_backend_spin_resolved_densities(backend):
    result = backend.solve(Problem.create(2, 1, 50.0, states=3, observables=["density"]))
    x = result.observables["density_up"].axes["x"]
    phi, _ = oscillator_orbitals(3, x)
    total = (phi**2).sum(axis=0)
    for state in range(3):
        suffix = "" if state == 0 else f"@{state}"
        up, down = result.observables["density_up" + suffix].values, result.observables["density_down" + suffix].values
        assert np.trapezoid(up, x) == pytest.approx(2, abs=1e-6) and np.trapezoid(down, x) == pytest.approx(1, abs=1e-6)
        assert np.max(np.abs(up + down - total)) < 1e-12
    # K = 0: spin-symmetric amplitudes (1, 1, 1)/sqrt(3), so the impurity density is a third of the total
    assert np.max(np.abs(result.observables["density_down@2"].values - total / 3)) < 1e-12
    # ground state amplitudes (1, -2, 1)/sqrt(6): impurity at the centre with probability 2/3
    rho = ordered_densities(3, x)
    assert np.max(np.abs(result.observables["density_down"].values - (rho[0] + 4 * rho[1] + rho[2]) / 6)) < 1e-12


def test_backend_density_approaches_exact_two_body_density(backend):
    problem = Problem.create(1, 1, 2000.0, observables=["density"], grid_points=101)
    strong = backend.solve(problem).observables["density_up"].values
    exact = get("two-body").solve(problem).observables["density_up"].values
    assert np.max(np.abs(strong - exact)) < 5e-3


@pytest.mark.parametrize(
    "problem,reason",
    [
        (Problem.create(2, 1, 5.0, mass_up=20 / 3), "needs equal masses"),
        (Problem.create(2, 1, -5.0), "repulsive branch"),
        (Problem.create(2, 1, 5.0, omega_up=2.0), "frequencies"),
        (Problem.create(2, 1, 5.0, states=4), "ask for targets.states <= 3"),
        (Problem.create(2, 0, 5.0), "both species"),
        (Problem.create(8, 8, 5.0), "12870 states"),
    ],
)
def test_backend_refuses_with_reasons(backend, problem, reason):
    with pytest.raises(Unsupported, match=reason):
        backend.solve(problem)


def test_backend_warns_when_g_is_not_large(backend):
    assert backend.solve(Problem.create(3, 3, 5.0)).warnings
    assert not backend.solve(Problem.create(1, 1, 50.0)).warnings


def test_spin_resolved_densities_are_the_limit_of_exact_diagonalization(backend):
    # 2+1: oscillator-ed densities approach the g = inf spin-chain densities like 1/g
    ed = get("oscillator-ed")
    gaps = []
    for g in (30.0, 60.0):
        problem = Problem.create(2, 1, g, observables=["density"], grid_points=121)
        exact, strong = ed.solve(problem, cutoff=20, ladder=2, ladder_step=2), backend.solve(problem)
        gaps.append(max(np.max(np.abs(exact.observables[k].values - strong.observables[k].values))
                        for k in ("density_up", "density_down")))
    assert gaps[1] < 0.6 * gaps[0] and gaps[1] < 0.015  # peak densities are ~0.6


def test_manifold_parities_and_order_match_exact_diagonalization(backend):
    # at g = 40 every state of the 2+1 and 3+1 manifolds: same parity labels, energies within both error bars
    ed = get("oscillator-ed")
    for counts, size in (((2, 1), 3), ((3, 1), 4)):
        problem = Problem.create(*counts, 40.0, states=size)
        exact, strong = ed.solve(problem, cutoff=14, ladder=3, ladder_step=2), backend.solve(problem)
        assert [s["parity"] for s in exact.states] == [s["parity"] for s in strong.states]
        for i in range(size):
            allowed = 3 * (exact.energy_errors[i] + strong.energy_errors[i]) + 1e-9
            assert abs(exact.energies[i] - strong.energies[i]) <= allowed
