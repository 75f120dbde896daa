"""Reference values checked against routes that share no code with the formula under test.

Sources, named beside each check: Busch's equation for 1+1 (T. Busch et al., Found. Phys. 28, 549
(1998)) re-derived by ODE shooting of the relative problem (scipy's DOP853, trapbench.problems.exact.relative_shooting)
and by scipy.special.gamma; expansions of that equation derived here; brute-force enumeration of
oscillator configurations; first-order integrals by scipy.integrate.quad over scipy.special.eval_hermite;
the spin chain (Volosniev et al., Nat. Commun. 5, 5300 (2014)) by the solver's 1D reduction against the
references' direct quadrature; oscillator-ed at large g for the hard-core wedges.
"""

import itertools
import math

import numpy as np
import pytest
from scipy import integrate, special

from trapbench.backends.registry import get
from trapbench.backends.spin_chain import spin_chain_spectrum
from trapbench.problems.catalogue import CONFIGURATIONS, entries
from trapbench.problems.catalogue import get as catalogue_entry
from trapbench.problems.errors import SpecError
from trapbench.problems.exact.busch import busch_even_level
from trapbench.problems.exact.strong_coupling_direct import direct_exchange_coefficients
from trapbench.problems.references import (
    fermionized_levels,
    first_order_slope,
    noninteracting_levels,
    references_for,
    two_body_levels,
    wedge_levels,
    wedge_spectrum,
)
from trapbench.problems.spec import Problem

from trapbench.problems.exact import busch, relative_shooting
from trapbench.problems.exact.relative_shooting import even_level, ground_energy
from trapbench.backends.base import Capabilities
from trapbench.problems.references import ROUTES, is_calibrated_on


def energies(problem, quantity="energy"):
    return [r.value for r in sorted(references_for(problem), key=lambda r: r.state) if r.quantity == quantity]


@pytest.mark.parametrize("lam", [-7.0, -1.4, -0.35, 0.7, 3.5, 35.0])
def test_busch_roots_match_ode_shooting(lam):
    # Busch et al. (1998), 1D form, against shooting of -psi''/2 + y^2 psi/2 = e psi, psi'(0+) = lambda psi(0)
    for branch in range(3):
        assert busch_even_level(lam, branch) == pytest.approx(even_level(lam, branch), abs=1e-11)


@pytest.mark.parametrize("lam", [-3.0, -0.4, 0.7, 12.0])
def test_busch_roots_satisfy_the_gamma_ratio_equation(lam):
    # Gamma(3/4 - e/2) / Gamma(1/4 - e/2) = -lambda/2 evaluated with scipy.special.gamma (another library
    # than the mpmath search; same equation, so a self-consistency check)
    for branch in range(3):
        e = busch_even_level(lam, branch)
        ratio = special.gamma(0.75 - e / 2) / special.gamma(0.25 - e / 2)
        assert ratio == pytest.approx(-lam / 2, rel=1e-9, abs=1e-11)


def test_busch_weak_and_strong_coupling_expansions():
    # derived here from Busch's equation: e = 1/2 + lambda/sqrt(pi) - (ln 2/pi) lambda^2 + O(lambda^3)
    lam = 1e-3
    e = busch_even_level(lam, 0)
    assert e - 0.5 - lam / math.sqrt(math.pi) == pytest.approx(-math.log(2) / math.pi * lam**2, rel=1e-2)
    # e = 3/2 - 2/(sqrt(pi) lambda) + O(1/lambda^2), and the 1/lambda^2 coefficient 4 (1 - ln 2)/pi
    # follows from Gamma(eps/2) ~ 2/eps - gamma_E and psi(-1/2) = 2 - gamma_E - 2 ln 2 (derived here)
    lam = 1e4
    e = busch_even_level(lam, 0)
    assert (e - 1.5 + 2 / (math.sqrt(math.pi) * lam)) * lam**2 == pytest.approx(4 * (1 - math.log(2)) / math.pi, rel=1e-3)


def test_two_body_spectrum_structure_and_parities():
    # 1+1 at g = 1: ground, the g-independent odd level 2, the COM excitation of the ground state, ...
    # (odd relative levels e = 3/2 + 2n; every level repeated with +1, +2 for the COM: Busch et al. 1998)
    problem = Problem.create(1, 1, 1.0, states=6)
    levels = two_body_levels(problem)
    lam = 1 / math.sqrt(2)
    e0, e1 = 0.5 + even_level(lam, 0), 0.5 + even_level(lam, 1)  # ODE shooting
    assert [e for e, _ in levels] == pytest.approx([e0, 2.0, e0 + 1, 3.0, e1, e0 + 2], abs=1e-11)
    assert [p for _, p in levels] == [1, -1, -1, 1, 1, 1]
    odd = two_body_levels(problem.with_targets(parity="odd", states=3))
    assert [e for e, _ in odd] == pytest.approx([2.0, e0 + 1, 4.0], abs=1e-11)


@pytest.mark.parametrize("kappa,g", [(20 / 3, -2.0), (20 / 3, 10.0), (0.15, -1.0), (0.15, 2.0), (2.0, 5.0)])
def test_unequal_mass_two_body_ground_states(kappa, g):
    # lambda = g sqrt(mu) (relative coordinate in its own oscillator length), checked by ODE shooting
    assert energies(Problem.create(1, 1, g, mass_down=kappa))[0] == pytest.approx(ground_energy(g, 1.0, kappa), abs=1e-11)


def test_two_body_scales_with_a_common_trap_frequency():
    # omega = w: E(g) = w E_1(g / sqrt(w)) in units of the reference (dimensional analysis)
    w = 2.25
    scaled = energies(Problem.create(1, 1, 3.0, omega_up=w, omega_down=w))[0]
    assert scaled == pytest.approx(w * energies(Problem.create(1, 1, 3.0 / math.sqrt(w)))[0], abs=1e-12)


@pytest.mark.parametrize("counts", [(2, 1), (3, 2), (0, 3), (4, 4)])
def test_noninteracting_tower_matches_brute_force_enumeration(counts):
    n_up, n_down = counts
    problem = Problem.create(n_up, n_down, 0.0, omega_up=1.0, omega_down=1.5, states=30)
    brute = []
    for up in itertools.combinations(range(12), n_up):
        for down in itertools.combinations(range(12), n_down):
            brute.append((sum(n + 0.5 for n in up) + 1.5 * sum(n + 0.5 for n in down), (-1) ** (sum(up) + sum(down))))
    brute.sort()
    levels = noninteracting_levels(problem)
    assert [e for e, _ in levels] == pytest.approx([e for e, _ in brute[:30]], abs=1e-12)
    even = noninteracting_levels(problem.with_targets(parity="even"))
    assert [e for e, _ in even] == pytest.approx([e for e, p in brute if p == 1][:30], abs=1e-12)


def test_one_species_empty_is_free_at_any_g():
    assert energies(Problem.create(3, 0, -2.0, states=2)) == pytest.approx([4.5, 5.5])


def _hermite_density(n_particles, mass, x):
    # sum of |phi_n(x)|^2 for the oscillator of mass m, omega = 1, from scipy's Hermite polynomials
    xi = math.sqrt(mass) * x
    total = 0.0
    for n in range(n_particles):
        norm = (mass / math.pi) ** 0.25 / math.sqrt(2.0**n * math.factorial(n))
        total += (norm * special.eval_hermite(n, xi) * math.exp(-(xi**2) / 2)) ** 2
    return total


@pytest.mark.parametrize(
    "counts,masses",
    [((1, 1), (1.0, 1.0)), ((3, 1), (1.0, 1.0)), ((3, 3), (1.0, 1.0)), ((5, 1), (1.0, 1.0)),
     ((2, 1), (20 / 3, 1.0)), ((1, 3), (1.0, 20 / 3)), ((2, 2), (1.0, 0.15))],
)
def test_first_order_coefficients_by_quadrature(counts, masses):
    # first-order perturbation theory (textbook): c1 = int rho_up rho_down dx, here by scipy.integrate.quad
    # over densities built from scipy.special.eval_hermite (the references use Gauss-Hermite and a recursion)
    problem = Problem.create(*counts, 0.3, mass_up=masses[0], mass_down=masses[1])
    expected, _ = integrate.quad(
        lambda x: _hermite_density(counts[0], masses[0], x) * _hermite_density(counts[1], masses[1], x),
        -15, 15, epsabs=1e-13, limit=200,
    )
    assert first_order_slope(problem) == pytest.approx(expected, abs=1e-11)


@pytest.mark.parametrize("counts,rational", [((1, 1), 1), ((2, 1), 3 / 2), ((2, 2), 11 / 4), ((3, 2), 57 / 16),
                                             ((3, 3), 321 / 64)])
def test_first_order_equal_mass_rationals(counts, rational):
    # c1 sqrt(2 pi) for equal masses: Gaussian integrals of Hermite functions worked out by hand (no
    # published source), used by the pairing and perturbative tests; checked by scipy.integrate.quad here
    expected, _ = integrate.quad(lambda x: _hermite_density(counts[0], 1.0, x) * _hermite_density(counts[1], 1.0, x),
                                 -15, 15, epsabs=1e-13, limit=200)
    assert expected * math.sqrt(2 * math.pi) == pytest.approx(rational, abs=1e-11)
    assert first_order_slope(Problem.create(*counts, 0.5)) * math.sqrt(2 * math.pi) == pytest.approx(rational, abs=1e-12)


def test_first_order_two_body_unequal_masses_closed_form():
    # 1+1: c1 = int phi_0^up(x)^2 phi_0^down(x)^2 dx = sqrt(m_up m_down)/pi * sqrt(pi/(m_up + m_down))
    # = sqrt(mu/pi) (a Gaussian integral, derived here)
    mu = (20 / 3) / (1 + 20 / 3)
    assert energies(Problem.create(1, 1, 1.0, mass_down=20 / 3), "slope_g0")[0] == pytest.approx(math.sqrt(mu / math.pi))


def test_slope_omitted_when_ground_state_lies_in_the_other_parity_sector():
    # 2+1 ground state has parity (-1)^(0+1+0) = -1
    assert energies(Problem.create(2, 1, 1.0, parity="even"), "slope_g0") == []
    assert len(energies(Problem.create(2, 1, 1.0, parity="odd"), "slope_g0")) == 1


@pytest.mark.parametrize("counts", [(1, 1), (2, 1), (3, 1), (2, 2)])
def test_reference_k_agrees_with_the_spin_chain_solver(counts):
    # two routes to K (Volosniev et al. 2014): the references' direct quadrature of J_k with a shifted
    # eigensolve, and the strong-coupling solver's 1D reduction with reversal-sector diagonalization
    solver = spin_chain_spectrum(*counts)
    for parity, label in ((None, "any"), (1, "even"), (-1, "odd")):
        size = len(solver.k_values) if parity is None else int(np.sum(solver.spatial_parity == parity))
        refs = [r for r in references_for(Problem.create(*counts, 30.0, states=size, parity=label)) if r.quantity == "K"]
        expected = [k for k, p in zip(solver.k_values, solver.spatial_parity) if parity in (None, p)]
        assert [r.value for r in refs] == pytest.approx(expected, abs=1e-10)
        assert all(r.uncertainty < 1e-10 and r.kind == "derived" for r in refs)


def test_direct_exchange_integrals_closed_forms():
    # J_1(N = 2) = sqrt(2/pi): K(1+1) = 2 J_1 must equal the 1/lambda coefficient of Busch's equation,
    # 2/sqrt(pi) per lambda = g/sqrt(2) (expansion derived here; see test_busch_weak_and_strong_coupling_expansions)
    assert direct_exchange_coefficients(2).values[0] == pytest.approx(math.sqrt(2 / math.pi), abs=1e-12)
    # J_1(N = 3) = 27/(8 sqrt(2 pi)) (closed form from memory), and mirror symmetry J_k = J_{N-k}
    three = direct_exchange_coefficients(3).values
    assert three == pytest.approx([27 / (8 * math.sqrt(2 * math.pi))] * 2, abs=1e-12)
    four = direct_exchange_coefficients(4)
    assert four.values[0] == pytest.approx(four.values[2], abs=1e-13) and four.uncertainty < 1e-10


def test_no_finite_g_energy_from_asymptotic_formulas():
    # the O(1/g^2) remainder of N^2/2 - K/g is unbounded for N > 2: only the exact coefficients are given
    refs = references_for(Problem.create(2, 1, 30.0, states=3))
    assert {r.quantity for r in refs} == {"K", "energy_g_inf", "slope_g0"}
    refs = references_for(Problem.create(1, 2, 30.0, mass_down=20 / 3, states=2))
    assert {r.quantity for r in refs} == {"K", "energy_g_inf", "slope_g0"}


def test_two_body_next_order_coefficient():
    # 1+1: the exact Busch energy minus the asymptote 2 - K/g is (1 - ln 2) K^2/g^2 + O(g^-3) (expansion of
    # Busch's equation derived here); the strong-coupling solver's error rule rests on this coefficient
    g = 200.0
    k = 2 * math.sqrt(2 / math.pi)
    exact = energies(Problem.create(1, 1, g))[0]
    assert (exact - (2 - k / g)) * g**2 / k**2 == pytest.approx(1 - math.log(2), rel=2e-2)


def test_every_reference_names_its_source_kind_and_route():
    for r in references_for(Problem.create(1, 1, 2.0, states=3)) + references_for(Problem.create(3, 1, 40.0, states=2)):
        assert r.source and r.kind in ("exact", "derived", "published", "recalled") and r.uncertainty >= 0
        assert r.route in ROUTES


@pytest.mark.parametrize("lam", [-7.0, -0.7, 1.4, 70.0])
@pytest.mark.parametrize("parity", [None, 1, -1])
def test_shooting_levels_match_busch_roots_with_centre_of_mass_towers(lam, parity):
    # two routes to the 1+1 spectrum E = n_cm + 1/2 + e: Busch et al. (1998) in 30-digit arithmetic and ODE
    # shooting (common practice, no source); eight levels reach the fourth even relative level
    shot = relative_shooting.two_body_levels(lam, 1.0, 8, parity)
    exact = busch.two_body_levels(lam, 1.0, 8, parity)
    assert [p for _, p in shot] == [p for _, p in exact]
    assert np.allclose([e for e, _ in shot], [e for e, _ in exact], rtol=0, atol=relative_shooting.UNCERTAINTY / 100)


def test_high_shooting_levels_integrate_past_their_turning_point():
    # branch 10 (e ~ 21) has its turning point at y ~ 6.5: the range grows with e (Busch et al. (1998) roots)
    assert even_level(3.0, 10) == pytest.approx(busch_even_level(3.0, 10), abs=1e-11)


class _Declaring:
    """A backend object that is not in the registry, declaring what it is built on."""

    name = "my-solver"

    def __init__(self, **declared):
        self.capabilities = Capabilities(**declared)


def test_a_backend_built_on_busch_roots_is_graded_by_shooting():
    problem = Problem.create(1, 1, 2.0, mass_up=2.0, states=4)
    plain = [r for r in references_for(problem) if r.quantity == "energy"]
    for graded_backend in ("two-body", _Declaring(built_on=("busch-roots",))):
        shot = [r for r in references_for(problem, for_backend=graded_backend) if r.quantity == "energy"]
        assert [r.route for r in shot] == ["relative-shooting"] * 4 and [r.route for r in plain] == ["busch-roots"] * 4
        assert all("ODE shooting" in r.source and r.uncertainty == relative_shooting.UNCERTAINTY for r in shot)
        assert [r.value for r in shot] == pytest.approx([r.value for r in plain], abs=1e-11)
    # a method that does not use Busch's equation (a lattice) is graded by the exact roots themselves
    assert [r.route for r in references_for(problem, for_backend="lattice-ed") if r.quantity == "energy"] == ["busch-roots"] * 4


def test_no_energy_grades_a_backend_at_the_counts_it_is_calibrated_on():
    # oscillator-ed's running coupling and effective interaction reproduce the 1+1 spectrum by construction
    problem = Problem.create(1, 1, 2.0, states=3)
    assert is_calibrated_on(problem, "oscillator-ed") and not is_calibrated_on(problem, "lattice-ed")
    assert not [r for r in references_for(problem, for_backend="oscillator-ed") if r.quantity in ("energy", "K")]
    assert [r for r in references_for(problem, for_backend="oscillator-ed") if r.quantity == "energy_g_inf"]
    # at g = 0 nothing was fitted: the towers grade it; at 2+1 the calibration does not apply
    assert [r.route for r in references_for(problem.at(0.0), for_backend="oscillator-ed") if r.quantity == "energy"] == [
        "oscillator-towers"] * 3
    assert not is_calibrated_on(Problem.create(2, 1, 2.0), "oscillator-ed")
    declared = _Declaring(calibrated_on=((1, 1),))
    assert not [r for r in references_for(problem, for_backend=declared) if r.quantity == "energy"]


def test_first_order_and_towers_never_grade_the_perturbative_backend():
    problem = Problem.create(2, 1, 0.0, states=2)
    routes = {r.route for r in references_for(problem, for_backend="perturbative")}
    assert not routes & {"first-order", "oscillator-towers"}
    assert {"first-order", "oscillator-towers"} <= {r.route for r in references_for(problem)}


def test_capabilities_name_known_routes_and_particle_counts():
    with pytest.raises(ValueError, match="capabilities.built_on: unknown route"):
        Capabilities(built_on=("busch",))
    with pytest.raises(ValueError, match="capabilities.calibrated_on"):
        Capabilities(calibrated_on=((1,),))


def test_no_references_for_non_harmonic_traps():
    problem = Problem.from_dict({"up": {"count": 1}, "down": {"count": 1}, "interaction": {"g": 1.0},
                                 "trap": {"shape": "box", "half_width": 3.0}})
    assert references_for(problem) == []


def test_catalogue_covers_the_requested_configurations_and_regimes():
    names = {e.name for e in entries()}
    for n_up, n_down in CONFIGURATIONS:
        for regime in ("strong-attractive", "weak", "intermediate", "strong-repulsive"):
            assert f"{n_up}+{n_down}/equal/{regime}" in names
    assert "2+1/20:3/weak" in names and "2+2/3:20/strong-repulsive" in names
    entry = catalogue_entry("1+1/3:20/intermediate")
    assert (entry.problem.up.mass, entry.problem.down.mass) == (1.0, pytest.approx(20 / 3))
    assert entry.problem.coupling == 2.0
    # the 1+1 entry's ground energy: Busch's root against ODE shooting (m0 = the light species)
    assert entry.references[0].value == pytest.approx(ground_energy(2.0, 1.0, 20 / 3), abs=1e-11)


def test_catalogue_unknown_name_suggests_the_closest():
    with pytest.raises(SpecError, match="did you mean '2\\+1/equal/weak'"):
        catalogue_entry("2+1/equal/waek")


@pytest.mark.parametrize("counts", [(1, 1), (2, 1), (3, 1), (2, 2), (3, 3)])
def test_fermionized_levels_count_and_parities(counts):
    n = sum(counts)
    size = math.comb(n, counts[0])
    problem = Problem.create(*counts, 1.0, states=size + 1)
    levels = fermionized_levels(problem)
    # the lowest level N^2/2 holds one state per spin ordering, the next is one quantum higher
    assert levels == [n * n / 2] * size + [n * n / 2 + 1]
    # the parity split of the ground manifold matches the spin chain's eigenvectors (another construction)
    parities = spin_chain_spectrum(*counts).spatial_parity
    for sector, sign in (("even", 1), ("odd", -1)):
        sector_levels = fermionized_levels(problem.with_targets(parity=sector, states=size))
        assert sector_levels.count(n * n / 2) == int(np.sum(parities == sign))


def test_wedge_levels_reduce_to_fermionization_for_equal_masses():
    problem = Problem.create(2, 1, 3.0, states=12)
    assert wedge_levels(problem) == pytest.approx(fermionized_levels(problem), abs=1e-12)
    assert wedge_levels(Problem.create(1, 2, 3.0, mass_up=2.5, mass_down=2.5, states=6)) == pytest.approx(
        fermionized_levels(Problem.create(1, 2, 3.0, states=6)), abs=1e-12)


@pytest.mark.parametrize("mass_up", [20 / 3, 0.15])
def test_wedge_levels_are_the_large_g_limit_of_exact_diagonalization(mass_up):
    # oscillator-ed at g = 30 and 100, extrapolated in 1/g (E = E_inf - A/g), reaches the wedge value
    backend = get("oscillator-ed")
    values, errors = [], []
    for g in (30.0, 100.0):
        result = backend.solve(Problem.create(2, 1, g, mass_up=mass_up))
        values.append(result.energies[0])
        errors.append(result.error_estimate)
    limit = (100.0 * values[1] - 30.0 * values[0]) / 70.0
    expected = wedge_spectrum(Problem.create(2, 1, 1.0, mass_up=mass_up))[0]
    # the neglected O(1/g^2) term of the ladder: a few 1e-3 (the ED values themselves carry ~2e-3)
    assert limit == pytest.approx(expected.energy, abs=5e-3 + 3 * max(errors))
    assert max(values) < expected.energy  # levels approach the hard-core limit from below
    # and the slope in 1/g is the wall-leakage coefficient K
    slope = (values[1] - values[0]) / (1 / 30.0 - 1 / 100.0)
    assert slope == pytest.approx(expected.k, abs=0.1 * expected.k + 3 * sum(errors) / (1 / 30.0 - 1 / 100.0))


def test_two_body_infinite_coupling_limit_any_masses():
    problem = Problem.create(1, 1, 1e7, mass_up=20 / 3, states=6)
    limit = [r.value for r in references_for(problem) if r.quantity == "energy_g_inf"]
    assert limit == [2.0, 2.0, 3.0, 3.0, 4.0, 4.0]
    assert energies(problem) == pytest.approx(limit, abs=1e-5)  # Busch's roots at lambda ~ 1e7


def test_catalogue_command_lists_entries_and_shows_sources(capsys):
    from trapbench.bench.cli import main

    assert main(["catalogue"]) == 0
    assert "6+6/equal/strong-repulsive" in capsys.readouterr().out
    assert main(["catalogue", "1+1/equal/intermediate"]) == 0
    out = capsys.readouterr().out
    assert f"{ground_energy(2.0):.12g}" in out and "Busch" in out  # Busch's root, checked by ODE shooting
    assert main(["catalogue", "1+1/equal/intermediate", "--toml"]) == 0
    from trapbench.problems.toml_io import parse_problem

    assert parse_problem(capsys.readouterr().out).key == catalogue_entry("1+1/equal/intermediate").problem.key
    assert main(["catalogue", "9+9/equal/weak"]) == 2


def test_large_systems_get_the_references_that_scale():
    # 10+10: no spin chain (184756 orderings), but the towers, slope and fermionized limit remain
    quantities = {r.quantity for r in references_for(Problem.create(10, 10, 3.0))}
    assert quantities == {"slope_g0", "energy_g_inf"}


def test_wedge_slopes_reduce_to_the_spin_chain_diagonal_for_equal_masses():
    # down in the middle (inside wedge): J_1 + J_2 = 2 J; down outside: J (direct quadrature of J_k)
    levels = wedge_spectrum(Problem.create(2, 1, 5.0, mass_up=1 + 1e-9, mass_down=1.0, states=3))
    j = direct_exchange_coefficients(3).values[0]
    assert sorted(level.k for level in levels) == pytest.approx([j, j, 2 * j], rel=1e-6)
    # exactly equal masses: the three families are degenerate and mix, so no slope is claimed
    assert all(math.isnan(level.k) for level in wedge_spectrum(Problem.create(2, 1, 5.0, states=3)))


@pytest.mark.parametrize("pair_mass,odd_mass", [(20 / 3, 1.0), (0.15, 1.0)])
def test_wedge_wall_integrals_by_mpmath(pair_mass, odd_mass):
    # the Laguerre moments behind K of the wedge levels, by mpmath.quad (the module uses scipy.integrate.quad)
    import mpmath

    from trapbench.problems.exact.wedges import wedge_angles, wedge_wall_integral

    theta_outside, theta_inside = wedge_angles(pair_mass, odd_mass)
    for theta, nu, radial in ((2 * theta_outside, math.pi / theta_outside, 0), (theta_inside, math.pi / theta_inside, 1)):
        def moment(power):
            integrand = lambda t: t**power * mpmath.laguerre(radial, nu, t) ** 2 * mpmath.exp(-t)  # noqa: E731
            return mpmath.quad(integrand, [0, 1, 10, mpmath.inf]) / 2

        expected = float(nu * nu * moment(nu - 1.5) / (theta / 2 * moment(nu)))
        assert wedge_wall_integral(theta, nu, radial) == pytest.approx(expected, abs=1e-12)


def test_unequal_mass_wedge_slopes_are_references():
    refs = references_for(Problem.create(1, 2, 30.0, mass_down=20 / 3, states=2))
    k = [r.value for r in refs if r.quantity == "K"]
    expected = wedge_spectrum(Problem.create(1, 2, 30.0, mass_down=20 / 3, states=2))
    assert k == pytest.approx([level.k for level in expected], abs=1e-12) and all(v > 0 for v in k)
