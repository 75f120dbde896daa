"""Exchange coefficients J_k of the strong-coupling spin chain, by an exact reduction to 1D integrals,
and the ordered one-body densities of the spinless Slater determinant.

Near fermionization (g -> +inf, equal masses m = 1, harmonic trap omega = 1) the C(N, N_up) degenerate
states split to first order in 1/g like an open spin-1/2 chain H_spin = sum_k J_k (1 - P_{k,k+1})
(A. G. Volosniev et al., Nat. Commun. 5, 5300 (2014); F. Deuretzbacher et al., Phys. Rev. A 90, 013611
(2014); J. Levinsen et al., Sci. Adv. 1, e1500197 (2015); journal references from memory), with

    J_k = N! int_{y_1 < ... < y_N} delta(y_k - y_{k+1}) |d Phi_F / d y_k|^2 dy,

Phi_F the normalized Slater determinant of the N lowest oscillator orbitals phi_0..phi_{N-1}.

Reduction (derived here):

1. At y_k = y_{k+1} = z the derivative of det[phi_j(y_i)] is the determinant with the rows
   phi'(z), phi(z) in place of particles k, k+1.
2. The remaining N-2 coordinates are integrated with the weight 1 below z and t above z. By
   Andreief's identity and Jacobi's complementary-minor theorem the result is (N-2)! P(z, t) with

       P(z, t) = det [[0, B^T], [B, G(z, t)]],   B = [phi'(z), phi(z)] (N x 2),
       G(z, t) = A(z) + t (1 - A(z)),            A_jl(z) = int_{-inf}^z phi_j phi_l dx.

   P is a polynomial of degree N-2 in t; its coefficient of t^(N-k-1) is exactly the ordered
   integral with k-1 coordinates below z and N-k-1 above, so J_k = int dz [t^(N-k-1)] P(z, t).
   The coefficients are read off by a discrete Fourier transform over N-1 points on |t| = 1.
3. A(z) is closed form: off the diagonal (j - l) A_jl = -(phi_l phi_j' - phi_j phi_l')/2 (from the
   oscillator equation), and on the diagonal A_jj = A_{j-1,j-1} + (phi_{j-1} phi_{j-1}' - z phi_{j-1}^2)/(2j),
   A_00 = (1 + erf z)/2 (from phi_j = a^dagger phi_{j-1}/sqrt(j) and integration by parts).
4. The z integral runs over [-L, L] with L = sqrt(2N + 1) + 9 (the integrand is below 1e-30 beyond)
   by Gauss-Legendre quadrature; the node count doubles until two successive results agree to
   ``tolerance`` (the achieved difference is returned as the convergence check).

The same construction with one fixed row gives the density of the i-th particle from the left,
rho_i(x) = [t^(N-i)] (-det [[0, phi(x)^T], [phi(x), G(x, t)]]).
Units: hbar = m = omega = 1; J_k in hbar omega times the coupling unit sqrt(hbar^3 omega/m).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy.special import erf

from .oscillator import hermite_functions_with_derivatives

MAX_PARTICLES = 16


def cumulative_overlaps(n_orbitals: int, z: np.ndarray) -> np.ndarray:
    """A_jl(z) = int_{-inf}^z phi_j phi_l dx in closed form (shape (len(z), n, n)); see the module docstring."""
    z = np.atleast_1d(np.asarray(z, dtype=float))
    phi, dphi = hermite_functions_with_derivatives(n_orbitals, z)
    a = np.empty((z.size, n_orbitals, n_orbitals))
    diagonal = 0.5 * (1.0 + erf(z))
    a[:, 0, 0] = diagonal
    for j in range(1, n_orbitals):
        diagonal = diagonal + (phi[j - 1] * dphi[j - 1] - z * phi[j - 1] ** 2) / (2 * j)
        a[:, j, j] = diagonal
    for j in range(n_orbitals):
        for l in range(j):
            value = -(phi[l] * dphi[j] - phi[j] * dphi[l]) / (2.0 * (j - l))
            a[:, j, l] = value
            a[:, l, j] = value
    return a


def _ordered_coefficients(fixed_rows: np.ndarray, overlaps: np.ndarray, sign: float) -> np.ndarray:
    """Coefficients c_m(z) of sign * det [[0, B^T], [B, A + t (1 - A)]] in powers t^m (shape (len(z), degree+1)).

    ``fixed_rows`` has shape (len(z), N, r) (the r fixed rows B), ``overlaps`` shape (len(z), N, N).
    """
    n_points, n, r = fixed_rows.shape
    degree = n - r
    samples = degree + 1
    roots = np.exp(2j * np.pi * np.arange(samples) / samples)
    bordered = np.zeros((n_points, samples, n + r, n + r), dtype=complex)
    eye = np.eye(n)
    for s, t in enumerate(roots):
        bordered[:, s, r:, r:] = overlaps + t * (eye - overlaps)
    bordered[:, :, r:, :r] = fixed_rows[:, None, :, :]
    bordered[:, :, :r, r:] = np.swapaxes(fixed_rows, 1, 2)[:, None, :, :]
    values = sign * np.linalg.det(bordered)  # (n_points, samples)
    coefficients = np.fft.fft(values, axis=1) / samples  # c_m = (1/S) sum_s v_s t_s^(-m)
    return coefficients.real


def _exchange_integrand(n: int, z: np.ndarray) -> np.ndarray:
    """[t^(N-k-1)] P(z, t) for k = 1..N-1 (shape (len(z), N-1)); see the module docstring."""
    phi, dphi = hermite_functions_with_derivatives(n, z)
    rows = np.stack([dphi.T, phi.T], axis=2)  # (len(z), N, 2)
    coefficients = _ordered_coefficients(rows, cumulative_overlaps(n, z), 1.0)
    # J_k uses the power m = N - k - 1 for k = 1..N-1, i.e. m = N-2 .. 0
    return coefficients[:, ::-1]


def ordered_densities(n: int, x: np.ndarray) -> np.ndarray:
    """rho_i(x), i = 1..N: density of the i-th particle from the left in Phi_F (shape (N, len(x))).

    Each integrates to 1 and they sum to the total density sum_j phi_j(x)^2.
    """
    x = np.atleast_1d(np.asarray(x, dtype=float))
    phi, _ = hermite_functions_with_derivatives(n, x)
    coefficients = _ordered_coefficients(phi.T[:, :, None], cumulative_overlaps(n, x), -1.0)
    # rho_i uses the power m = N - i for i = 1..N
    return coefficients[:, ::-1].T


@dataclass(frozen=True)
class ExchangeCoefficients:
    """J_1..J_{N-1} with the quadrature that produced them and its convergence check."""

    n_particles: int
    values: tuple[float, ...]
    nodes: int
    convergence: float  # max |J(nodes) - J(nodes/2)|


@lru_cache(maxsize=None)
def exchange_coefficients(n_particles: int, tolerance: float = 1e-12) -> ExchangeCoefficients:
    """J_k for N spinless fermions in the oscillator (m = omega = 1), to ``tolerance`` (absolute)."""
    if not 2 <= n_particles <= MAX_PARTICLES:
        raise ValueError(f"exchange coefficients need 2 <= N <= {MAX_PARTICLES}, got {n_particles}")
    half_width = math.sqrt(2 * n_particles + 1) + 9.0
    previous = None
    nodes = 64
    while True:
        t, w = np.polynomial.legendre.leggauss(nodes)
        z, weights = half_width * t, half_width * w
        values = weights @ _exchange_integrand(n_particles, z)
        if previous is not None:
            change = float(np.max(np.abs(values - previous)))
            if change < tolerance:
                return ExchangeCoefficients(n_particles, tuple(float(v) for v in values), nodes, change)
        if nodes >= 4096:
            raise RuntimeError(f"J_k for N = {n_particles} did not converge to {tolerance:g} with {nodes} nodes")
        previous = values
        nodes *= 2
