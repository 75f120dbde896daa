"""Exchange coefficients J_k of the strong-coupling spin chain, and the chain's spectrum.

Near fermionization (g -> +inf, equal masses m = 1, harmonic trap omega = 1) the C(N, N_up)
degenerate states of N_up + N_down fermions split to first order in 1/g like an open spin-1/2 chain
(Volosniev et al., Nat. Commun. 5, 5300 (2014); Deuretzbacher et al., Phys. Rev. A 90, 013611
(2014); Levinsen et al., Sci. Adv. 1, e1500197 (2015)):

    E = N^2/2 - K/g + O(1/g^2),   K an eigenvalue of  H_spin = sum_{k=1}^{N-1} J_k (1 - P_{k,k+1}),

    J_k = N! int_{y_1 < ... < y_N} delta(y_k - y_{k+1}) |d Phi_F / d y_k|^2 dy,

with Phi_F the normalized Slater determinant of the N lowest oscillator orbitals phi_0..phi_{N-1}.

Numerical method (exact reduction to a one-dimensional integral, derived here):

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

The same construction with one fixed row gives the density of the i-th particle in the ordering,
rho_i(x) = [t^(N-i)] (-det [[0, phi(x)^T], [phi(x), G(x, t)]]), which with the spin-chain eigenvector
gives the spin-resolved densities at g = inf (Deuretzbacher et al. 2014):
n_s(x) = sum_i rho_i(x) Prob(site i carries spin s).
Units: hbar = m = omega = 1; J_k and K in hbar omega times the coupling unit sqrt(hbar^3 omega/m).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from itertools import combinations

import numpy as np
from scipy.special import erf

MAX_PARTICLES = 16
MAX_CHAIN_STATES = 3432  # C(14, 7): the dense chain Hamiltonian then takes ~94 MB


def chain_is_tractable(n_up: int, n_down: int) -> bool:
    """True when the (n_up, n_down) chain fits the dense diagonalization used here."""
    return 2 <= n_up + n_down <= MAX_PARTICLES and math.comb(n_up + n_down, n_up) <= MAX_CHAIN_STATES


def oscillator_orbitals(n_orbitals: int, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """phi_j(x) and phi_j'(x), j < n_orbitals, for the oscillator with m = omega = 1 (shape (n, len(x))).

    Stable three-term recurrence phi_{j+1} = sqrt(2/(j+1)) x phi_j - sqrt(j/(j+1)) phi_{j-1};
    phi_j' = sqrt(j/2) phi_{j-1} - sqrt((j+1)/2) phi_{j+1}.
    """
    x = np.asarray(x, dtype=float)
    phi = np.zeros((n_orbitals + 1, x.size))
    phi[0] = math.pi**-0.25 * np.exp(-(x**2) / 2)
    if n_orbitals >= 1:
        phi[1] = math.sqrt(2.0) * x * phi[0]
    for j in range(1, n_orbitals):
        phi[j + 1] = math.sqrt(2.0 / (j + 1)) * x * phi[j] - math.sqrt(j / (j + 1)) * phi[j - 1]
    dphi = np.empty((n_orbitals, x.size))
    for j in range(n_orbitals):
        lower = phi[j - 1] if j > 0 else 0.0
        dphi[j] = math.sqrt(j / 2) * lower - math.sqrt((j + 1) / 2) * phi[j + 1]
    return phi[:n_orbitals], dphi


def cumulative_overlaps(n_orbitals: int, z: np.ndarray) -> np.ndarray:
    """A_jl(z) = int_{-inf}^z phi_j phi_l dx in closed form (shape (len(z), n, n)); see the module docstring."""
    z = np.atleast_1d(np.asarray(z, dtype=float))
    phi, dphi = oscillator_orbitals(n_orbitals, z)
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
    phi, dphi = oscillator_orbitals(n, z)
    rows = np.stack([dphi.T, phi.T], axis=2)  # (len(z), N, 2)
    coefficients = _ordered_coefficients(rows, cumulative_overlaps(n, z), 1.0)
    # J_k uses the power m = N - k - 1 for k = 1..N-1, i.e. m = N-2 .. 0
    return coefficients[:, ::-1]


def ordered_densities(n: int, x: np.ndarray) -> np.ndarray:
    """rho_i(x), i = 1..N: density of the i-th particle from the left in Phi_F (shape (N, len(x))).

    Each integrates to 1 and they sum to the total density sum_j phi_j(x)^2.
    """
    x = np.atleast_1d(np.asarray(x, dtype=float))
    phi, _ = oscillator_orbitals(n, x)
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


def spin_configurations(n_up: int, n_down: int) -> list[tuple[int, ...]]:
    """All orderings of the spins along the line (1 = up, 0 = down), in lexicographic order."""
    n = n_up + n_down
    configurations = []
    for ups in combinations(range(n), n_up):
        configuration = [0] * n
        for i in ups:
            configuration[i] = 1
        configurations.append(tuple(configuration))
    return sorted(configurations, reverse=True)


def spin_chain_hamiltonian(couplings: tuple[float, ...], configurations: list[tuple[int, ...]]) -> np.ndarray:
    """Dense H_spin = sum_k J_k (1 - P_{k,k+1}) on the given configurations (one spin sector)."""
    index = {c: i for i, c in enumerate(configurations)}
    h = np.zeros((len(configurations), len(configurations)))
    for i, c in enumerate(configurations):
        for k, coupling in enumerate(couplings):
            if c[k] != c[k + 1]:
                swapped = list(c)
                swapped[k], swapped[k + 1] = swapped[k + 1], swapped[k]
                h[i, i] += coupling
                h[index[tuple(swapped)], i] -= coupling
    return h


@dataclass(frozen=True)
class SpinChainSpectrum:
    """K values (descending: ground state first), eigenvectors (columns) and chain-reversal parities."""

    configurations: list[tuple[int, ...]]
    k_values: np.ndarray
    vectors: np.ndarray
    reversal: np.ndarray  # +1 / -1: eigenvalue of reversing the chain
    couplings: ExchangeCoefficients

    @property
    def spatial_parity(self) -> np.ndarray:
        """Parity of the full state: (-1)^(N(N-1)/2) (parity of Phi_F) times the chain-reversal eigenvalue."""
        n = len(self.configurations[0])
        return (-1) ** (n * (n - 1) // 2) * self.reversal


@lru_cache(maxsize=64)
def spin_chain_spectrum(n_up: int, n_down: int, tolerance: float = 1e-12) -> SpinChainSpectrum:
    """Diagonalize H_spin in the sector (n_up, n_down); degenerate levels are split by chain reversal."""
    n = n_up + n_down
    if n < 2:
        raise ValueError("a spin chain needs at least two particles")
    couplings = exchange_coefficients(n, tolerance)
    configurations = spin_configurations(n_up, n_down)
    h = spin_chain_hamiltonian(couplings.values, configurations)
    # reversal commutes with H_spin (J_k = J_{N-k}): diagonalize within each reversal sector, whose
    # bases are (e_c +- e_reverse(c))/sqrt(2) and, for palindromes, e_c (in the + sector)
    index = {c: i for i, c in enumerate(configurations)}
    sectors = {1.0: [], -1.0: []}
    for i, c in enumerate(configurations):
        j = index[c[::-1]]
        if j == i:
            column = np.zeros(len(h))
            column[i] = 1.0
            sectors[1.0].append(column)
        elif i < j:
            for sign in (1.0, -1.0):
                column = np.zeros(len(h))
                column[i], column[j] = 1 / math.sqrt(2), sign / math.sqrt(2)
                sectors[sign].append(column)
    k_values, vectors, reversal = [], [], []
    for sign, columns in sectors.items():
        if not columns:
            continue
        basis = np.array(columns).T
        values, local = np.linalg.eigh(basis.T @ h @ basis)
        k_values.extend(values)
        vectors.append(basis @ local)
        reversal.extend([sign] * len(values))
    vectors = np.hstack(vectors)
    order = np.argsort(-np.asarray(k_values), kind="stable")
    k_values = np.asarray(k_values)[order]
    k_values[np.abs(k_values) < 1e-12] = 0.0
    return SpinChainSpectrum(configurations, k_values, vectors[:, order], np.asarray(reversal)[order], couplings)


def spin_resolved_densities(spectrum: SpinChainSpectrum, state: int, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """n_up(x), n_down(x) at g = inf for one eigenstate of the chain (each integrates to N_s)."""
    n = len(spectrum.configurations[0])
    probabilities = spectrum.vectors[:, state] ** 2
    up_probability = np.array([sum(p for p, c in zip(probabilities, spectrum.configurations) if c[i]) for i in range(n)])
    rho = ordered_densities(n, x)
    return up_probability @ rho, (1.0 - up_probability) @ rho
