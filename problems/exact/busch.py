"""Two particles with a contact interaction in a common harmonic trap: Busch's equation and its roots.

T. Busch, B.-G. Englert, K. Rzazewski, M. Wilkens, Found. Phys. 28, 549 (1998) (bibliographic details
from memory), 1D case re-derived here. With a common frequency omega the centre of mass separates for
any masses; the relative motion, in units of its oscillator length (y = sqrt(mu omega) r, mu the
reduced mass in m0), is

    H_rel / omega = -1/2 d^2/dy^2 + y^2/2 + lambda delta(y),   lambda = g sqrt(mu / omega).

Odd relative levels e = 3/2 + 2n do not feel the contact; even levels solve

    Gamma(3/4 - e/2) / Gamma(1/4 - e/2) = -lambda / 2,                                          (*)

written as the entire function h(e) = 1/Gamma(1/4 - e/2) + (lambda/2)/Gamma(3/4 - e/2) = 0, whose
roots interlace with the non-interacting levels. Total energies E = omega (n_cm + 1/2 + e), parity
(-1)^n_cm times the relative parity. Units: hbar = omega_ref = 1.

Two root finders of (*), for two jobs:
- ``busch_even_level``: mpmath bisection in 30-digit arithmetic (reference precision, ~1e-27);
- ``even_relative_level``: scipy Brent in double precision, with the deep attractive ground state
  solved in log-Gamma form (fast; used inside solvers).
They share the equation only; tests check both against an ODE-shooting solution of H_rel.
"""

from __future__ import annotations

import math
import sys
from functools import lru_cache

import mpmath
from scipy import optimize, special

BUSCH_DIGITS = 30
BISECTION_STEPS = 110  # brackets are < 2^10 wide; 2^-100 leaves ~1e-27
# Brent tolerances: |e - e_exact| <= XTOL + RTOL |e| (scipy.optimize.brentq's guarantee).
XTOL = 1e-14
RTOL = 4 * sys.float_info.epsilon
SMALL_LAMBDA = 1e-13  # below this the attractive root is 1/2 + lambda/sqrt(pi) to double precision


def _busch_function(e, lam):
    return mpmath.rgamma(0.25 - e / 2) + (lam / 2) * mpmath.rgamma(0.75 - e / 2)


@lru_cache(maxsize=4096)
def busch_even_level(lam: float, branch: int) -> float:
    """The ``branch``-th even relative level e (0 = lowest) of (*), to ~1e-27 (mpmath bisection)."""
    with mpmath.workdps(BUSCH_DIGITS):
        lam_mp = mpmath.mpf(lam)
        upper = mpmath.mpf(1.5) + 2 * branch
        lower = upper - 2 if branch > 0 else min(mpmath.mpf(-0.5), -lam_mp**2 / 2 - 2)
        f_lower, f_upper = _busch_function(lower, lam_mp), _busch_function(upper, lam_mp)
        if f_lower * f_upper > 0:
            raise ArithmeticError(f"no sign change of Busch's function on [{lower}, {upper}] for lambda = {lam}")
        # bisection: the function is entire and changes sign exactly once on the bracket
        for _ in range(BISECTION_STEPS):
            middle = (lower + upper) / 2
            f_middle = _busch_function(middle, lam_mp)
            if f_middle * f_lower > 0:
                lower, f_lower = middle, f_middle
            else:
                upper = middle
        return float((lower + upper) / 2)


def even_relative_level(lam: float, n: int) -> float:
    """The n-th even relative level e_n(lambda) of (*) in double precision (error <= XTOL + RTOL |e|)."""
    if lam == 0.0:
        return 0.5 + 2 * n

    def h(e: float) -> float:
        return special.rgamma(0.25 - e / 2) + 0.5 * lam * special.rgamma(0.75 - e / 2)

    if lam > 0:
        return optimize.brentq(h, 0.5 + 2 * n, 1.5 + 2 * n, xtol=XTOL, rtol=RTOL)
    if n >= 1:
        return optimize.brentq(h, 2 * n - 0.5, 2 * n + 0.5, xtol=XTOL, rtol=RTOL)
    if -lam < SMALL_LAMBDA:
        return 0.5 + lam / math.sqrt(math.pi)
    # attractive ground state, e < 1/2: Gamma(a)/Gamma(b) grows like sqrt(b) as e -> -inf and
    # behaves like sqrt(pi) b as b -> 0+, which brackets the root.
    target = math.log(-lam / 2)

    def f(e: float) -> float:
        return special.gammaln(0.75 - e / 2) - special.gammaln(0.25 - e / 2) - target

    low = -0.5 * lam * lam - 2.0
    high = 0.5 - (-lam) / (10 * math.sqrt(math.pi))
    return optimize.brentq(f, low, high, xtol=XTOL, rtol=RTOL)


def relative_levels(lam: float, count: int) -> list[tuple[float, int]]:
    """The lowest ``count`` even and ``count`` odd relative levels as (e, relative parity), double precision."""
    even = [(even_relative_level(lam, n), +1) for n in range(count)]
    odd = [(2 * j + 1.5, -1) for j in range(count)]
    return sorted(even + odd)


def two_body_levels(lam: float, omega: float, states: int, parity: int | None = None) -> list[tuple[float, int]]:
    """The lowest ``states`` (E, parity) levels of 1+1 with the given relative coupling, in the parity
    sector ``parity`` (+1, -1 or None for both), from the 30-digit roots; E = omega (n_cm + 1/2 + e)."""
    return total_levels([busch_even_level(lam, n) for n in range(states + 2)], omega, states, parity)


def total_levels(even: list[float], omega: float, states: int, parity: int | None = None) -> list[tuple[float, int]]:
    """The lowest ``states`` (E, parity) levels E = omega (n_cm + 1/2 + e) in the sector ``parity``, from the
    even relative levels ``even`` (ascending) and the contact-free odd ones e = 3/2 + 2n; parity (-1)^n_cm
    times the relative parity. Exact when ``even`` holds every even level that can be among them."""
    ladder = states + 2
    relative = [(e, 1) for e in even] + [(1.5 + 2 * n, -1) for n in range(ladder)]
    levels = [
        (omega * (n_cm + 0.5 + e), (-1) ** n_cm * rel_parity)
        for n_cm in range(ladder)
        for e, rel_parity in relative
        if parity in (None, (-1) ** n_cm * rel_parity)
    ]
    levels.sort(key=lambda level: level[0])
    return levels[:states]


def hard_core_two_body_levels(omega: float, states: int, parity: int | None = None) -> list[float]:
    """The lowest ``states`` levels of 1+1 at lambda = +inf: the even relative levels tend to
    e = 3/2 + 2n and join the odd ones, so each E = omega (n_cm + 2 + 2n) holds one state of each parity."""
    copies = 2 if parity is None else 1
    ladder = states + 1
    values = sorted(omega * (n_cm + 2 + 2 * n) for n_cm in range(ladder) for n in range(ladder) for _ in range(copies))
    return values[:states]
