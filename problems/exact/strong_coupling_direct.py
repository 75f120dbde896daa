"""Strong-coupling coefficients K by a route independent of the spin-chain solver, for N <= 4.

K is an eigenvalue of H_spin = sum_k J_k (1 - P_{k,k+1}) (``spin_chain``), with

    J_k = N! int_{y_1 < ... < y_N} delta(y_k - y_{k+1}) |d Phi_F / d y_k|^2 dy

(A. G. Volosniev et al., Nat. Commun. 5, 5300 (2014); F. Deuretzbacher et al., Phys. Rev. A 90, 013611
(2014); journal references from memory), Phi_F = det[phi_j(y_i)] / sqrt(N!) the Slater determinant of
the N lowest oscillator orbitals (m = omega = 1).

Route (shares no code with ``exchange``, which reduces J_k to one-dimensional integrals):
- the orbitals come from scipy.special.eval_hermite, phi_n = (2^n n! sqrt(pi))^(-1/2) H_n(y) exp(-y^2/2),
  with phi_n' = sqrt(2n) phi_{n-1} - y phi_n;
- at y_k = y_{k+1} = z, N! |d Phi_F/d y_k|^2 = det(M)^2 with the rows phi'(z), phi(z) in place of
  particles k, k+1; the N - 1 remaining ordered coordinates (z included) are integrated by nested
  Gauss-Legendre rules on [-L, L], L = sqrt(2N + 1) + 4 (each coordinate carries exp(-y^2) times a
  polynomial of degree <= 2(N - 1), below 1e-16 of its peak beyond L for N <= 4), each inner rule
  spanning the interval left by its neighbour;
- the rule is run at 64 and 80 nodes per coordinate and their difference is the stated uncertainty
  (measured: 5e-12 for N = 4, the finer rule then agrees with the 1D reduction of ``exchange`` to 4e-15);
- K in a parity sector: H_spin commutes with the chain reversal R, so the eigenvalues of H_spin + c R
  (c larger than the spread of H_spin) fall into two groups near +c and -c, the R = +1 and R = -1
  sectors; the spatial parity of a level is (-1)^(N(N-1)/2) times its R eigenvalue.
The cost grows like nodes^(N-1) determinants: N <= 4 (MAX_PARTICLES) takes ~3 CPU s; N = 5 would need ~4e7.
Units: hbar = m = omega = 1; J_k and K in hbar omega times sqrt(hbar^3 omega / m).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import special

from .spin_chain import spin_chain_hamiltonian, spin_configurations

MAX_PARTICLES = 4
NODE_COUNTS = (64, 80)  # coarse and fine rule per coordinate; their difference is the uncertainty
HALF_WIDTH_MARGIN = 4.0  # L = sqrt(2N + 1) + 4: the integrand is below 1e-16 of its peak beyond L for N <= 4


def _orbitals_with_derivatives(n: int, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """phi_j(y), phi_j'(y) for j < n from scipy's Hermite polynomials (shape (..., n))."""
    orders = np.arange(n)
    norms = 1.0 / np.sqrt(2.0**orders * special.factorial(orders) * math.sqrt(math.pi))
    y = np.asarray(y, dtype=float)[..., None]
    phi = norms * special.eval_hermite(orders, y) * np.exp(-(y**2) / 2)
    lower = np.concatenate([np.zeros_like(phi[..., :1]), phi[..., :-1]], axis=-1)
    dphi = np.sqrt(2.0 * orders) * lower - y * phi
    return phi, dphi


def _ordered_grid(below: int, above: int, nodes: int, half_width: float) -> tuple[np.ndarray, np.ndarray]:
    """Points (y_1..y_{k-1}, z, y_{k+2}..y_N) of y_1 < ... < z < ... < y_N in [-L, L] and their weights.

    Returns coordinates of shape (points, below + 1 + above), ordered left to right, and weights.
    """
    t, w = np.polynomial.legendre.leggauss(nodes)
    coordinates = [half_width * t]
    weights = half_width * w
    for _ in range(below):  # each new coordinate lies in [-L, the coordinate to its right]
        right = coordinates[0]
        scale = (right + half_width) / 2
        new = -half_width + scale[:, None] * (t[None, :] + 1)
        coordinates = [new.ravel()] + [np.repeat(c, nodes) for c in coordinates]
        weights = (weights[:, None] * scale[:, None] * w[None, :]).ravel()
    for _ in range(above):  # each new coordinate lies in [the coordinate to its left, L]
        left = coordinates[-1]
        scale = (half_width - left) / 2
        new = left[:, None] + scale[:, None] * (t[None, :] + 1)
        coordinates = [np.repeat(c, nodes) for c in coordinates] + [new.ravel()]
        weights = (weights[:, None] * scale[:, None] * w[None, :]).ravel()
    return np.stack(coordinates, axis=1), weights


def _exchange_integral(n: int, k: int, nodes: int) -> float:
    """J_k (k = 1..N-1) by nested Gauss-Legendre quadrature with ``nodes`` points per coordinate."""
    half_width = math.sqrt(2 * n + 1) + HALF_WIDTH_MARGIN
    points, weights = _ordered_grid(k - 1, n - k - 1, nodes, half_width)
    z = points[:, k - 1]
    phi_z, dphi_z = _orbitals_with_derivatives(n, z)
    others = np.delete(points, k - 1, axis=1)  # the N - 2 free coordinates, left to right
    phi_others, _ = _orbitals_with_derivatives(n, others)  # (points, N - 2, N)
    rows = [phi_others[:, i] for i in range(k - 1)] + [dphi_z, phi_z] + [phi_others[:, i] for i in range(k - 1, n - 2)]
    matrices = np.stack(rows, axis=1)  # (points, N, N): row i = particle i
    return float(weights @ np.linalg.det(matrices) ** 2)


@dataclass(frozen=True)
class DirectExchange:
    """J_1..J_{N-1} by direct quadrature, with the difference between the two rules as uncertainty."""

    n_particles: int
    values: tuple[float, ...]
    uncertainty: float


@lru_cache(maxsize=None)
def direct_exchange_coefficients(n_particles: int) -> DirectExchange:
    """J_k for N <= MAX_PARTICLES spinless fermions, from the defining integral (see the module docstring)."""
    if not 2 <= n_particles <= MAX_PARTICLES:
        raise ValueError(f"direct quadrature of J_k is done for 2 <= N <= {MAX_PARTICLES}, got {n_particles}")
    coarse, fine = ([_exchange_integral(n_particles, k, nodes) for k in range(1, n_particles)] for nodes in NODE_COUNTS)
    difference = max(abs(a - b) for a, b in zip(coarse, fine))
    return DirectExchange(n_particles, tuple(fine), max(difference, 1e-14 * max(fine)))


def strong_coupling_k_values(n_up: int, n_down: int, parity: int | None = None) -> tuple[list[float], float]:
    """(K values in descending order in the spatial parity sector ``parity`` (+1, -1, None = both), uncertainty).

    Uncertainty: by Weyl's inequality |dK| <= ||dH_spin|| <= sum_k |dJ_k| ||1 - P_{k,k+1}|| = 2 sum_k |dJ_k|,
    plus a rounding allowance of 1e-12 times the shift c.
    """
    n = n_up + n_down
    exchange = direct_exchange_coefficients(n)
    configurations = spin_configurations(n_up, n_down)
    h = spin_chain_hamiltonian(exchange.values, configurations)
    index = {c: i for i, c in enumerate(configurations)}
    reversal = np.zeros_like(h)
    for i, c in enumerate(configurations):
        reversal[index[c[::-1]], i] = 1.0
    shift = 4.0 * sum(exchange.values) + 1.0  # above the spread of H_spin (its norm is at most 2 sum J_k)
    values = np.linalg.eigvalsh(h + shift * reversal)
    spinless_parity = (-1) ** (n * (n - 1) // 2)
    k_values = []
    for value in values:
        r = 1 if value > 0 else -1
        if parity in (None, spinless_parity * r):
            k_values.append(float(value - shift * r))
    k_values.sort(reverse=True)
    error = 2 * (n - 1) * exchange.uncertainty + 1e-12 * shift
    return k_values, error
