"""First-order perturbation theory against closed-form oscillator integrals computed here.

The reference integrals I_ij = int phi_i(x; b_up)^2 phi_j(x; b_down)^2 dx are evaluated with mpmath
(Hermite polynomials and adaptive quadrature), independently of the backend's Gauss-Hermite rule.
The equal-mass coefficients c1 sqrt(2 pi) = 3/2 (2+1), 11/4 (2+2), 321/64 (3+3) are exact rationals
(Gaussian integrals of products of Hermite functions, worked out by hand: from memory of the
computation, no published source); each is re-derived by the mpmath quadrature beside it.
"""

import math

import mpmath
import pytest

from trapbench.backends import get
from trapbench.problems import Problem


def orbital_squared(n: int, b: float):
    norm = 1 / (mpmath.sqrt(2**n * mpmath.factorial(n) * mpmath.sqrt(mpmath.pi)) * mpmath.sqrt(b))
    return lambda x: (norm * mpmath.hermite(n, x / b) * mpmath.exp(-(x**2) / (2 * b * b))) ** 2


def reference_slope(n_up: int, n_down: int, mass_up: float = 1.0, mass_down: float = 1.0) -> float:
    b_up, b_down = 1 / math.sqrt(mass_up), 1 / math.sqrt(mass_down)
    total = mpmath.mpf(0)
    for i in range(n_up):
        for j in range(n_down):
            fi, fj = orbital_squared(i, b_up), orbital_squared(j, b_down)
            total += mpmath.quad(lambda x: fi(x) * fj(x), [-mpmath.inf, 0, mpmath.inf])
    return float(total)


@pytest.fixture(scope="module")
def backend():
    return get("perturbative")


@pytest.mark.parametrize("n_up, n_down, rational", [(1, 1, 1.0), (2, 1, 1.5), (2, 2, 11 / 4), (3, 3, 321 / 64)])
def test_equal_mass_first_order_coefficients(backend, n_up, n_down, rational):
    g = 0.37
    result = backend.solve(Problem.create(n_up, n_down, g))
    slope = (result.energies[0] - (n_up**2 + n_down**2) / 2) / g
    assert slope * math.sqrt(2 * math.pi) == pytest.approx(rational, abs=1e-12)
    assert slope == pytest.approx(reference_slope(n_up, n_down), abs=1e-12)


@pytest.mark.parametrize("n_up, n_down, mass_down", [(1, 1, 20 / 3), (2, 1, 20 / 3), (2, 2, 3 / 20), (3, 1, 2.0)])
def test_unequal_mass_first_order_coefficients(backend, n_up, n_down, mass_down):
    result = backend.solve(Problem.create(n_up, n_down, 1.0, mass_down=mass_down))
    assert result.energies[0] - (n_up**2 + n_down**2) / 2 == pytest.approx(
        reference_slope(n_up, n_down, 1.0, mass_down), abs=1e-12
    )
    if (n_up, n_down) == (1, 1):
        # c1 = int phi_0^up(x)^2 phi_0^down(x)^2 dx = sqrt(mu/pi), mu = kappa/(1 + kappa) (Gaussian integral)
        mu = mass_down / (1 + mass_down)
        assert result.energies[0] - 1 == pytest.approx(math.sqrt(mu / math.pi), abs=1e-11)


def test_non_interacting_spectrum_and_degeneracies(backend):
    # 2+2 at g = 0: E = 4 + m_up + m_down; 2 fermions have 1, 1, 2 states at excitation m = 0, 1, 2
    # (partitions of m into at most 2 parts), so E = 6 has 2 + 1*1 + 2 = 5 states
    result = backend.solve(Problem.create(2, 2, 0.0, states=9))
    assert result.energies == pytest.approx([4, 5, 5, 6, 6, 6, 6, 6, 7])
    assert result.error_estimate == 0.0
    assert [s["degeneracy"] for s in result.states][:8] == [1, 2, 2, 5, 5, 5, 5, 5]


@pytest.mark.parametrize("mass_ratio, g", [(1.0, 1e-6), (20 / 3, 1e-6), (20 / 3, -1e-6)])
def test_degenerate_excited_manifold_matches_exact_two_body_slopes(backend, mass_ratio, g):
    # first-order slopes of the 1+1 excited levels from the exact solution by a small-g difference;
    # 8 states reach into the third excited manifold, whose partly shifted levels must all be listed
    exact = get("two-body").solve(Problem.create(1, 1, g, states=8, mass_down=mass_ratio))
    first = backend.solve(Problem.create(1, 1, g, states=8, mass_down=mass_ratio))
    for e_exact, e_first in zip(exact.energies, first.energies):
        assert abs(e_exact - e_first) < 1e-11


def test_unequal_frequencies_are_supported_and_exact_at_g0(backend):
    result = backend.solve(Problem.create(1, 2, 0.0, omega_down=0.5, states=3))
    # E = w_up/2 + w_down (1/2 + 3/2) + excitations of the slower species first
    assert result.energies == pytest.approx([0.5 + 1.0, 0.5 + 1.5, 0.5 + 2.0])


def test_parity_labels_with_unequal_frequencies(backend):
    # omega_down = 2: the level E = 2.5 + 2 holds (up excited twice, even) and (down excited once, odd)
    result = backend.solve(Problem.create(1, 1, 0.0, omega_down=2.0, states=6))
    labelled = sorted((round(e, 9), s["parity"]) for e, s in zip(result.energies, result.states))
    assert labelled == [(1.5, 1), (2.5, -1), (3.5, -1), (3.5, 1), (4.5, -1), (4.5, 1)]


def test_says_it_is_first_order(backend):
    result = backend.solve(Problem.create(2, 1, 0.5))
    assert result.error_estimate is None
    assert any("first-order" in w for w in result.warnings)


def test_strong_coupling_beyond_the_manifold_budget_is_refused_with_its_reason(backend, monkeypatch):
    # 3+3 at g = 30: ordering the first-order levels needs manifolds up to 10 quanta of excitation (the
    # lowest first-order level then has w = 0, E = 18, the fermionized energy of 3+3: six free fermions,
    # Girardeau, J. Math. Phys. 1, 516 (1960)); with a budget of 100
    # determinant pairs per manifold the request is refused, naming the manifold and the remedy
    from trapbench.backends import perturbative
    from trapbench.backends.base import Unsupported

    problem = Problem.create(3, 3, 30.0)
    assert backend.solve(problem).energies[0] == pytest.approx(18.0, abs=1e-9)
    monkeypatch.setattr(perturbative, "MAX_MANIFOLD_PAIRS", 100)
    with pytest.raises(Unsupported, match=r"determinant pairs \(limit 100\).*ED backend"):
        backend.solve(problem)
