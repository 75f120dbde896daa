"""Backend ``perturbative``: non-interacting levels plus the exact first-order shift in g.

Unperturbed states are pairs of Slater determinants of oscillator orbitals, one per species,
phi_n(x; b_s) with width b_s = 1/sqrt(m_s omega_s), and energies

    E0 = sum_s omega_s sum_{n occupied} (n + 1/2)      (ground state: sum_s omega_s N_s^2 / 2).

First-order (Rayleigh-Schroedinger, degenerate where needed) perturbation theory in
V = g sum_{i up, j down} delta(x_i - x_j): within each degenerate manifold of E0 the matrix
W_IJ = <I| sum delta |J> is diagonalized, E = E0 + g w. For a non-degenerate ground state
w = sum_{i < N_up} sum_{j < N_down} integral phi_i(x; b_up)^2 phi_j(x; b_down)^2 dx.
Matrix elements follow from the Slater-Condon rules for the one-body densities rho_s(x), and the
x-integrals of four oscillator orbitals are done exactly by the Gauss-Hermite contact quadrature of
``trapbench.problems.exact.gauss_hermite`` (the integrand is a polynomial times
exp(-x^2 (1/b_up^2 + 1/b_down^2))). The result is exact at g = 0 and
first-order only otherwise: valid for |g| small against the level spacing.

Which levels are lowest at first order is decided by widening the excitation cut one quantum at a time
until no unlisted manifold can fall below the k-th level; each manifold's W is diagonalized once. At
strong coupling (g w beyond many level spacings) that needs manifolds of thousands of determinant
pairs; past ``MAX_MANIFOLD_PAIRS`` the request is refused with the manifold named (first order means
nothing there).
"""

from __future__ import annotations

import functools
import itertools
from typing import Any

import numpy as np

from ..problems.exact.gauss_hermite import contact_quadrature
from ..problems.spec import Problem
from .base import Backend, Capabilities, SolverError, Unsupported
from .result import Solution

DEGENERACY_TOLERANCE = 1e-10
MAX_EXCITATION_STEPS = 40
# largest degenerate manifold diagonalized (its W matrix is built pair by pair): beyond it the ordering of
# first-order levels is refused, never computed for minutes (4+4 at g = 10 needs manifolds of ~10^3 pairs)
MAX_MANIFOLD_PAIRS = 1500


@functools.lru_cache(maxsize=64)
def configurations(count: int, max_excitation: int) -> tuple[tuple[tuple[int, ...], int], ...]:
    """(occupied orbitals, excitation) of ``count`` fermions with excitation sum(n) - count(count-1)/2 <= max."""
    ground = count * (count - 1) // 2
    found = []
    for occ in itertools.combinations(range(count + max_excitation), count):
        excitation = sum(occ) - ground
        if excitation <= max_excitation:
            found.append((occ, excitation))
    return tuple(found)


def density_matrix_elements(left: tuple, right: tuple, orbitals: np.ndarray) -> np.ndarray | None:
    """<left| rho(x_q) |right> at the quadrature points, by the Slater-Condon rules (None if zero)."""
    if left == right:
        return np.sum(orbitals[list(left)] ** 2, axis=0)
    only_left = set(left) - set(right)
    if len(only_left) != 1:
        return None
    (a,) = only_left
    (b,) = set(right) - set(left)
    common = set(left) & set(right)
    sign = (-1) ** (sum(1 for c in common if c < a) + sum(1 for c in common if c < b))
    return sign * orbitals[a] * orbitals[b]


class PerturbativeBackend(Backend):
    name = "perturbative"
    version = "1"
    summary = "Non-interacting levels + exact first-order shift in g (degenerate perturbation theory); small |g| only"
    parameters = ()
    # energies only, in the harmonic trap; its zeroth and first orders are the towers and c1 references' formulas
    capabilities = Capabilities(built_on=("oscillator-towers", "first-order"))

    def compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        g = problem.coupling
        wanted = {"any": None, "even": 0, "odd": 1}[problem.targets.parity]
        k = problem.targets.states
        ground = sum(s.omega * s.count**2 / 2 for s in problem.species)
        step = min(problem.up.omega, problem.down.omega)
        cut = 0.0
        shifts: dict[tuple[float, int], tuple[np.ndarray, int]] = {}  # manifold -> (eigenvalues of W, size)
        while True:
            manifolds = self._manifolds(problem, cut, wanted)
            for key, pairs in manifolds.items():  # a manifold below the cut is complete: solved once
                if key not in shifts:
                    if len(pairs) > MAX_MANIFOLD_PAIRS:
                        raise Unsupported(
                            f"{k} first-order levels at g = {g:g} can be ordered only with the manifold at"
                            f" {key[0] - ground:g} hbar*omega of excitation, {len(pairs)} determinant pairs (limit"
                            f" {MAX_MANIFOLD_PAIRS}): the shift g w exceeds many level spacings, where first order"
                            " means nothing - use an ED backend or a smaller |g|"
                        )
                    shifts[key] = (np.linalg.eigvalsh(self._interaction_matrix(problem, pairs)), len(pairs))
            levels = self._first_order_levels(shifts, g)
            if len(levels) >= k:
                # every unlisted manifold starts above ground + cut; attraction can lower it by at
                # most |g| w, with w bounded here by the largest first-order coefficient met so far
                largest = max(level["first_order_coefficient"] for level in levels)
                if ground + cut + min(g, 0.0) * largest >= levels[k - 1]["energy"]:
                    break
            if cut >= MAX_EXCITATION_STEPS * step:
                raise SolverError(
                    f"perturbative: {k} levels at g = {g:g} need manifolds beyond {cut:g} hbar*omega of excitation;"
                    " first order is meaningless there - use an ED backend"
                )
            cut += step
        chosen = levels[:k]
        warnings = []
        if g != 0:
            warnings.append("first-order perturbation theory: the error is O(g^2); use only for |g| << 1")
        return Solution(
            energies=[s.pop("energy") for s in chosen],
            states=chosen,
            error_estimate=0.0 if g == 0 else None,
            warnings=warnings,
            diagnostics={"excitation_energy_cut": cut, "manifolds": len(shifts)},
        )

    @staticmethod
    def _first_order_levels(shifts: dict[tuple[float, int], tuple[np.ndarray, int]], g: float) -> list[dict]:
        """E0 + g w for every eigenvalue w of W in every manifold (E0, parity), ascending."""
        levels = []
        for (energy0, parity), (values, size) in shifts.items():
            for w in values:
                multiplicity = int(np.sum(np.abs(values - w) <= DEGENERACY_TOLERANCE * max(1.0, abs(w))))
                levels.append(
                    {
                        "energy": energy0 + g * w,
                        "parity": parity,
                        "degeneracy": multiplicity if g != 0 else size,
                        "com": None,
                        "unperturbed_energy": energy0,
                        "first_order_coefficient": float(w),
                    }
                )
        levels.sort(key=lambda s: s["energy"])
        return levels

    @staticmethod
    def _manifolds(problem: Problem, cut: float, parity: int | None) -> dict[tuple[float, int], list]:
        """Determinant pairs grouped by (unperturbed energy, parity), for excitation energy <= ``cut``.

        Every manifold below the cut is complete, whatever the two trap frequencies; the contact
        interaction conserves parity, so each parity is a block of its own.
        """
        up, down = problem.up, problem.down
        ground = up.omega * up.count**2 / 2 + down.omega * down.count**2 / 2
        groups: dict[tuple[float, int], list] = {}
        slack = 1e-9 * max(1.0, cut)
        downs = configurations(down.count, int((cut + slack) // down.omega))
        for occ_up, m_up in configurations(up.count, int((cut + slack) // up.omega)):
            for occ_down, m_down in downs:
                excitation = up.omega * m_up + down.omega * m_down
                if excitation > cut + slack:
                    continue
                pair_parity = (sum(occ_up) + sum(occ_down)) % 2
                if parity is not None and pair_parity != parity:
                    continue
                key = (ground + round(excitation, 9), (-1) ** pair_parity)
                groups.setdefault(key, []).append((occ_up, occ_down))
        return groups

    @staticmethod
    def _interaction_matrix(problem: Problem, pairs: list) -> np.ndarray:
        """W_IJ = <I| sum_{i up, j down} delta(x_i - x_j) |J> within one manifold, exactly.

        With I = (u, d) and J = (u', d'): W_IJ = sum_q w_q <u|rho_up(x_q)|u'> <d|rho_down(x_q)|d'>. The
        one-species elements are formed once per pair of distinct configurations of that species, and W is
        summed over the quadrature points as whole matrices.
        """
        size = len(pairs)
        if problem.up.count == 0 or problem.down.count == 0:
            return np.zeros((size, size))
        n_orbitals = max(max(u + d, default=0) for u, d in pairs) + 1
        quad = contact_quadrature(n_orbitals, problem.up.oscillator_length, n_orbitals, problem.down.oscillator_length)
        rho_up, index_up = _species_elements([u for u, _ in pairs], quad.values_up.T)
        rho_down, index_down = _species_elements([d for _, d in pairs], quad.values_down.T)
        matrix = np.zeros((size, size))
        for q, weight in enumerate(quad.weights):
            matrix += weight * rho_up[q][np.ix_(index_up, index_up)] * rho_down[q][np.ix_(index_down, index_down)]
        return matrix


def _species_elements(configurations_of_pairs: list, orbitals: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """<a|rho(x_q)|b> for the distinct configurations a, b of one species (shape: points x n x n) and
    each pair's index among them."""
    distinct = sorted(set(configurations_of_pairs))
    position = {occ: i for i, occ in enumerate(distinct)}
    elements = np.zeros((orbitals.shape[1], len(distinct), len(distinct)))
    for i, j in itertools.combinations_with_replacement(range(len(distinct)), 2):
        value = density_matrix_elements(distinct[i], distinct[j], orbitals)
        if value is not None:
            elements[:, i, j] = elements[:, j, i] = value
    return elements, np.array([position[occ] for occ in configurations_of_pairs])
