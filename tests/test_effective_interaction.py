"""Checks of the centre-of-mass-aware Okubo / Lee-Suzuki effective interaction (``effective_interaction``).

Independent references: exact two-dimensional Gauss-Hermite quadrature of the bracket overlap integrals
(scipy.special.roots_hermite; the integrand is a polynomial times exp(-Y^2 - y^2), so the rule is exact);
the exact contact tensor by one-dimensional Gauss-Hermite quadrature (``problems.exact.contact_quadrature``);
mpmath sums of the relative Green's function; the Busch roots in 30-digit arithmetic
(``problems.exact.busch.busch_even_level``); the ``three-body`` backend for 2+1.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from scipy.special import roots_hermite
from threadpoolctl import threadpool_limits

from trapbench.backends import effective_interaction as ei
from trapbench.problems import exact as ob
from trapbench.problems.exact.busch import busch_even_level


@pytest.fixture(autouse=True)
def one_blas_thread():
    with threadpool_limits(limits=1):
        yield


MASS_PAIRS = [(1.0, 1.0), (20 / 3, 1.0), (1.0, 0.15)]


# ----------------------------------------------------------------------------- brackets


@pytest.mark.parametrize("masses", MASS_PAIRS)
def test_brackets_are_orthogonal_per_shell(masses):
    """<N n|n1 n2> is a rotation of each shell: B_Q B_Q^T = 1 (common practice: an orthogonal change of basis);
    rounding accumulates along the recursion, measured 1.5e-12 at shell 40."""
    for shell in ei.talmi_brackets(40, *masses):
        assert np.abs(shell @ shell.T - np.eye(len(shell))).max() < 1e-11


@pytest.mark.parametrize("masses", MASS_PAIRS)
def test_brackets_match_the_overlap_integral(masses):
    """<N n|n1 n2> = int dY dy h_N(Y) h_n(y) h_n1(c Y + s y) h_n2(s Y - c y) (exact 2D Gauss-Hermite,
    scipy.special.roots_hermite; coordinates of the module docstring, derived there)."""
    c, s = ei.bracket_angle(*masses)
    q_max = 10
    x, w = roots_hermite(q_max + 2)  # degree <= 2 (q_max) per axis after removing exp(-t^2)
    big_y, rel_y = np.meshgrid(x, x, indexing="ij")
    weight = np.outer(w, w) * np.exp(big_y**2 + rel_y**2)
    y1, y2 = c * big_y + s * rel_y, s * big_y - c * rel_y
    h = lambda n, t: ob.hermite_function(n, t)  # noqa: E731
    shells = ei.talmi_brackets(q_max, *masses)
    for q in range(q_max + 1):
        for big_n in range(q + 1):
            for n1 in range(q + 1):
                integral = np.sum(weight * h(big_n, big_y) * h(q - big_n, rel_y) * h(n1, y1) * h(q - n1, y2))
                assert abs(integral - shells[q][big_n, n1]) < 1e-12


def test_equal_mass_brackets_have_the_textbook_values():
    """Equal masses, c = s = 1/sqrt(2): |1 0> = (|1>_cm |0> + |0>_cm |1>)/sqrt(2), |0 1> = (|1 0> - |0 1>)/sqrt(2),
    and swapping the particles multiplies <N n|n1 n2> by (-1)^n (y -> -y) (from memory; textbook algebra)."""
    shells = ei.talmi_brackets(12, 1.0, 1.0)
    r = 1 / math.sqrt(2)
    assert shells[1][1, 1] == pytest.approx(r, abs=1e-15)  # <N=1, n=0|1 0>
    assert shells[1][0, 1] == pytest.approx(r, abs=1e-15)  # <N=0, n=1|1 0>
    assert shells[1][1, 0] == pytest.approx(r, abs=1e-15)  # <N=1, n=0|0 1>
    assert shells[1][0, 0] == pytest.approx(-r, abs=1e-15)  # <N=0, n=1|0 1>
    for q, shell in enumerate(shells):
        sign = np.array([(-1) ** (q - big_n) for big_n in range(q + 1)])
        assert np.abs(shell[:, ::-1] - sign[:, None] * shell).max() < 1e-12


# ----------------------------------------------------------------------------- relative problem


@pytest.mark.parametrize("lam, level", [(1.4, 0), (1.4, 3), (-1.2, 0), (-2.5, 1), (8.0, 2)])
def test_exact_relative_coefficients_are_normalized_eigenvectors(lam, level):
    """G(E_k) = -1/lambda (Busch's equation in Green's-function form) and sum_n |<n|psi_k>|^2 = 1, both as
    mpmath sums over all even n of h_n(0)^2 / (e_n - E)^p, h_2j(0)^2 = binom(2j, j) 4^-j / sqrt(pi)
    (closed form of the Hermite functions at 0, from memory; checked against the recursion below); the sums
    use Levin's transformation (mpmath.nsum)."""
    energy = busch_even_level(lam, level)
    assert np.allclose(ei.hermite_at_zero(8)[::2] ** 2, [math.comb(2 * j, j) / 4**j / math.sqrt(math.pi) for j in range(5)])
    with mpmath.workdps(30):
        term = lambda j, p: mpmath.binomial(2 * j, j) / 4**j / mpmath.sqrt(mpmath.pi) / (2 * j + 0.5 - energy) ** p  # noqa: E731
        # Levin's transformation: the terms decay algebraically (j^(-3/2)), where plain nsum is inaccurate
        green = mpmath.nsum(lambda j: term(j, 1), [0, mpmath.inf], method="levin")
        norm = mpmath.nsum(lambda j: term(j, 2), [0, mpmath.inf], method="levin")
    assert float(green) == pytest.approx(-1 / lam, rel=1e-10)
    assert ei.green_derivative(energy, lam) == pytest.approx(float(norm), rel=1e-10)
    e_k, coeff = ei.relative_eigenvector(lam, level, 4000)
    assert e_k == pytest.approx(energy, abs=1e-12)
    # the partial norm approaches 1 from below; the tail beyond n = 4000 is ~ n^(-3/2) ~ 1e-5
    assert 1 - 3e-5 < np.sum(coeff**2) < 1


@pytest.mark.parametrize("lam", [2.0, -1.5])
def test_relative_effective_interaction_has_the_exact_levels(lam):
    """Self-consistency (by construction): h0 + W on the even states n <= n_max has the lowest exact
    relative levels (30-digit Busch roots); W is symmetric."""
    for n_max in (0, 6, 20):
        w = ei.relative_effective_interaction(lam, n_max)
        assert np.abs(w - w.T).max() < 1e-14
        levels = np.linalg.eigvalsh(w + np.diag(np.arange(0, n_max + 1, 2) + 0.5))
        exact = [busch_even_level(lam, k) for k in range(len(levels))]
        assert np.abs(levels - exact).max() < 1e-12


def test_relative_effective_interaction_approaches_the_bare_contact():
    """As the space grows the low-lying block of W tends to the bare lambda h_n(0) h_n'(0) (the
    transformation acts at the space's edge; common practice): the difference shrinks with n_max."""
    lam, block = 2.0, 3
    h0 = ei.hermite_at_zero(4)[::2]
    bare = lam * np.outer(h0, h0)
    gaps = [np.abs(ei.relative_effective_interaction(lam, n_max)[:block, :block] - bare).max() for n_max in (10, 40, 160)]
    # measured 0.26, -, 0.077: about n_max^(-1/2), the rate of the cusp's oscillator expansion
    assert gaps[0] > gaps[1] > gaps[2]
    assert gaps[2] < 0.5 * gaps[0]


# ----------------------------------------------------------------------------- lab-frame tensor


def pair_spectrum(tensor: np.ndarray, max_quanta: int) -> np.ndarray:
    """Eigenvalues of 1+1 in the basis n1 + n2 <= max_quanta: (n1 + n2 + 1) + V (omega = 1)."""
    pairs = [(a, q - a) for q in range(max_quanta + 1) for a in range(q + 1)]
    a, b = np.array(pairs).T
    h = tensor[a[:, None], b[:, None], a[None, :], b[None, :]] + np.diag(a + b + 1.0)
    return np.linalg.eigvalsh(h)


@pytest.mark.parametrize("masses", MASS_PAIRS)
def test_bracket_sum_of_the_bare_contact_is_the_quadrature_tensor(masses):
    """sum_N <N n'|a b> lambda h_n'(0) h_n(0) <N n|c d> = int phi_a phi_c chi_b chi_d dx for every pair inside
    the shells (exact Gauss-Hermite, ``problems.exact.contact_quadrature``)."""
    lam_max = 12
    m = lam_max + 1
    tensor = ei.pair_interaction_tensor(1.0, *masses, lam_max, m, m, effective=False)
    quad = ob.contact_quadrature(m, 1 / math.sqrt(masses[0]), m, 1 / math.sqrt(masses[1]))
    reference = np.einsum("q,qa,qb,qc,qd->abcd", quad.weights, quad.values_up, quad.values_down, quad.values_up, quad.values_down)
    inside = np.add.outer(np.arange(m), np.arange(m)) <= lam_max
    mask = inside[:, :, None, None] & inside[None, None, :, :]
    assert np.abs(tensor - reference)[mask].max() < 1e-13
    assert np.all(tensor[~mask] == 0)


@pytest.mark.parametrize("masses", MASS_PAIRS)
@pytest.mark.parametrize("g", [2.0, -1.0, 10.0])
def test_pair_in_the_truncated_basis_has_the_exact_spectrum(masses, g):
    """Self-consistency (true by construction, so it tests the brackets and the assembly, not the physics):
    1+1 in n1 + n2 <= Lambda with V_eff has exactly the levels N + 1/2 + e, e the even Busch roots
    (30 digits) for the relative space n <= Lambda - N and the odd levels n + 1/2."""
    lam_max = 14
    coupling = g * math.sqrt(masses[0] * masses[1] / sum(masses))
    tensor = ei.pair_interaction_tensor(g, *masses, lam_max, lam_max + 1, lam_max + 1)
    exact = []
    for big_n in range(lam_max + 1):
        top = lam_max - big_n
        exact += [big_n + 0.5 + busch_even_level(coupling, k) for k in range(top // 2 + 1)]
        exact += [big_n + 0.5 + n + 0.5 for n in range(1, top + 1, 2)]
    assert np.abs(pair_spectrum(tensor, lam_max) - np.sort(exact)).max() < 1e-11
    bare = ei.pair_interaction_tensor(g, *masses, lam_max, lam_max + 1, lam_max + 1, effective=False)
    assert np.abs(pair_spectrum(bare, lam_max)[0] - exact[0]) > 1e-3  # the bare contact is not exact there

