"""Levels of two particles in a common harmonic trap by ODE shooting: a route independent of Busch's equation.

The relative motion (y in units of the relative oscillator length, lambda = g sqrt(mu / omega); see
``busch``) obeys

    -psi''/2 + y^2 psi / 2 = e psi  on y > 0,   psi'(0+) = lambda psi(0)

(the contact lambda delta(y) makes psi' jump by 2 lambda psi(0); even states have psi'(0-) = -psi'(0+)).
psi(0) = 1 is integrated outward with scipy's DOP853 to y_max, well past the classical turning point
sqrt(2 e), where the growing solution dominates unless e is an eigenvalue: psi(y_max; e) changes sign at
each even level, and Brent's method finds it. Odd relative levels e = 3/2 + 2n do not feel the contact.
Total energies E = omega (n_cm + 1/2 + e), parity (-1)^n_cm times the relative parity.

This shares nothing with the Gamma-function form of Busch's equation (only the assembly of the centre-of-mass
towers, ``busch.total_levels``, which the ``two-body`` backend does not use): it is the standard shooting method
(common practice, no source; e.g. Press et al., Numerical Recipes, 3rd ed. (2007), section 18.1), so it can
grade a method built on that equation (``references.ROUTES``). Measured agreement with the 30-digit roots
of ``busch.busch_even_level`` for lambda from -7 to 70 and the lowest three even levels: <= 3e-13
(tests/test_references.py). Cost: about 0.3 CPU s per level. Units: hbar = omega_ref = 1.
"""

from __future__ import annotations

import math
from functools import lru_cache

from scipy import integrate, optimize

from .busch import total_levels

# Past the turning point sqrt(2 e) the decaying solution falls like exp(-y^2/2): 6.5 lengths more leave
# it ~1e-11 of the growing one, so the endpoint's sign is the eigenvalue test (measured: y_max = 7 gives
# 3e-13 for e < 6, the margin kept for higher levels).
TURNING_POINT_MARGIN = 6.5
MIN_RANGE = 7.0
RTOL = 1e-13
UNCERTAINTY = 1e-10  # stated per level (absolute, in omega): 300 times the measured agreement


def _endpoint(e: float, lam: float, y_max: float) -> float:
    def rhs(y, state):
        psi, dpsi = state
        return [dpsi, (y * y - 2 * e) * psi]

    solution = integrate.solve_ivp(rhs, (0.0, y_max), [1.0, lam], method="DOP853", rtol=RTOL, atol=1e-300)
    return solution.y[0, -1]


def _bracket(lam: float, branch: int) -> tuple[float, float]:
    """The interval holding the ``branch``-th even level: for lambda >= 0 (1/2 + 2n, 3/2 + 2n); for
    lambda < 0 the excited ones in (2n - 1/2, 2n + 1/2) and the ground state in (-lambda^2/2 - 1, 1/2)
    (above the bound pair's -lambda^2/2)."""
    if lam >= 0:
        return 0.5 + 2 * branch, 1.5 + 2 * branch
    if branch > 0:
        return 2 * branch - 0.5, 2 * branch + 0.5
    return -lam * lam / 2 - 1.0, 0.5


@lru_cache(maxsize=4096)
def even_level(lam: float, branch: int) -> float:
    """The ``branch``-th even relative level e (0 = lowest) for the coupling lambda, by shooting."""
    if lam == 0.0:
        return 0.5 + 2 * branch
    low, high = _bracket(lam, branch)
    y_max = max(MIN_RANGE, math.sqrt(2 * max(high, 0.0)) + TURNING_POINT_MARGIN)
    tiny = 1e-9
    return optimize.brentq(_endpoint, low + tiny, high - tiny, args=(lam, y_max), xtol=1e-14, rtol=1e-15)


def ground_energy(g: float, mass_up: float = 1.0, mass_down: float = 1.0) -> float:
    """Total 1+1 ground energy (omega = 1, centre of mass in its ground state): 1/2 + e_0(g sqrt(mu))."""
    mu = mass_up * mass_down / (mass_up + mass_down)
    return 0.5 + even_level(g * math.sqrt(mu), 0)


def two_body_levels(lam: float, omega: float, states: int, parity: int | None = None) -> list[tuple[float, int]]:
    """The lowest ``states`` (E, parity) levels of 1+1 in the sector ``parity`` (+1, -1 or None for both).

    Only the even relative levels that can be among them are shot: with every even level at its upper
    bracket end the ``states``-th energy E_cut is an upper bound, and a level whose lower bracket end puts
    it above E_cut cannot enter.
    """
    ladder = states + 2
    cut = total_levels([_bracket(lam, n)[1] for n in range(ladder)], omega, states, parity)[-1][0]
    needed = [n for n in range(ladder) if omega * (0.5 + _bracket(lam, n)[0]) <= cut]
    return total_levels([even_level(lam, n) for n in needed], omega, states, parity)
