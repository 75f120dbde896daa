"""2+1 (or 1+2) fermions with any masses at g = +inf: hard-wall wedges of the relative plane, and the
first-order 1/g slopes of their levels.

In mass-scaled Jacobi coordinates the relative motion of three particles in a common trap omega is a 2D
isotropic oscillator; the coincidence lines of the odd particle with the two pair members cut the plane
into wedges. A 2D oscillator in a wedge of angle theta with hard walls has
E_rel = omega (2 n + k pi/theta + 1), modes rho^nu L_n^nu(rho^2) exp(-rho^2/2) sin(nu phi), nu = k pi/theta.
The two wedges with the odd particle outside (angle 2 theta_o) allow only modes odd about their bisector
(the pair's antisymmetry), k even; the two wedges with the odd particle inside (angle theta_i each) are
exchanged by the pair's antisymmetry and give one state per mode. For particle j between i and k the
sector angle is arccos sqrt(m_i m_k / ((m_i + m_j)(m_j + m_k))), from the normals of x_i = x_j in
mass-scaled coordinates. Derived here; the construction is that of e.g. N. L. Harshman et al.,
Phys. Rev. X 7, 041001 (2017) (reference from memory). For equal masses every angle is pi/3 and the
fermionized spectrum is recovered.

Near g = +inf a hard wall turns into a delta line of strength g sqrt(mu) (mu = reduced mass of a pair
member and the odd particle, units of m0); to first order the wave function leaks as
psi(wall) = (d psi/d s)/(2 g sqrt(mu)), and Hellmann-Feynman integrated from g to inf gives
E = E_inf - K sqrt(omega)/g with K = sum over walls of int |d psi/d s|^2 / (4 sqrt(mu)). A state of one
wedge (or the antisymmetric pair of inside wedges) touches its own walls only; levels of different
families do not mix at this order unless degenerate with the same centre-of-mass quantum number (then K
is reported as NaN). Units: energies in hbar omega_ref, masses in m0, K in hbar omega_ref times
sqrt(hbar^3 omega_ref/m0).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy import integrate, special


@dataclass(frozen=True)
class WedgeLevel:
    """One level of 2+1 at g = +inf: energy, its 1/g coefficient K (E = E_inf - K sqrt(omega)/g), family."""

    energy: float
    k: float
    family: str  # "outside" (odd particle left or right of the pair) or "inside" (odd particle in the middle)


def wedge_wall_integral(theta: float, nu: float, radial: int) -> float:
    """int_0^inf |(1/rho) d psi/d phi|^2 d rho on one wall, psi normalized in a wedge of angle theta.

    psi = N rho^nu L_n^nu(rho^2) exp(-rho^2/2) sin(nu phi); with t = rho^2 the integrals are
    Gamma-weighted Laguerre moments, done by scipy.integrate.quad.
    """

    def moment(power: float) -> float:
        value, _ = integrate.quad(lambda t: t**power * special.eval_genlaguerre(radial, nu, t) ** 2 * math.exp(-t),
                                  0, math.inf, limit=200, epsabs=0, epsrel=1e-13)
        return value / 2

    norm2 = 1.0 / (theta / 2 * moment(nu))  # int rho^(2 nu + 1) L^2 e^(-rho^2) d rho = moment(nu)
    return norm2 * nu * nu * moment(nu - 1.5)


def wedge_angles(pair_mass: float, odd_mass: float) -> tuple[float, float]:
    """(theta_outside, theta_inside): sector angles with a pair member, resp. the odd particle, in the middle."""
    big, small = pair_mass, odd_mass
    theta_outside = math.acos(math.sqrt(small * big / ((small + big) * 2 * big)))
    theta_inside = math.acos(big / (big + small))
    return theta_outside, theta_inside


def wedge_spectrum(pair_mass: float, odd_mass: float, omega: float, states: int) -> list[WedgeLevel]:
    """The lowest ``states`` levels at g = +inf of 2+1 (both parities), with their strong-coupling slopes K."""
    mu = pair_mass * odd_mass / (pair_mass + odd_mass)
    theta_outside, theta_inside = wedge_angles(pair_mass, odd_mass)
    ladder = states + 2
    # (family, wedge angle, exponent nu, copies): outside wedges have angle 2 theta_o and only modes odd
    # about their bisector, nu = j pi / theta_o; the two inside wedges give one state per mode, nu = k pi / theta_i
    modes = [("outside", 2 * theta_outside, j * math.pi / theta_outside, 2) for j in range(1, ladder + 1)]
    modes += [("inside", theta_inside, k * math.pi / theta_inside, 1) for k in range(1, ladder + 1)]
    candidates = []
    for family, theta, nu, copies in modes:
        for radial in range(ladder):
            relative = 2 * radial + nu + 1
            for com in range(ladder):
                candidates.append((relative + com + 0.5, family, theta, nu, radial, copies, com))
    candidates.sort()
    chosen = []
    for candidate in candidates:
        chosen += [candidate] * candidate[5]
        if len(chosen) >= states:
            break
    levels = []
    for energy, family, theta, nu, radial, _, com in chosen[:states]:
        # the walls act on the relative motion only: states mix if they share the centre-of-mass quantum
        # number and the energy but are different relative modes
        mixed = any(abs(c[0] - energy) < 1e-9 and c[6] == com and (c[1], c[3], c[4]) != (family, nu, radial)
                    for c in candidates)
        k = math.nan if mixed else 2 * wedge_wall_integral(theta, nu, radial) / (4 * math.sqrt(mu))
        levels.append(WedgeLevel(omega * energy, k, family))
    return levels
