"""Exact formulas of the trapped few-fermion problem, each written once; solvers and references import them.

Modules (each docstring states its equation, source and units):

- ``oscillator``: Hermite functions, their derivatives and Fourier transforms, oscillator matrix elements;
- ``gauss_hermite``: Gauss-Hermite rules, the exact contact quadrature of four oscillator orbitals;
- ``busch``: Busch's equation for 1+1 and its roots (30-digit and double-precision routes);
- ``towers``: non-interacting and fermionized (g = +inf) levels with multiplicities and parities;
- ``first_order``: dE0/dg at g = 0;
- ``wedges``: 2+1 with any masses at g = +inf (hard-wall wedges) and the 1/g slopes of those levels;
- ``exchange``: the spin-chain exchange integrals J_k by an exact reduction to 1D integrals (fast route);
- ``spin_chain``: the effective spin chain H_spin built from J_k;
- ``strong_coupling_direct``: J_k and K by direct quadrature of the defining integral (independent route, N <= 4).

Nothing here imports from ``trapbench.backends``. The oscillator-basis helpers are re-exported below
for solvers that work in that basis.
"""

from .gauss_hermite import ContactQuadrature, contact_quadrature, gauss_hermite_grid
from .oscillator import (
    hermite_function,
    hermite_functions,
    hermite_functions_with_derivatives,
    momentum_orbitals,
    orbital_parities,
    oscillator_energies,
    position_orbitals,
    trap_matrix,
)

__all__ = [
    "ContactQuadrature",
    "contact_quadrature",
    "gauss_hermite_grid",
    "hermite_function",
    "hermite_functions",
    "hermite_functions_with_derivatives",
    "momentum_orbitals",
    "orbital_parities",
    "oscillator_energies",
    "position_orbitals",
    "trap_matrix",
]
