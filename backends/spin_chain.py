"""The strong-coupling spin chain solved: its spectrum by chain-reversal sector, and spin-resolved densities.

Near fermionization (g -> +inf, equal masses m = 1, harmonic trap omega = 1) the C(N, N_up)
degenerate states of N_up + N_down fermions split to first order in 1/g like an open spin-1/2 chain
(Volosniev et al., Nat. Commun. 5, 5300 (2014); Deuretzbacher et al., Phys. Rev. A 90, 013611
(2014); Levinsen et al., Sci. Adv. 1, e1500197 (2015)):

    E = N^2/2 - K/g + O(1/g^2),   K an eigenvalue of  H_spin = sum_{k=1}^{N-1} J_k (1 - P_{k,k+1}).

The exact formulas -- J_k (reduced to 1D integrals) and H_spin -- live in ``trapbench.problems.exact``
(``exchange``, ``spin_chain``); this module is the method: it diagonalizes H_spin within each
chain-reversal sector (reversal commutes with H_spin since J_k = J_{N-k}), which labels the spatial
parity of every level, and builds the spin-resolved densities at g = inf (Deuretzbacher et al. 2014):
n_s(x) = sum_i rho_i(x) Prob(site i carries spin s), rho_i the density of the i-th particle from the left.
Units: hbar = m = omega = 1; K in hbar omega times the coupling unit sqrt(hbar^3 omega/m).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from ..problems.exact.exchange import MAX_PARTICLES, ExchangeCoefficients, exchange_coefficients, ordered_densities
from ..problems.exact.spin_chain import spin_chain_hamiltonian, spin_configurations

MAX_CHAIN_STATES = 3432  # C(14, 7): the dense chain Hamiltonian then takes ~94 MB


def chain_is_tractable(n_up: int, n_down: int) -> bool:
    """True when the (n_up, n_down) chain fits the dense diagonalization used here."""
    return 2 <= n_up + n_down <= MAX_PARTICLES and math.comb(n_up + n_down, n_up) <= MAX_CHAIN_STATES


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
