"""First-order coupling of the non-interacting ground state: dE0/dg at g = 0.

The ground state of each species at g = 0 is one Slater determinant (the N_s lowest orbitals), so the
first order is non-degenerate (Rayleigh-Schroedinger perturbation theory, textbook result) and, by the
Slater-Condon rules,

    c1 = dE0/dg |_(g=0) = int rho_up(x) rho_down(x) dx = sum_{a < N_up} sum_{c < N_down} int phi_a(x; b_up)^2 phi_c(x; b_down)^2 dx,

with orbital widths b_s = 1/sqrt(m_s omega_s). The integrand is a polynomial times a Gaussian and is
integrated exactly by the contact quadrature of ``gauss_hermite``. c1 in units of 1/length.
"""

from __future__ import annotations

import numpy as np

from .gauss_hermite import contact_quadrature


def ground_state_slope(n_up: int, length_up: float, n_down: int, length_down: float) -> float:
    """c1 = int rho_up rho_down dx for the non-interacting ground state (0 when a species is empty)."""
    if n_up == 0 or n_down == 0:
        return 0.0
    quad = contact_quadrature(n_up, length_up, n_down, length_down)
    density_up = np.sum(quad.values_up**2, axis=1)
    density_down = np.sum(quad.values_down**2, axis=1)
    return float(np.dot(quad.weights, density_up * density_down))
