"""Backend ``two-body``: the exact solution for one up and one down fermion in a harmonic trap.

Method (T. Busch, B.-G. Englert, K. Rzazewski, M. Wilkens, Found. Phys. 28, 549 (1998), 1D case).
With a common trap frequency omega the centre of mass X = (m_up x_up + m_down x_down)/M separates
for any masses and contributes omega (n + 1/2), n = 0, 1, ... The relative motion r = x_up - x_down,
in units of its own oscillator length (y = sqrt(mu omega) r), is

    H_rel / omega = -1/2 d^2/dy^2 + y^2/2 + lambda delta(y),   lambda = g sqrt(mu / omega),

whose odd levels e = 2j + 3/2 do not feel the contact interaction, and whose even levels solve

    Gamma(3/4 - e/2) / Gamma(1/4 - e/2) = -lambda / 2,                                   (*)

with wave functions psi(y) ~ D_nu(sqrt(2) |y|), nu = e - 1/2 (parabolic-cylinder functions).
Total energies are E = omega (n + 1/2 + e); parity is (-1)^n for even relative states and -(-1)^n
for odd ones. Units: hbar = omega_ref = 1, masses in m0.

Root finding: for lambda > 0 (and for the excited even levels at lambda < 0) equation (*) is
rewritten as the entire function h(e) = 1/Gamma(1/4 - e/2) + (lambda/2)/Gamma(3/4 - e/2), whose
roots interlace with the non-interacting levels and are bracketed exactly; the attractive ground
state (e < 1/2) is solved as log Gamma(3/4 - e/2) - log Gamma(1/4 - e/2) = log(-lambda/2), which
stays finite for deeply bound pairs. Brent's method to machine precision.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import interpolate, optimize, special

from ..problems.spec import Problem
from .base import Backend, Capabilities, Parameter
from .result import Observable, Solution

# Brent tolerances: |e - e_exact| <= XTOL + RTOL |e| (scipy.optimize.brentq's guarantee).
XTOL = 1e-14
RTOL = 4 * np.finfo(float).eps
SMALL_LAMBDA = 1e-13  # below this the attractive root is 1/2 + lambda/sqrt(pi) to double precision


def even_relative_level(lam: float, n: int) -> float:
    """The n-th even relative level e_n(lambda) of equation (*), in units of omega."""
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
    """The lowest ``count`` even and ``count`` odd relative levels as (e, relative parity) pairs."""
    even = [(even_relative_level(lam, n), +1) for n in range(count)]
    odd = [(2 * j + 1.5, -1) for j in range(count)]
    return sorted(even + odd)


def relative_wavefunction(e: float, parity: int, y: np.ndarray) -> np.ndarray:
    """psi(y) for the relative level e (normalized numerically by the caller).

    Even: D_nu(sqrt(2)|y|), nu = e - 1/2. Odd: the oscillator eigenfunction with quantum number e - 1/2.
    """
    if parity > 0:
        values, _ = special.pbdv(e - 0.5, math.sqrt(2) * np.abs(y))
        return values
    n = int(round(e - 0.5))
    return hermite_function(n, y)


def hermite_function(n: int, y: np.ndarray) -> np.ndarray:
    """Normalized oscillator eigenfunction phi_n(y) (unit width), by the stable three-term recurrence."""
    y = np.asarray(y, dtype=float)
    previous = np.zeros_like(y)
    current = np.pi**-0.25 * np.exp(-0.5 * y * y)
    for k in range(n):
        previous, current = current, math.sqrt(2 / (k + 1)) * y * current - math.sqrt(k / (k + 1)) * previous
    return current


class TwoBodyBackend(Backend):
    name = "two-body"
    version = "1"
    summary = "Exact 1+1 solution (Busch et al., Found. Phys. 28, 549 (1998)); any masses, any g"
    capabilities = Capabilities(
        particle_counts=((1, 1),),
        unequal_frequencies=False,  # the centre of mass separates only with one trap frequency
        observables=("density", "momentum", "contact", "trap_energy"),
        error_bars=True,
    )
    parameters = (
        Parameter(
            "relative_points",
            int,
            1500,
            "Gauss-Legendre nodes on the half-line r >= 0 for normalization, densities and momenta",
            minimum=200,
        ),
    )

    # ------------------------------------------------------------------ spectrum
    def spectrum(self, problem: Problem) -> list[dict[str, Any]]:
        """Every level up to well above the requested ones: energy, parity, com, relative level."""
        omega = problem.up.omega
        lam = problem.coupling * math.sqrt(problem.reduced_mass() / omega)
        k = problem.targets.states
        levels = []
        for e, rel_parity in relative_levels(lam, k + 2):
            for n in range(2 * k + 3):
                levels.append(
                    {
                        "energy": omega * (n + 0.5 + e),
                        "parity": rel_parity * (-1) ** n,
                        "com": n,
                        "relative_energy": omega * e,
                        "relative_parity": rel_parity,
                    }
                )
        levels.sort(key=lambda s: s["energy"])
        return levels

    def compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        levels = self.spectrum(problem)
        wanted = {"any": None, "even": +1, "odd": -1}[problem.targets.parity]
        chosen = [s for s in levels if wanted is None or s["parity"] == wanted][: problem.targets.states]
        for state in chosen:
            same = [s for s in levels if abs(s["energy"] - state["energy"]) <= 1e-10 * max(1.0, abs(state["energy"]))]
            state["degeneracy"] = len(same)
        energies = [s["energy"] for s in chosen]
        errors = [XTOL + RTOL * abs(s["relative_energy"]) for s in chosen]
        observables, scalars = self._ground_observables(problem, chosen[0], params["relative_points"])
        return Solution(
            energies=energies,
            states=[{k: v for k, v in s.items() if k != "energy"} for s in chosen],
            observables=observables,
            scalars=scalars,
            error_estimate=max(errors),
            energy_errors=errors,
            diagnostics={"lambda": problem.coupling * math.sqrt(problem.reduced_mass() / problem.up.omega)},
        )

    # ------------------------------------------------------------------ observables of state 0
    def _ground_observables(
        self, problem: Problem, state: dict, points: int
    ) -> tuple[dict[str, Observable], dict[str, float]]:
        """Densities and momentum distributions of the first reported state, and its scalars.

        The state is phi_n(X) psi(r); with X = x_up - (m_down/M) r the densities are convolutions
        n_up(x) = int dr |phi_n(x - m_down r/M)|^2 |psi(r)|^2 (and x + m_up r/M for down); in momentum,
        p_up = (m_up/M) P + k, p_down = (m_down/M) P - k with |Phi_n(P)|^2 and |psi~(k)|^2.
        """
        omega, g = problem.up.omega, problem.coupling
        m_up, m_down = problem.up.mass, problem.down.mass
        total, mu = m_up + m_down, problem.reduced_mass()
        com_width, rel_width = 1 / math.sqrt(total * omega), 1 / math.sqrt(mu * omega)
        e = state["relative_energy"] / omega
        r_max = 12 * rel_width  # psi decays like exp(-y^2/2) at large y for every level
        # psi is analytic on r > 0 (the cusp sits at r = 0): Gauss-Legendre on [0, r_max] converges fast
        nodes, weights = special.roots_legendre(points)
        r, w = 0.5 * r_max * (nodes + 1), 0.5 * r_max * weights
        raw = relative_wavefunction(e, state["relative_parity"], np.concatenate([[0.0], r / rel_width]))
        norm = math.sqrt(2 * np.dot(w, raw[1:] ** 2))
        psi = raw[1:] / norm
        rho_rel = psi**2
        delta = float((raw[0] / norm) ** 2)  # <delta(r)> = |psi(0)|^2, zero for odd relative states
        n = state["com"]
        trap_energy = omega * (n + 0.5) / 2 + 0.5 * mu * omega**2 * 2 * np.dot(w, r**2 * rho_rel)
        scalars = {
            "delta": delta,
            "contact": (2 * mu) ** 2 * g * g * delta,
            "trap_energy": float(trap_energy),
        }
        scalars["kinetic_energy"] = state["energy"] - scalars["trap_energy"] - g * delta
        wanted = set(problem.targets.observables)
        observables: dict[str, Observable] = {}
        if not wanted & {"density", "momentum"}:
            return observables, scalars
        x_max, p_max = problem.extent()
        grid = problem.targets.grid_points
        r_full = np.concatenate([-r[::-1], r])
        rho_w = np.concatenate([(w * rho_rel)[::-1], w * rho_rel])
        if "density" in wanted:
            x = np.linspace(-x_max, x_max, grid)
            for label, shift in (("up", -m_down / total), ("down", m_up / total)):
                com = hermite_function(n, (x[:, None] + shift * r_full[None, :]) / com_width) ** 2 / com_width
                values = com @ rho_w
                observables[f"density_{label}"] = Observable(
                    values, {"x": x}, "1/length", f"integral dx = 1 (one {label} particle)"
                )
        if "momentum" in wanted:
            p = np.linspace(-p_max, p_max, grid)
            k_max = p_max + 10 / com_width
            k = np.linspace(0.0, k_max, 4 * grid)  # |psi~(k)|^2 is smooth: a cubic spline resolves it
            kernel = np.sin if state["relative_parity"] < 0 else np.cos
            transform = math.sqrt(2 / math.pi) * (kernel(k[:, None] * r[None, :]) @ (w * psi))
            spline = interpolate.CubicSpline(k, transform**2)
            p_com = np.linspace(-10 / com_width, 10 / com_width, 801)
            com_density = hermite_function(n, p_com * com_width) ** 2 * com_width
            for label, fraction in (("up", m_up / total), ("down", m_down / total)):
                rel_k = np.abs(p[:, None] - fraction * p_com[None, :])
                rel_density = spline(rel_k)
                values = np.trapezoid(com_density[None, :] * rel_density, p_com, axis=1)
                observables[f"momentum_{label}"] = Observable(
                    values, {"p": p}, "1/momentum", f"integral dp = 1 (one {label} particle)"
                )
        return observables, scalars
