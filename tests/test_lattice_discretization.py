"""Checks of the shared lattice discretization against closed forms (no solver involved)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from trapbench.backends import lattice
from trapbench.problems.errors import SpecError
from trapbench.problems.spec import Problem


def box_problem(half_width: float = 2.0, mass_down: float = 1.0) -> Problem:
    return Problem.from_dict(
        {
            "up": {"count": 2, "mass": 1.0},
            "down": {"count": 1, "mass": mass_down},
            "trap": {"shape": "box", "half_width": half_width},
            "interaction": {"g": 0.0},
        }
    )


@pytest.mark.parametrize("mass", [1.0, 20 / 3])
def test_box_lattice_spectrum_is_the_tridiagonal_toeplitz_closed_form(mass):
    # Closed form (common practice): the L x L matrix with 2t on the diagonal and -t beside it has
    # eigenvalues 2t (1 - cos(n pi / (L + 1))), n = 1..L, and sine eigenvectors.
    problem = box_problem(mass_down=mass)
    grid = lattice.make_grid(problem, 0.1, problem.trap.half_width)
    assert grid.sites == 39 and grid.x[0] == pytest.approx(-2.0 + grid.spacing)
    species = problem.down
    t = lattice.hopping(species, grid.spacing)
    values, vectors = lattice.one_body_spectrum(problem, species, grid)
    n = np.arange(1, grid.sites + 1)
    np.testing.assert_allclose(values, 2 * t * (1 - np.cos(n * np.pi / (grid.sites + 1))), rtol=1e-12, atol=1e-10)
    sine = np.sin(np.pi * (np.arange(1, grid.sites + 1)) / (grid.sites + 1))
    assert abs(vectors[:, 0] @ sine) / np.linalg.norm(sine) == pytest.approx(1.0, abs=1e-12)
    # and the continuum limit: hard-wall levels hbar^2 (n pi / 2W)^2 / (2 m)
    assert values[0] == pytest.approx((math.pi / 4.0) ** 2 / (2 * mass), rel=2e-3)


def test_harmonic_lattice_levels_extrapolate_to_oscillator_levels():
    # Oscillator levels (n + 1/2) omega for mass 20/3 with its own omega = 1.
    problem = Problem.create(2, 1, 0.0, mass_down=20 / 3)
    width = lattice.half_width(problem)
    spacings = lattice.default_spacings(problem)
    levels = []
    for a in spacings:
        grid = lattice.make_grid(problem, a, width)
        values, _ = lattice.one_body_spectrum(problem, problem.down, grid, count=4)
        levels.append((grid.spacing, values))
    for n in range(4):
        fit = lattice.CONTINUUM_MODEL([s for s, _ in levels], [v[n] for _, v in levels])
        assert abs(fit.value - (n + 0.5)) < fit.error
        assert abs(fit.value - (n + 0.5)) < 1e-5 * (n + 0.5)  # the issue asks 1e-4 relative of energies
    # the error is O(a^2): halving ratios of successive errors follow (a1/a2)^2 within 5 %
    errors = [v[2] - 2.5 for _, v in levels]
    ratio = errors[0] / errors[-1]
    assert ratio == pytest.approx((levels[0][0] / levels[-1][0]) ** 2, rel=0.05)


def test_half_width_keeps_the_widest_orbital_off_the_edges_also_with_a_barrier():
    plain = Problem.create(3, 3, 2.0)
    barrier = Problem.from_dict(
        {
            "up": {"count": 3},
            "down": {"count": 3},
            "trap": {"shape": "harmonic+gaussian", "barrier_height": 30.0, "barrier_width": 0.5},
            "interaction": {"g": 2.0},
        }
    )
    for problem in (plain, barrier):
        width = lattice.half_width(problem)
        # fermionization at g > 0: orbital N - 1 = 5 must fit; its turning point is sqrt(11)
        assert width > math.sqrt(11)
        grid = lattice.make_grid(problem, 0.1, width)
        assert lattice.edge_weight(problem, problem.up, grid) < lattice.DEFAULT_EDGE_TOLERANCE
    # a barrier of height 30 pushes the orbitals out: a smaller box would fail the edge test
    narrow = lattice.make_grid(barrier, 0.1, lattice.half_width(plain) - 1.5)
    assert lattice.edge_weight(barrier, barrier.up, narrow) > lattice.DEFAULT_EDGE_TOLERANCE


def test_lattice_momentum_distribution_has_continuum_normalization():
    # The oscillator ground state phi(x) = pi^(-1/4) exp(-x^2/2) has |phi(p)|^2 = pi^(-1/2) exp(-p^2)
    # (Fourier transform with 1/sqrt(2 pi), a closed form). On the lattice c_j = sqrt(a) phi(x_j).
    problem = Problem.create(1, 1, 0.0)
    grid = lattice.make_grid(problem, 0.05, 8.0)
    c = math.sqrt(grid.spacing) * math.pi**-0.25 * np.exp(-grid.x**2 / 2)
    momenta = np.linspace(-6, 6, 241)
    n_p = lattice.momentum_distribution(np.outer(c, c), grid, momenta)
    np.testing.assert_allclose(n_p, np.exp(-momenta**2) / math.sqrt(math.pi), atol=1e-10)
    full = np.linspace(-grid.brillouin_zone, grid.brillouin_zone, 4001)
    assert np.trapezoid(lattice.momentum_distribution(np.outer(c, c), grid, full), full) == pytest.approx(1.0, abs=1e-8)


def test_grid_is_symmetric_and_bad_spacings_are_refused():
    problem = Problem.create(1, 1, 1.0)
    grid = lattice.make_grid(problem, 0.3, 6.0)
    np.testing.assert_array_equal(grid.x, -grid.x[::-1])
    with pytest.raises(SpecError, match="param.spacings"):
        lattice.make_grid(problem, -0.1, 6.0)
    assert lattice.onsite_coupling(2.0, 0.25) == 8.0
