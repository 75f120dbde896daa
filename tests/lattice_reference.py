"""An independent lattice Hamiltonian for cross-checks: quspin's generic spinful-fermion operator path.

Built term by term from the definition in ``backends/lattice.py`` (hopping -t_s between neighbours,
on-site 2 t_s + V_s(x_j), U = g/a on n_up n_down), with quspin's sign convention
(["+-|", [[J, i, j]]] = J c+_i c_j and ["-+|", [[J, i, j]]] = J c_i c+_j = -J c+_j c_i).
Only for small lattices (the generic path is slow).
"""

from __future__ import annotations

import numpy as np

from trapbench.backends import lattice


def quspin_hamiltonian(problem, grid):
    from quspin.basis import spinful_fermion_basis_1d
    from quspin.operators import hamiltonian

    L = grid.sites
    basis = spinful_fermion_basis_1d(L, Nf=(problem.up.count, problem.down.count))
    static = []
    for species, forward, backward, number in ((problem.up, "+-|", "-+|", "n|"), (problem.down, "|+-", "|-+", "|n")):
        t = lattice.hopping(species, grid.spacing)
        onsite = 2 * t + problem.trap.potential(grid.x, species)
        static.append([forward, [[-t, i, i + 1] for i in range(L - 1)]])
        static.append([backward, [[t, i, i + 1] for i in range(L - 1)]])
        static.append([number, [[onsite[i], i] for i in range(L)]])
    static.append(["n|n", [[lattice.onsite_coupling(problem.coupling, grid.spacing), i, i] for i in range(L)]])
    no_checks = {"check_symm": False, "check_herm": False, "check_pcon": False}
    return hamiltonian(static, [], basis=basis, dtype=np.float64, **no_checks), basis


def quspin_levels(problem, grid, k):
    """The k lowest eigenvalues (ascending) and eigenvectors of the quspin Hamiltonian."""
    h, basis = quspin_hamiltonian(problem, grid)
    if basis.Ns <= 400:
        values, vectors = np.linalg.eigh(h.toarray())
        return values[:k], vectors[:, :k], basis
    values, vectors = h.eigsh(k=k, which="SA", tol=1e-13)
    order = np.argsort(values)
    return values[order], vectors[:, order], basis
