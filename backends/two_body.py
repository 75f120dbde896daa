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

Root finding: the double-precision Brent route of ``trapbench.problems.exact.busch``
(``even_relative_level``), whose error XTOL + RTOL |e| is reported as each level's error bar.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import interpolate, special

from ..problems.exact.busch import RTOL, XTOL, relative_levels
from ..problems.exact.oscillator import hermite_function
from ..problems.spec import Problem
from .base import Backend, Capabilities, Parameter
from .result import Observable, Solution

def relative_wavefunction(e: float, parity: int, y: np.ndarray) -> np.ndarray:
    """psi(y) for the relative level e (normalized numerically by the caller).

    Even: D_nu(sqrt(2)|y|), nu = e - 1/2. Odd: the oscillator eigenfunction with quantum number e - 1/2.
    """
    if parity > 0:
        values, _ = special.pbdv(e - 0.5, math.sqrt(2) * np.abs(y))
        return values
    n = int(round(e - 0.5))
    return hermite_function(n, y)


class TwoBodyBackend(Backend):
    name = "two-body"
    version = "1"
    summary = "Exact 1+1 solution (Busch et al., Found. Phys. 28, 549 (1998)); any masses, any g"
    capabilities = Capabilities(
        particle_counts=((1, 1),),
        unequal_frequencies=False,  # the centre of mass separates only with one trap frequency
        observables=("density", "momentum", "contact", "trap_energy"),
        error_bars=True,
        built_on=("busch-roots",),  # graded by ODE shooting of the relative problem instead
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
