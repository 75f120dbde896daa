"""Harmonic-oscillator orbitals, their Fourier transforms and exact contact-interaction quadrature.

Orbital n of a species with oscillator length b = 1/sqrt(m omega) (units of sqrt(hbar/(m0 omega_ref))):

    phi_n(x; b) = b^(-1/2) h_n(x/b),  h_n(t) = (2^n n! sqrt(pi))^(-1/2) H_n(t) exp(-t^2/2),

computed with the stable three-term recursion h_{n+1} = sqrt(2/(n+1)) t h_n - sqrt(n/(n+1)) h_{n-1}.
It is an eigenfunction of p^2/(2m) + m omega^2 x^2/2 with energy omega (n + 1/2).

Momentum space (hbar = 1, phi~(p) = (2 pi)^(-1/2) int dx exp(-i p x) phi(x), so int |phi~|^2 dp = 1):
phi~_n(p) = (-i)^n phi_n(p; 1/b) (Hermite functions are eigenfunctions of the unitary Fourier
transform with eigenvalue (-i)^n).

Contact integrals int phi_a phi_b chi_c chi_d dx with widths b_1, b_2 are a polynomial of degree
<= 2(M_1-1) + 2(M_2-1) times exp(-alpha x^2), alpha = 1/b_1^2 + 1/b_2^2; Gauss-Hermite with
Q = M_1 + M_2 - 1 nodes t_k (x_k = t_k / sqrt(alpha)) integrates them exactly (degree 2Q - 1).
``contact_quadrature`` returns weights and the *polynomial parts* of the orbitals at the nodes
(orbital value times exp(+x^2/(2 b^2))), so that sum_q w_q u_a u_b v_c v_d equals the integral
without overflow of exp(t^2).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


def hermite_functions(n_orbitals: int, t: np.ndarray, gaussian: bool = True) -> np.ndarray:
    """h_n(t) for n < n_orbitals as an array (len(t), n_orbitals); without the Gaussian factor
    exp(-t^2/2) when ``gaussian`` is False (then the polynomial part pi^(-1/4) (2^n n!)^(-1/2) H_n)."""
    t = np.asarray(t, dtype=float)
    out = np.zeros((t.size, n_orbitals))
    if n_orbitals == 0:
        return out
    out[:, 0] = math.pi**-0.25 * (np.exp(-(t**2) / 2) if gaussian else 1.0)
    if n_orbitals > 1:
        out[:, 1] = math.sqrt(2.0) * t * out[:, 0]
    for n in range(1, n_orbitals - 1):
        out[:, n + 1] = math.sqrt(2.0 / (n + 1)) * t * out[:, n] - math.sqrt(n / (n + 1)) * out[:, n - 1]
    return out


def position_orbitals(n_orbitals: int, x: np.ndarray, length: float) -> np.ndarray:
    """phi_n(x; b) on a grid, shape (len(x), n_orbitals); int |phi_n|^2 dx = 1."""
    return hermite_functions(n_orbitals, np.asarray(x) / length) / math.sqrt(length)


def momentum_orbitals(n_orbitals: int, p: np.ndarray, length: float) -> np.ndarray:
    """phi~_n(p) = (-i)^n phi_n(p; 1/b) (complex), shape (len(p), n_orbitals); int |phi~_n|^2 dp = 1."""
    phases = (-1j) ** np.arange(n_orbitals)
    return position_orbitals(n_orbitals, p, 1.0 / length) * phases[None, :]


def oscillator_energies(n_orbitals: int, omega: float) -> np.ndarray:
    """omega (n + 1/2), n = 0..n_orbitals-1 (units of hbar omega_ref)."""
    return omega * (np.arange(n_orbitals) + 0.5)


def trap_matrix(n_orbitals: int, omega: float) -> np.ndarray:
    """<a| m omega^2 x^2 / 2 |b> = (omega/2) <a|(x/b)^2|b>: diagonal omega (a + 1/2)/2 and
    (omega/4) sqrt((a+1)(a+2)) for b = a + 2 (ladder-operator algebra)."""
    n = np.arange(n_orbitals)
    v = np.diag(omega * (n + 0.5) / 2)
    off = omega / 4 * np.sqrt((n[:-2] + 1) * (n[:-2] + 2))
    v[n[:-2], n[:-2] + 2] = off
    v[n[:-2] + 2, n[:-2]] = off
    return v


def orbital_parities(n_orbitals: int) -> np.ndarray:
    """(-1)^n: phi_n(-x) = (-1)^n phi_n(x)."""
    return 1 - 2 * (np.arange(n_orbitals) % 2)


@dataclass(frozen=True)
class ContactQuadrature:
    """Nodes x_q, weights w_q and polynomial parts u_a(x_q), v_c(x_q) (see module docstring)."""

    points: np.ndarray
    weights: np.ndarray
    values_up: np.ndarray
    values_down: np.ndarray


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
