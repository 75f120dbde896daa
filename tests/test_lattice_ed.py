"""lattice-ed against closed forms, quspin's independent lattice Hamiltonian, Busch's two-body roots,
a spectral (sinc-DVR) one-body solution, lattice-dmrg and oscillator-ed."""

from __future__ import annotations

import importlib.util
import itertools
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy.interpolate import CubicSpline

sys.path.insert(0, str(Path(__file__).parent))
from lattice_reference import quspin_levels  # noqa: E402

from trapbench.backends import fock_ed, lattice  # noqa: E402
from trapbench.backends.lattice_ed import LatticeEDBackend, dimension, lattice_hamiltonian, pair_correlation, solve_on_grid  # noqa: E402
from trapbench.backends.registry import get  # noqa: E402
from trapbench.problems.errors import SpecError  # noqa: E402
from trapbench.problems.spec import Problem  # noqa: E402

BACKEND = LatticeEDBackend()


def free_many_body_levels(levels_up, levels_down, n_up, n_down, k):
    """The k lowest sums of distinct one-body levels per species (non-interacting fermions)."""
    ups = sorted(sum(c) for c in itertools.combinations(levels_up[: n_up + 4], n_up))
    downs = sorted(sum(c) for c in itertools.combinations(levels_down[: n_down + 4], n_down))
    return sorted(u + d for u in ups for d in downs)[:k]


def test_free_fermions_in_a_box_equal_the_closed_form_lattice_spectrum():
    # g = 0 in a hard-wall box: one-body levels 2 t_s (1 - cos(n pi / (L + 1))) (closed form of the
    # tridiagonal Toeplitz matrix); many-body levels are sums over occupied levels.
    problem = Problem.from_dict(
        {
            "up": {"count": 2},
            "down": {"count": 1, "mass": 20 / 3},
            "trap": {"shape": "box", "half_width": 2.0},
            "interaction": {"g": 0.0},
            "targets": {"states": 4},
        }
    )
    grid = lattice.make_grid(problem, 0.2, 2.0)
    n = np.arange(1, grid.sites + 1)
    one_body = {s.name: 2 * lattice.hopping(s, grid.spacing) * (1 - np.cos(n * np.pi / (grid.sites + 1))) for s in problem.species}
    levels = solve_on_grid(problem, grid, final=False)
    expected = free_many_body_levels(one_body["up"], one_body["down"], 2, 1, 8)
    got = sorted(levels.energies)
    np.testing.assert_allclose(got[:4], expected[:4], atol=1e-10)


@pytest.mark.parametrize("g", [-2.0, 2.0])
def test_lattice_hamiltonian_equals_quspin_on_the_same_lattice(g):
    # quspin's spinful_fermion_basis_1d, built term by term, is an independent construction.
    problem = Problem.create(2, 2, g, mass_down=20 / 3, states=3)
    grid = lattice.make_grid(problem, 0.6, 3.0)
    levels = solve_on_grid(problem, grid, final=False)
    exact, _, _ = quspin_levels(problem, grid, 3)
    np.testing.assert_allclose(sorted(levels.energies)[:3], exact, atol=1e-10)
    assert max(levels.solver_errors) < 1e-8


CASES_1P1 = [(1.0, -2.0), (1.0, 2.0), (20 / 3, -2.0), (20 / 3, 2.0)]


@pytest.mark.parametrize("mass_down, g", CASES_1P1)
def test_continuum_limit_of_1p1_matches_busch_within_the_error_bar(mass_down, g):
    # Reference: the two-body backend, the exact root of Busch et al., Found. Phys. 28, 549 (1998);
    # those roots are re-derived by ODE shooting of the relative problem in test_references.py.
    problem = Problem.create(1, 1, g, mass_down=mass_down, states=3)
    exact = get("two-body").solve(problem)
    scale = lattice.length_scale(problem)
    result = BACKEND.solve(problem, spacings=[f * scale for f in (0.4, 0.3, 0.22, 0.16)], x_max=5.0)
    for k in range(3):
        assert abs(result.energies[k] - exact.energies[k]) <= result.energy_errors[k]
        assert abs(result.energies[k] - exact.energies[k]) <= 1e-4 * abs(exact.energies[k])
        assert result.states[k]["parity"] == exact.states[k]["parity"]
    if (mass_down, g) == (1.0, 2.0):
        # <delta> = dE/dg (Hellmann-Feynman) of the exact state, from the two-body backend's wave function
        assert result.scalars["delta"] == pytest.approx(exact.scalars["delta"], rel=1e-4)


@pytest.mark.parametrize("mass_down, g", [(1.0, 2.0), (20 / 3, -2.0)])
def test_sixth_order_continuum_fit_holds_busch_with_a_far_narrower_bar(mass_down, g):
    # Reference: the exact root of Busch et al., Found. Phys. 28, 549 (1998) (two-body backend).
    problem = Problem.create(1, 1, g, mass_down=mass_down)
    exact = get("two-body").solve(problem).energies[0]
    scale = lattice.length_scale(problem)
    spacings = [f * scale for f in (0.4, 0.32, 0.25, 0.2, 0.16)]
    quartic = BACKEND.solve(problem, spacings=spacings, x_max=5.0)
    sextic = BACKEND.solve(problem, spacings=spacings, x_max=5.0, continuum_order=6)
    assert abs(sextic.energies[0] - exact) <= sextic.energy_errors[0]
    assert sextic.energy_errors[0] <= quartic.energy_errors[0] / 10
    assert sextic.diagnostics["energy_fits"][0]["model"] == "E(h) = E0 + c2 h^2 + c4 h^4 + c6 h^6"


def test_continuum_order_is_checked_before_solving():
    problem = Problem.create(1, 1, 2.0)
    with pytest.raises(SpecError) as bad_order:
        BACKEND.supports(problem, {"continuum_order": 5})
    assert bad_order.value.field == "param.continuum_order"
    # given spacings must be enough for the a^6 fit; the default ladder (four) gains a coarser fifth
    with pytest.raises(SpecError) as short:
        BACKEND.supports(problem, {"continuum_order": 6, "spacings": (0.4, 0.3, 0.2, 0.1)})
    assert short.value.field == "param.spacings" and "at least 5" in short.value.reason
    default = BACKEND.ladder(problem, BACKEND.resolve_params({}))
    widened = BACKEND.ladder(problem, BACKEND.resolve_params({"continuum_order": 6}))
    assert widened.spacings[1:] == pytest.approx(default.spacings)
    assert widened.spacings[0] / widened.spacings[1] == pytest.approx(default.spacings[0] / default.spacings[1])


def test_non_harmonic_trap_free_spectrum_matches_a_spectral_one_body_solution():
    # g = 0 in a harmonic trap with a Gaussian barrier: the continuum energy is the sum of the lowest
    # one-body levels, computed here independently with the sinc discrete-variable representation
    # (D. T. Colbert, W. H. Miller, J. Chem. Phys. 96, 1982 (1992): T_ii = pi^2/(6 m h^2),
    # T_ij = (-1)^(i-j) / (m h^2 (i-j)^2)), which converges exponentially in the grid step h.
    problem = Problem.from_dict(
        {
            "up": {"count": 1},
            "down": {"count": 1, "mass": 2.0},
            "trap": {"shape": "harmonic+gaussian", "barrier_height": 3.0, "barrier_width": 0.5},
            "interaction": {"g": 0.0},
            "targets": {"states": 2},
        }
    )
    x = np.linspace(-9, 9, 241)
    h = x[1] - x[0]
    i = np.arange(len(x))
    diff = i[:, None] - i[None, :]
    shape = np.where(diff == 0, math.pi**2 / 6, (-1.0) ** diff / np.where(diff == 0, 1, diff) ** 2)
    levels = {}
    for s in problem.species:
        kinetic = shape / (s.mass * h**2)
        levels[s.name] = np.linalg.eigvalsh(kinetic + np.diag(problem.trap.potential(x, s)))
    expected = free_many_body_levels(levels["up"], levels["down"], 1, 1, 2)
    result = BACKEND.solve(problem, spacings=(0.25, 0.2, 0.15, 0.12))
    for k in range(2):
        assert abs(result.energies[k] - expected[k]) <= result.energy_errors[k]
        assert abs(result.energies[k] - expected[k]) <= 1e-5 * expected[k]


def test_momentum_pair_correlation_equals_the_pair_tensor_route_and_integrates_correctly():
    problem = Problem.create(2, 1, 1.5, observables=["pair_momentum", "noise", "pair_position", "momentum"])
    grid = lattice.make_grid(problem, 0.5, 3.0)
    hamiltonian = lattice_hamiltonian(problem, grid)
    _, vectors = fock_ed.lowest_eigenpairs(hamiltonian.as_linear_operator(), 1)
    momenta = np.linspace(-grid.brillouin_zone, grid.brillouin_zone, 61)
    amplitudes = lattice.momentum_orbitals(grid, momenta)
    fast = pair_correlation(hamiltonian.basis, vectors[:, 0], amplitudes)
    # independent route: the engine's pair tensor <c+_a c_b d+_c d_d> evaluated on the same amplitudes
    gamma = fock_ed.pair_tensor(hamiltonian.basis, vectors[:, 0])
    np.testing.assert_allclose(fast, fock_ed.pair_on_grid(gamma, amplitudes, amplitudes), atol=1e-12)
    # the full-zone integral of G(p1, p2) is N_up N_down (periodic integrand: the trapezoid rule is exact)
    step = momenta[1] - momenta[0]
    assert np.sum(fast[:-1, :-1]) * step**2 == pytest.approx(2.0, abs=1e-10)


def test_noise_vanishes_without_interaction_and_observables_are_normalized():
    # g = 0: the state is a product of the two species' Slater determinants, so
    # G(p1, p2) = n_up(p1) n_down(p2) exactly and the noise map C is zero (closed form).
    wanted = ["pair_momentum", "noise", "pair_position", "momentum", "density", "obdm"]
    free = Problem.create(2, 1, 0.0, observables=wanted)
    result = BACKEND.solve(free, spacings=(0.6, 0.5), x_max=4.0)
    assert np.max(np.abs(result.observables["noise"].values)) < 1e-12
    assert result.scalars["noise_integral"] < 1e-20
    interacting = BACKEND.solve(free.at(2.0).with_targets(observables=wanted), spacings=(0.6, 0.5), x_max=4.0)
    obs = interacting.observables
    assert np.max(np.abs(obs["noise"].values)) > 1e-4
    a = interacting.diagnostics["spacings"][-1]
    assert np.sum(obs["density_up"].values) * a == pytest.approx(2.0, abs=1e-10)
    assert np.sum(obs["pair_position"].values) * a * a == pytest.approx(2.0, abs=1e-10)
    p = obs["momentum_down"].axes["p"]
    assert np.trapezoid(obs["momentum_down"].values, p) == pytest.approx(1.0, abs=2e-3)


@pytest.mark.skipif(importlib.util.find_spec("trapbench.backends.oscillator_ed") is None, reason="oscillator-ed not installed yet")
@pytest.mark.parametrize(
    "n_up, n_down, mass_down, spacings, x_max",
    [(2, 1, 20 / 3, (0.3, 0.25, 0.2), 5.5), (2, 2, 1.0, (0.6, 0.5, 0.4), 5.5)],
)
def test_few_body_energies_agree_with_oscillator_ed_within_combined_error_bars(n_up, n_down, mass_down, spacings, x_max):
    # An independent method: exact diagonalization in the harmonic-oscillator basis (other backend).
    problem = Problem.create(n_up, n_down, 1.0, mass_down=mass_down)
    other = get("oscillator-ed").solve(problem)
    result = BACKEND.solve(problem, spacings=spacings, x_max=x_max)
    bar = result.error_estimate + (other.error_estimate or 0.0)
    assert abs(result.energies[0] - other.energies[0]) <= bar
    assert result.error_estimate < 1e-2


def test_mass_ratio_40_over_6_runs_at_g_0_to_the_closed_form_and_large_systems_are_refused():
    # g = 0 with the same omega: E = (N_up^2 + N_down^2) / 2 for any masses (textbook oscillator towers).
    result = BACKEND.solve(Problem.create(2, 1, 0.0, mass_down=20 / 3), spacings=(0.3, 0.25, 0.2), x_max=5.5)
    assert abs(result.energies[0] - 2.5) <= result.error_estimate
    assert result.states[0]["parity"] == -1  # two up fermions in orbitals 0 and 1
    assert not BACKEND.supports(Problem.create(4, 4, 2.0))
    assert "lattice-dmrg" in BACKEND.supports(Problem.create(4, 4, 2.0)).reason


def test_box_trap_continuum_limit_equals_the_hard_wall_levels():
    # Hard walls at |x| = W: one-body levels (n pi / 2W)^2 / (2 m), n = 1, 2, ... (closed form);
    # at g = 0 the 1+1 levels are sums of one level per species.
    problem = Problem.from_dict(
        {
            "up": {"count": 1},
            "down": {"count": 1, "mass": 2.0},
            "trap": {"shape": "box", "half_width": 2.0},
            "interaction": {"g": 0.0},
            "targets": {"states": 3},
        }
    )
    result = BACKEND.solve(problem)
    level = lambda n, m: (n * math.pi / 4.0) ** 2 / (2 * m)  # noqa: E731
    expected = sorted(level(i, 1.0) + level(j, 2.0) for i in range(1, 5) for j in range(1, 5))[:3]
    for k in range(3):
        assert abs(result.energies[k] - expected[k]) <= result.energy_errors[k]
        assert abs(result.energies[k] - expected[k]) <= 1e-6 * expected[k]


def test_a_box_too_small_for_the_density_is_reported():
    # x_max = 2.5 cuts the 1+1 ground state (density ~ exp(-x^2)) at ~1e-3 of its peak.
    result = BACKEND.solve(Problem.create(1, 1, 1.0), spacings=(0.4, 0.3), x_max=2.5)
    assert any("lattice edge" in w and "increase x_max" in w for w in result.warnings)
    assert not BACKEND.solve(Problem.create(1, 1, 1.0), spacings=(0.4, 0.3), x_max=6.0).warnings


def test_species_without_particles_gives_the_free_fermion_levels():
    # N spinless fermions in a harmonic trap: E = N^2/2 and N^2/2 + 1 (textbook result); g acts on nothing
    result = get("lattice-ed").solve(Problem.create(2, 0, 1.0, states=2))
    for energy, exact in zip(result.energies, (2.0, 3.0)):
        assert abs(energy - exact) <= result.error_estimate
        assert abs(energy - exact) < 1e-4 * exact


def test_default_ladder_is_fitted_to_the_dimension_budget_and_a_larger_budget_is_honoured():
    # 2+1 with masses 0.15 / 1: the light species spreads over |x| ~ 17 while the heavy one needs
    # a ~ 0.12, a basis of 1.2e7 states; the default ladder is scaled to the finest that fits.
    problem = Problem.create(2, 1, 5.0, mass_up=0.15)
    params = BACKEND.resolve_params({})
    ladder = BACKEND.ladder(problem, params)
    assert ladder.fitted and "max_dimension" in ladder.fitted
    finest = lattice.make_grid(problem, ladder.spacings[-1], ladder.half_width)
    assert dimension(problem, finest.sites) <= params["max_dimension"] < dimension(problem, finest.sites + 1)
    shape = np.array(lattice.DEFAULT_SPACING_FRACTIONS) / min(lattice.DEFAULT_SPACING_FRACTIONS)
    np.testing.assert_allclose(np.array(ladder.spacings) / ladder.spacings[-1], shape, rtol=1e-12)
    assert BACKEND.supports(problem)
    # no useful ladder of 3+3 fits the default budget; a user's larger max_dimension is honoured
    large = Problem.create(3, 3, 2.0)
    refusal = BACKEND.supports(large)
    assert not refusal and "max_dimension" in refusal.reason
    assert BACKEND.supports(large, BACKEND.resolve_params({"max_dimension": "2e9"}))
    assert BACKEND.admits(large, {"max_dimension": 2_000_000_000})
    # given spacings beyond the budget are refused, naming the parameter to raise
    with pytest.raises(SpecError, match="param.max_dimension"):
        BACKEND.ladder(problem, BACKEND.resolve_params({"spacings": (0.3, 0.2)}))


def test_a_ladder_fitted_to_a_small_budget_still_covers_busch_and_says_so():
    # Reference: the two-body backend (Busch et al., Found. Phys. 28, 549 (1998), exact root).
    problem = Problem.create(1, 1, 2.0)
    exact = get("two-body").solve(problem).energies[0]
    result = BACKEND.solve(problem, max_dimension=3000)
    assert max(dimension(problem, sites) for sites in result.diagnostics["sites"]) <= 3000
    assert abs(result.energies[0] - exact) <= result.energy_errors[0]
    assert abs(result.energies[0] - exact) <= 1e-3 * exact
    assert any("finest ladder that fits" in w and "error bar it gives" in w for w in result.warnings)


@pytest.mark.parametrize("mass_down, g", CASES_1P1)
def test_lattice_scalars_carry_error_bars_that_cover_hellmann_feynman(mass_down, g):
    # <sum delta> = dE/dg (Hellmann-Feynman) of the exact two-body root (Busch et al.), differentiated
    # here by a central difference; <V_trap> = (E - (g/2) dE/dg) / 2 by the virial theorem
    # E = 2 <V_trap> + (g/2) <sum delta> (common practice for contact interactions in a harmonic trap).
    step = 1e-4
    energy = lambda coupling: get("two-body").solve(Problem.create(1, 1, coupling, mass_down=mass_down)).energies[0]  # noqa: E731
    delta = (energy(g + step) - energy(g - step)) / (2 * step)
    trap = (energy(g) - 0.5 * g * delta) / 2
    problem = Problem.create(1, 1, g, mass_down=mass_down)
    scale = lattice.length_scale(problem)
    result = BACKEND.solve(problem, spacings=[f * scale for f in (0.4, 0.3, 0.22, 0.16)], x_max=5.0)
    for name, exact in (("delta", delta), ("trap_energy", trap)):
        assert abs(result.scalars[name] - exact) <= result.scalar_errors[name]
        assert result.scalar_errors[name] < 1e-2 * abs(exact)


@pytest.mark.parametrize("mass_up, mass_down, g", [(1.0, 1.0, 2.0), (1.0, 1.0, -3.0), (1.0, 2.0, -3.0)])
def test_lattice_densities_carry_error_bars_that_cover_three_body_densities(mass_up, mass_down, g):
    # three-body's densities (its own bars 1e-6 or tighter) as the truth; two coarse spacings, where the
    # a^2 law of the three-point Laplacian is least settled. With two spacings the density is the finest
    # lattice's and its bar the distance to the continuum under an a^1 law: it must hold the error, and be no
    # wider than four times it.
    problem = Problem.create(2, 1, g, mass_up=mass_up, mass_down=mass_down, observables=["density"])
    scale = lattice.length_scale(problem)
    result = BACKEND.solve(problem, spacings=[0.6 * scale, 0.45 * scale], x_max=5.0)
    exact = get("three-body").solve(problem)
    for name in ("density_up", "density_down"):
        density, reference = result.observables[name], exact.observables[name]
        assert reference.error < 1e-6
        truth = CubicSpline(reference.axes["x"], reference.values)(density.axes["x"])  # error ~1e-6 on its grid
        error = float(np.max(np.abs(density.values - truth)))
        assert error <= density.error <= 4 * error


@pytest.mark.parametrize("mass_up, mass_down, g", [(1.0, 1.0, -3.0), (1.0, 2.0, -3.0), (2.0, 1.0, 5.0)])
def test_densities_from_three_spacings_are_extrapolated_and_their_bars_cover_three_body(mass_up, mass_down, g):
    # Richardson's a^2 rule on the two finest of three coarse spacings (measured gain over the finest lattice's own
    # density 7-60 here), its bar the change from the same rule one spacing coarser as an h^2 remainder; three-body's
    # densities as truth.
    problem = Problem.create(2, 1, g, mass_up=mass_up, mass_down=mass_down, observables=["density"])
    spacings = [f * lattice.length_scale(problem) for f in (0.6, 0.45, 0.34)]
    result = BACKEND.solve(problem, spacings=spacings, x_max=5.0)
    finest = solve_on_grid(problem, lattice.make_grid(problem, spacings[-1], 5.0), True)
    finest_observables, _ = finest.observe(int(np.argmin(finest.energies)), 0)
    exact = get("three-body").solve(problem)
    for name in ("density_up", "density_down"):
        density, reference = result.observables[name], exact.observables[name]
        truth = CubicSpline(reference.axes["x"], reference.values)(density.axes["x"])
        error = float(np.max(np.abs(density.values - truth)))
        unextrapolated = float(np.max(np.abs(finest_observables[name].values - truth)))
        assert error <= density.error
        assert error <= unextrapolated / 5


def test_continuum_density_removes_the_a2_term_and_its_bar_holds_what_is_left():
    # site occupations a (f + a^2 u + a^4 w) of smooth f, u, w: Richardson's rule on the two finest spacings a1 < a2
    # cancels the a^2 term and leaves -a1^2 a2^2 w (closed form) plus the spline's error; the bar holds it
    problem = Problem.create(1, 1, 2.0)
    grids = [lattice.make_grid(problem, a, 5.0) for a in (0.3, 0.22, 0.16)]
    f = lambda x: np.exp(-x**2) / np.sqrt(np.pi)  # noqa: E731
    u = lambda x: (x**2 - 0.5) * np.exp(-x**2)  # noqa: E731
    w = lambda x: np.exp(-(x**2) / 2)  # noqa: E731
    occupations = [g.spacing * (f(g.x) + g.spacing**2 * u(g.x) + g.spacing**4 * w(g.x)) for g in grids]
    density, bar = lattice.continuum_density(grids, occupations)
    finest = grids[-1]
    error = float(np.max(np.abs(density - f(finest.x))))
    left = (grids[-1].spacing * grids[-2].spacing) ** 2 * float(np.max(np.abs(w(finest.x))))
    assert error == pytest.approx(left, rel=1e-2)
    assert error <= bar
    two = lattice.continuum_density(grids[1:], occupations[1:])  # two spacings: the finest, with an a^1 bar
    np.testing.assert_allclose(two[0], occupations[-1] / finest.spacing)
    assert float(np.max(np.abs(two[0] - f(finest.x)))) <= two[1]
