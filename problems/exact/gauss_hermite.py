"""Gauss-Hermite rules for integrals of oscillator orbitals, including the exact contact quadrature.

Contact integrals int phi_a(x; b_1) phi_b(x; b_1) chi_c(x; b_2) chi_d(x; b_2) dx of oscillator orbitals
(see ``oscillator``) are a polynomial of degree <= a + b + c + d times exp(-alpha x^2),
alpha = 1/b_1^2 + 1/b_2^2. Gauss-Hermite quadrature with Q nodes t_k (x_k = t_k / sqrt(alpha)) is exact
for polynomial degree 2Q - 1 (Abramowitz & Stegun (1964), 25.4.46). ``contact_quadrature`` returns
the weights and the *polynomial parts* of the orbitals at the nodes (orbital value times
exp(+x^2/(2 b^2))), so that sum_q w_q u_a u_b v_c v_d equals the integral without overflow of exp(t^2).
Lengths in sqrt(hbar/(m0 omega_ref)).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .oscillator import hermite_functions


@dataclass(frozen=True)
class ContactQuadrature:
    """Nodes x_q, weights w_q and polynomial parts u_a(x_q), v_c(x_q) (see module docstring)."""

    points: np.ndarray
    weights: np.ndarray
    values_up: np.ndarray  # (n_points, n_up)
    values_down: np.ndarray  # (n_points, n_down)


def contact_quadrature(
    n_up: int, length_up: float, n_down: int, length_down: float, max_degree: int | None = None
) -> ContactQuadrature:
    """Exact Gauss-Hermite factorization of int phi_a(x; b_up) phi_b(x; b_up) chi_c(x; b_dn) chi_d(x; b_dn) dx.

    Exact for every a + b + c + d <= ``max_degree`` (default: all orbitals, 2(n_up + n_down - 2)),
    with ceil((max_degree + 1) / 2) nodes.
    """
    full = 2 * (n_up + n_down - 2)
    degree = full if max_degree is None else min(max_degree, full)
    n_points = max((degree + 2) // 2, 1)
    t, w = np.polynomial.hermite.hermgauss(n_points)
    alpha = 1.0 / length_up**2 + 1.0 / length_down**2
    x = t / math.sqrt(alpha)
    # orbital = polynomial part * exp(-x^2 / (2 b^2)); the two Gaussians of a product combine into exp(-alpha x^2)
    u = hermite_functions(n_up, x / length_up, gaussian=False) / math.sqrt(length_up)
    v = hermite_functions(n_down, x / length_down, gaussian=False) / math.sqrt(length_down)
    return ContactQuadrature(points=x, weights=w / math.sqrt(alpha), values_up=u, values_down=v)


def gauss_hermite_grid(n_points: int, length: float) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights for int f(x) dx where f = polynomial * exp(-x^2/length^2) of degree < 2 n_points:
    returns (x, w * exp(+x^2/length^2)) so that sum w_q f(x_q) is exact for such f."""
    t, w = np.polynomial.hermite.hermgauss(n_points)
    return t * length, w * length * np.exp(t**2)
