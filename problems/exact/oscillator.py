"""The one-dimensional harmonic oscillator in its own eigenbasis: Hermite functions, their Fourier
transforms and the matrix elements a basis method needs.

Orbital n of a species with oscillator length b = 1/sqrt(m omega) (units of sqrt(hbar/(m0 omega_ref))):

    phi_n(x; b) = b^(-1/2) h_n(x/b),  h_n(t) = (2^n n! sqrt(pi))^(-1/2) H_n(t) exp(-t^2/2),

an eigenfunction of p^2/(2m) + m omega^2 x^2/2 with energy omega (n + 1/2). h_n is computed with the
stable three-term recursion h_{n+1} = sqrt(2/(n+1)) t h_n - sqrt(n/(n+1)) h_{n-1}, and its derivative
from the ladder operators, h_n' = sqrt(n/2) h_{n-1} - sqrt((n+1)/2) h_{n+1}
(Abramowitz & Stegun, Handbook of Mathematical Functions (1964), 22.7 and 22.8, for H_n).

Momentum space (hbar = 1, phi~(p) = (2 pi)^(-1/2) int dx exp(-i p x) phi(x), so int |phi~|^2 dp = 1):
phi~_n(p) = (-i)^n phi_n(p; 1/b) (Hermite functions are eigenfunctions of the unitary Fourier
transform with eigenvalue (-i)^n; textbook result).
"""

from __future__ import annotations

import math

import numpy as np


def hermite_functions(n_orbitals: int, t: np.ndarray, gaussian: bool = True) -> np.ndarray:
    """h_n(t) for n < n_orbitals as an array (len(t), n_orbitals); without the Gaussian factor
    exp(-t^2/2) when ``gaussian`` is False (then the polynomial part pi^(-1/4) (2^n n!)^(-1/2) H_n)."""
    t = np.atleast_1d(np.asarray(t, dtype=float))
    out = np.zeros((t.size, n_orbitals))
    if n_orbitals == 0:
        return out
    out[:, 0] = math.pi**-0.25 * (np.exp(-(t**2) / 2) if gaussian else 1.0)
    if n_orbitals > 1:
        out[:, 1] = math.sqrt(2.0) * t * out[:, 0]
    for n in range(1, n_orbitals - 1):
        out[:, n + 1] = math.sqrt(2.0 / (n + 1)) * t * out[:, n] - math.sqrt(n / (n + 1)) * out[:, n - 1]
    return out


def hermite_function(n: int, t: np.ndarray) -> np.ndarray:
    """The single function h_n(t) (unit width) on an array of any shape."""
    t = np.asarray(t, dtype=float)
    return hermite_functions(n + 1, t.ravel())[:, n].reshape(t.shape)


def hermite_functions_with_derivatives(n_orbitals: int, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """h_n(t) and h_n'(t), n < n_orbitals, each of shape (n_orbitals, len(t)) (unit width)."""
    values = hermite_functions(n_orbitals + 1, t).T
    derivatives = np.empty((n_orbitals, values.shape[1]))
    for n in range(n_orbitals):
        lower = values[n - 1] if n > 0 else 0.0
        derivatives[n] = math.sqrt(n / 2) * lower - math.sqrt((n + 1) / 2) * values[n + 1]
    return values[:n_orbitals], derivatives


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
