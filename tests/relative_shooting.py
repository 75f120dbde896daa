"""Even levels of the 1+1 relative problem by ODE shooting: an independent route to Busch's roots.

    -psi''/2 + y^2 psi / 2 = e psi  on y > 0,   psi'(0+) = lambda psi(0)

(the delta function lambda delta(y) makes psi' jump by 2 lambda psi(0); even states have
psi'(0-) = -psi'(0+)). psi(0) = 1 is integrated outward with scipy's DOP853 to y_max, where the
growing solution dominates unless e is an eigenvalue: psi(y_max; e) changes sign at each even level,
and brentq finds it. Shares nothing with the Gamma-function form of Busch's equation (common
practice, no source: the standard shooting method of e.g. Numerical Recipes, Press et al. (2007), 18.1).
"""

from __future__ import annotations

import math

from scipy import integrate, optimize

Y_MAX = 7.0  # decaying solution ~ exp(-y^2/2) ~ 2e-11 there; measured agreement with 30-digit roots: 3e-13


def _endpoint(e: float, lam: float) -> float:
    def rhs(y, state):
        psi, dpsi = state
        return [dpsi, (y * y - 2 * e) * psi]

    solution = integrate.solve_ivp(rhs, (0.0, Y_MAX), [1.0, lam], method="DOP853", rtol=1e-13, atol=1e-300)
    return solution.y[0, -1]


def even_level(lam: float, branch: int) -> float:
    """The ``branch``-th even relative level e (0 = lowest) for the coupling lambda, by shooting.

    Brackets: for lambda > 0 the level lies in (1/2 + 2n, 3/2 + 2n); for lambda < 0 the excited ones in
    (2n - 1/2, 2n + 1/2) and the ground state below 1/2 (above -lambda^2/2 - 1, the bound pair).
    """
    if lam >= 0:
        low, high = 0.5 + 2 * branch, 1.5 + 2 * branch
    elif branch > 0:
        low, high = 2 * branch - 0.5, 2 * branch + 0.5
    else:
        low, high = -lam * lam / 2 - 1.0, 0.5
    tiny = 1e-9
    return optimize.brentq(_endpoint, low + tiny, high - tiny, args=(lam,), xtol=1e-14, rtol=1e-15)


def ground_energy(g: float, mass_up: float = 1.0, mass_down: float = 1.0) -> float:
    """Total 1+1 ground energy (omega = 1, centre of mass in its ground state): 1/2 + e_0(g sqrt(mu))."""
    mu = mass_up * mass_down / (mass_up + mass_down)
    return 0.5 + even_level(g * math.sqrt(mu), 0)
