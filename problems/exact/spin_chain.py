"""The effective spin chain of strongly repelling fermions: its configurations and Hamiltonian.

To first order in 1/g about fermionization (equal masses, common harmonic trap) the C(N, N_up)
degenerate states split as E = N^2/2 - K/g with K an eigenvalue of the open chain

    H_spin = sum_{k=1}^{N-1} J_k (1 - P_{k,k+1})

in the sector of N_up up spins (Volosniev et al., Nat. Commun. 5, 5300 (2014); Deuretzbacher et al.,
Phys. Rev. A 90, 013611 (2014); journal references from memory); P_{k,k+1} swaps the spins on sites k
and k+1 and J_k are the exchange integrals (``exchange``). Units as for J_k.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np


def spin_configurations(n_up: int, n_down: int) -> list[tuple[int, ...]]:
    """All orderings of the spins along the line (1 = up, 0 = down), in descending lexicographic order."""
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
