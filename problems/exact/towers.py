"""Oscillator towers: the levels of non-interacting fermions (g = 0) and of fermionized ones (g = +inf),
with multiplicities and parities, enumerated exactly.

Non-interacting (textbook result): a species of N_s identical fermions with frequency omega_s has
E_s = omega_s (N_s^2/2 + q_s), q_s quanta above its Fermi sea, with multiplicity the number of partitions
of q_s into at most N_s parts, and parity (-1)^(N_s (N_s - 1)/2 + q_s).

Fermionized (g = +inf, equal masses and frequencies; M. D. Girardeau, J. Math. Phys. 1, 516 (1960);
A. G. Volosniev et al., Nat. Commun. 5, 5300 (2014); F. Deuretzbacher et al., Phys. Rev. A 90, 013611
(2014); journal references from memory): each level omega (N^2/2 + q) of N spinless fermions is repeated
once per spin ordering, C(N, N_up) times. In a parity sector the orderings split under chain reversal R
into (C +- P)/2, P the number of palindromic orderings; the state's parity is that of the spinless level
times the R eigenvalue. Units: energies in hbar omega_ref.
"""

from __future__ import annotations

import math
from functools import lru_cache


@lru_cache(maxsize=None)
def partition_counts(n_particles: int, max_quanta: int) -> tuple[int, ...]:
    """Ways to put q = 0..max_quanta quanta on n fermions above their ground state: partitions of q into <= n parts."""
    counts = [1] + [0] * max_quanta
    for part in range(1, n_particles + 1):
        for q in range(part, max_quanta + 1):
            counts[q] += counts[q - part]
    return tuple(counts)


def noninteracting_levels(
    counts: tuple[int, int], omegas: tuple[float, float], states: int, parity: int | None = None
) -> list[tuple[float, int]]:
    """The lowest ``states`` (energy, parity) levels of two species at g = 0, with repeats, in the parity
    sector ``parity`` (+1, -1 or None for both)."""
    base = sum(omega * count**2 / 2 for count, omega in zip(counts, omegas))
    parity0 = (-1) ** sum(count * (count - 1) // 2 for count in counts)
    step = min((omega for count, omega in zip(counts, omegas) if count), default=min(omegas))
    max_quanta = 4
    while True:
        multiplicities = [partition_counts(count, max_quanta) for count in counts]
        cut = base + step * (max_quanta + 1)  # every level below is complete at this max_quanta
        levels = []
        for q_up, m_up in enumerate(multiplicities[0]):
            for q_down, m_down in enumerate(multiplicities[1]):
                energy = base + omegas[0] * q_up + omegas[1] * q_down
                level_parity = parity0 * (-1) ** (q_up + q_down)
                if m_up * m_down and energy < cut and parity in (None, level_parity):
                    levels += [(energy, level_parity)] * (m_up * m_down)
        levels.sort(key=lambda level: level[0])
        if len(levels) >= states:
            return levels[:states]
        max_quanta *= 2


def palindromic_orderings(n: int, n_up: int) -> int:
    """Number of spin orderings of n_up ups among n sites that read the same backwards."""
    if n % 2 == 0:
        return math.comb(n // 2, n_up // 2) if n_up % 2 == 0 else 0
    return math.comb((n - 1) // 2, (n_up - 1) // 2 if n_up % 2 else n_up // 2)


def fermionized_levels(n_up: int, n_down: int, omega: float, states: int, parity: int | None = None) -> list[float]:
    """The lowest ``states`` levels at g = +inf, equal masses and frequencies, in the parity sector ``parity``."""
    n = n_up + n_down
    total = math.comb(n, n_up)
    palindromes = palindromic_orderings(n, n_up)
    reversal_count = {1: (total + palindromes) // 2, -1: (total - palindromes) // 2}
    levels: list[float] = []
    q = 0
    while len(levels) < states:
        spinless_parity = (-1) ** (n * (n - 1) // 2 + q)
        copies = partition_counts(n, q)[q] * (total if parity is None else reversal_count[parity * spinless_parity])
        levels += [omega * (n * n / 2 + q)] * copies
        q += 1
    return levels[:states]
