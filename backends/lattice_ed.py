"""``lattice-ed``: exact diagonalization on the lattice discretization, extrapolated to the continuum.

Method: the lattice Hamiltonian of ``backends/lattice.py`` (``lattice.terms``: t_s = 1/(2 m_s a^2),
on-site 2 t_s + V_s(x_j), U = g/a on n_up n_down, open chain) in the product basis of fixed N_up and
N_down (lattice orbitals = sites, one contact point per site, the diagonal fast path of the shared
engine ``backends/fock_ed.py``), Lanczos (ARPACK) for the k
lowest levels, in the two reflection sectors x -> -x when the trap is symmetric (parity labels).
The continuum limit over the spacing ladder follows (``lattice.solve_continuum_ladder``, the shared
convergence ladder). The default ladder is fitted to ``max_dimension`` (the finest lattice's basis;
measured cost in bench_lattice_results.md) as ``lattice.fit_to_budget`` describes. The same Hamiltonian
built term by term with quspin's ``spinful_fermion_basis_1d`` is the independent cross-check in
the tests; the product-basis build is used because it is 10-350x faster (engineering notes).

The per-spacing solver error is the residual norm ||H v - E v|| of each eigenvector, which bounds
the distance of E to an exact eigenvalue of the lattice Hamiltonian. Energies in hbar omega_ref.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import scipy.sparse as sp

from ..problems.spec import Problem
from . import fock_ed, lattice, lattice_observables
from .base import Backend, Capabilities, Parameter, Support
from .lattice import LADDER_PARAMETERS, Budget, LatticeLevels
from .result import Observable, Solution

# Basis size of the finest lattice; the default ladder is fitted within it. Measured (one core,
# bench_lattice_results.md): a ladder whose finest basis has 1e6 states takes about 3 CPU minutes for
# 2+1 (both parity sectors), with ARPACK's ~24 Lanczos vectors at ~200 MB.
DEFAULT_MAX_DIMENSION = 1_000_000
# bound on the dense scratch of the momentum pair correlation, in complex numbers
PAIR_SCRATCH = 1.5e7


def dimension(problem: Problem, sites: int) -> int:
    """C(L, N_up) C(L, N_down): the size of the product basis on L sites."""
    return math.comb(sites, problem.up.count) * math.comb(sites, problem.down.count)


def dimension_budget(problem: Problem, max_dimension: float) -> Budget:
    return Budget("max_dimension", max_dimension, lambda sites: dimension(problem, sites), "basis states")


def lattice_hamiltonian(problem: Problem, grid: lattice.Grid) -> fock_ed.ProductHamiltonian:
    """The lattice Hamiltonian (``lattice.terms``) as the engine's matrix-free product-basis operator.

    The engine's contact term g sum_q w_q rho_up(x_q) rho_down(x_q) becomes U sum_j n_up,j n_down,j
    with one point per site, unit weight and site orbitals phi_j(x_q) = delta_jq (diagonal fast path).
    """
    terms = lattice.terms(problem, grid)
    up = fock_ed.FockSpace(grid.sites, problem.up.count)
    down = fock_ed.FockSpace(grid.sites, problem.down.count)
    sites = np.eye(grid.sites)
    contact = fock_ed.ContactFactorization(points=grid.x, weights=np.ones(grid.sites), values_up=sites, values_down=sites)
    return fock_ed.ProductHamiltonian(
        fock_ed.ProductBasis.full(up, down),
        terms.one_body_matrix(0).toarray(),
        terms.one_body_matrix(1).toarray(),
        terms.interaction,
        contact,
    )


def reflection_sectors(problem: Problem) -> list[int | None]:
    """Parity sectors to diagonalize: both (labelled) for 'any' in a symmetric trap, else as asked."""
    if not problem.trap.is_symmetric:
        return [None]
    return {"any": [1, -1], "even": [1], "odd": [-1]}[problem.targets.parity]


def sector_isometry(hamiltonian: fock_ed.ProductHamiltonian, sector: int) -> sp.csr_matrix:
    """Columns spanning the reflection sector x_j -> x_{L-1-j} (sites map onto sites, no phases)."""
    basis = hamiltonian.basis
    mirror = np.arange(basis.up.n_orbitals)[::-1]
    ones = np.ones(len(mirror))
    return fock_ed.parity_isometry(basis, basis.up.transform(mirror, ones), basis.down.transform(mirror, ones), sector)


def lowest_levels(problem: Problem, hamiltonian, k: int, tolerance: float):
    """(energies, vectors in the full basis, parity labels, residual norms), grouped by sector."""
    operator = hamiltonian.as_linear_operator()
    energies, vectors, labels, residuals = [], [], [], []
    for sector in reflection_sectors(problem):
        if sector is None:
            values, vecs = fock_ed.lowest_eigenpairs(operator, k, tol=tolerance)
        else:
            isometry = sector_isometry(hamiltonian, sector)
            if isometry.shape[1] == 0:
                continue
            values, vecs = fock_ed.lowest_eigenpairs(fock_ed.project(operator, isometry), k, tol=tolerance)
            vecs = isometry @ vecs
        vecs = vecs / np.linalg.norm(vecs, axis=0)
        residual = np.linalg.norm(hamiltonian.matmat(vecs) - vecs * values[None, :], axis=0)
        energies += list(values)
        vectors += list(vecs.T)
        labels += [{} if sector is None else {"parity": sector}] * len(values)
        residuals += list(residual)
    return energies, vectors, labels, residuals


def site_expectations(problem: Problem, basis: fock_ed.ProductBasis, vector: np.ndarray, final: bool):
    """Densities, double occupancies and (on the finest grid, if asked) obdm and pair correlations."""
    probability = np.abs(basis.to_matrix(vector)) ** 2
    occ_up, occ_down = basis.up.occupations, basis.down.occupations
    obdm = fock_ed.one_body_density_matrices(basis, vector) if final and lattice_observables.needs_obdm(problem) else None
    return lattice_observables.SiteExpectations(
        densities=(occ_up.T @ probability.sum(axis=1), occ_down.T @ probability.sum(axis=0)),
        double_occupancy=np.sum(occ_up * (probability @ occ_down), axis=0),
        obdm=None if obdm is None else (np.real(obdm[0]), np.real(obdm[1])),
        pair=occ_up.T @ probability @ occ_down if final and lattice_observables.needs_pair(problem) else None,
    )


def annihilation_amplitudes(space: fock_ed.FockSpace, amplitudes: np.ndarray) -> tuple[sp.csr_matrix, int]:
    """The stacked operators psi(p) = sum_j F[p, j] c_j from N to N - 1 particles, and dim(N - 1).

    Rows (p, beta) with beta a configuration of N - 1 particles, columns alpha of N particles:
    c_j |alpha> = (-1)^(k) |alpha without j> when j is the k-th occupied orbital (Jordan-Wigner).
    """
    n = space.n_particles
    smaller = fock_ed.FockSpace(space.n_orbitals, n - 1) if n > 1 else None  # N - 1 = 0: the vacuum alone
    smaller_dim = smaller.dim if smaller else 1
    rows, cols, orbital, sign = [], [], [], []
    for k in range(n):
        rest = np.delete(space.occupied, k, axis=1)
        rows.append(smaller.index(rest) if smaller else np.zeros(space.dim, np.int64))
        cols.append(np.arange(space.dim))
        orbital.append(space.occupied[:, k])
        sign.append(np.full(space.dim, (-1.0) ** k))
    rows, cols, orbital, sign = (np.concatenate(v) for v in (rows, cols, orbital, sign))
    n_p = amplitudes.shape[0]
    all_rows = (np.arange(n_p)[:, None] * smaller_dim + rows[None, :]).ravel()
    all_cols = np.tile(cols, n_p)
    data = (amplitudes[:, orbital] * sign[None, :]).ravel()
    return sp.csr_matrix((data, (all_rows, all_cols)), shape=(n_p * smaller_dim, space.dim)), smaller_dim


def pair_correlation(basis: fock_ed.ProductBasis, vector: np.ndarray, amplitudes: np.ndarray) -> np.ndarray:
    """G(p1, p2) = <n_up(p1) n_down(p2)> = || psi_up(p1) psi_down(p2) |state> ||^2 for any orbital amplitudes.

    ``amplitudes[p, a]`` = phi_a(p). With Psi[alpha, beta] the coefficient matrix,
    psi_up(p1) psi_down(p2) |state> has coefficients A_up(p1) Psi A_down(p2)^T (up to a global sign
    from moving the down operator past the up ones), so G is the squared Frobenius norm of that
    block; this avoids the M^4 pair tensor.
    """
    n_p = amplitudes.shape[0]
    if basis.up.n_particles == 0 or basis.down.n_particles == 0:
        return np.zeros((n_p, n_p))
    psi = basis.to_matrix(vector)
    a_up, d_up = annihilation_amplitudes(basis.up, amplitudes)
    a_down, d_down = annihilation_amplitudes(basis.down, amplitudes)
    result = np.zeros((n_p, n_p))
    block = max(1, int(PAIR_SCRATCH // max(1, d_up * max(n_p * d_down, basis.down.dim))))
    for start in range(0, n_p, block):
        stop = min(n_p, start + block)
        left = a_up[start * d_up : stop * d_up] @ psi  # (b d_up) x dim_down
        z = (a_down @ left.T).T  # (b d_up) x (n_p d_down)
        z = np.abs(z.reshape(stop - start, d_up, n_p, d_down)) ** 2
        result[start:stop] = z.sum(axis=(1, 3))
    return result


class LatticeEDBackend(Backend):
    name = "lattice-ed"
    version = "2"  # 2: densities extrapolated to the continuum with a bar (energies as in 1)
    summary = "Exact diagonalization (product basis, Lanczos) on a finite-difference lattice, extrapolated in the spacing"
    parameters = (
        *LADDER_PARAMETERS,
        Parameter("tolerance", float, 1e-12, "Lanczos (ARPACK) relative tolerance", minimum=0.0),
        Parameter(
            "max_dimension",
            int,
            DEFAULT_MAX_DIMENSION,
            "largest product basis of the finest lattice: the default ladder is fitted within it; given spacings beyond it are refused",
            minimum=1,
        ),
    )

    capabilities = Capabilities(
        trap_shapes=("harmonic", "harmonic+gaussian", "box"),
        observables=("density", "momentum", "obdm", "pair_position", "pair_momentum", "noise", "contact", "trap_energy"),
        error_bars=True,
    )
    # cheap settings of the check suite: every quick-tier check passes; 64 CPU s in all (spacings down to 0.25:
    # 230 s, most of it on 2+1 at g = 30)
    check_params = {"spacings": (0.6, 0.45, 0.35)}

    def supports(self, problem: Problem, params: dict[str, Any] | None = None) -> Support:
        """Yes when a useful spacing ladder fits ``max_dimension`` (the default ladder is coarsened to fit)."""
        params = self.resolve_params(params or {})
        return lattice.ladder_support(
            lambda: self.ladder(problem, params),
            "max_dimension",
            "lattice-dmrg or oscillator-ed scale better with the particle number",
        )

    def ladder(self, problem: Problem, params: dict[str, Any]) -> lattice.SpacingLadder:
        budget = dimension_budget(problem, params["max_dimension"])
        return lattice.resolve_ladder(
            problem, params["spacings"], params["x_max"], budget=budget, continuum_order=params["continuum_order"]
        )

    def compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        return lattice.solve_continuum_ladder(
            problem,
            self.ladder(problem, params),
            lambda grid, final: solve_on_grid(problem, grid, final, params["tolerance"]),
            keep=problem.targets.states,
        )


def solve_on_grid(problem: Problem, grid: lattice.Grid, final: bool, tolerance: float = 1e-12) -> LatticeLevels:
    """The k lowest levels (per parity sector) on one lattice; observables if ``final``."""
    hamiltonian = lattice_hamiltonian(problem, grid)
    basis = hamiltonian.basis
    energies, vectors, labels, residuals = lowest_levels(problem, hamiltonian, problem.targets.states, tolerance)
    sites = [site_expectations(problem, basis, v, final) for v in vectors]
    scalars = [lattice_observables.scalars(problem, grid, s, e) for s, e in zip(sites, energies)]
    wanted = set(problem.targets.observables)
    momentum_pairs: dict[int, tuple] = {}
    notes: list[str] = []
    if {"pair_momentum", "noise"} & wanted:
        momenta, note = lattice.momentum_grid(problem, grid)
        notes += [note] if note else []
        amplitudes = lattice.momentum_orbitals(grid, momenta)
        weights = np.full(len(momenta), momenta[1] - momenta[0])
        weights[[0, -1]] *= 0.5  # trapezoid rule
        for level, vector in enumerate(vectors):
            g_pp = pair_correlation(basis, vector, amplitudes)
            rho = fock_ed.one_body_density_matrices(basis, vector)
            noise = g_pp - np.outer(
                fock_ed.density_on_grid(rho[0], amplitudes), fock_ed.density_on_grid(rho[1], amplitudes)
            )
            momentum_pairs[level] = (momenta, g_pp, noise)
            if "noise" in wanted:
                scalars[level]["noise_integral"] = float(weights @ noise**2 @ weights)

    def observe(level: int, rank: int):
        found, more = lattice_observables.observables(problem, grid, sites[level], rank)
        if level in momentum_pairs:
            momenta, g_pp, noise = momentum_pairs[level]
            suffix = "" if rank == 0 else f"@{rank}"
            axes = {"p_up": momenta, "p_down": momenta}
            if "pair_momentum" in wanted:
                found[f"pair_momentum{suffix}"] = Observable(
                    g_pp, axes, "1/momentum^2", "integral = N_up N_down over the Brillouin zone", rank
                )
            if "noise" in wanted:
                found[f"noise{suffix}"] = Observable(noise, axes, "1/momentum^2", "integral = 0 over the Brillouin zone", rank)
        return found, more + notes

    return LatticeLevels(
        energies=[float(e) for e in energies],
        solver_errors=[float(r) for r in residuals],
        states=labels,
        scalars=scalars,
        site_densities=[site.densities for site in sites],
        observe=observe if final else None,
        diagnostics={"sites": grid.sites, "spacing": grid.spacing, "dimension": basis.dim, "residuals": residuals},
    )
