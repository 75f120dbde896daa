"""Backend ``strong-coupling``: the fermionized manifold split by the effective spin chain, to O(1/g).

Method (Volosniev et al., Nat. Commun. 5, 5300 (2014); Deuretzbacher et al., Phys. Rev. A 90,
013611 (2014); Levinsen et al., Sci. Adv. 1, e1500197 (2015)): for equal masses m and a common
harmonic frequency omega, as g -> +inf the lowest C(N, N_up) states of N_up + N_down fermions become
degenerate at N^2/2 (fermionization); to first order in 1/g they split as

    E = omega (N^2/2 - K / g~),   g~ = g sqrt(m / omega)  (g in units of hbar omega times length),

with K the eigenvalues of H_spin = sum_k J_k (1 - P_{k,k+1}) in the (N_up, N_down) sector. The
exchange coefficients J_k come from the Slater determinant of N spinless fermions; they are reduced
exactly to one-dimensional integrals and integrated by Gauss-Legendre quadrature with node doubling
until two successive results agree to ``tolerance`` (``trapbench.problems.exact.exchange``); the chain
is diagonalized by reversal sector in ``backends.spin_chain``.

Reported per state (ascending energy = descending K): parity (-1)^(N(N-1)/2) times the chain-reversal
eigenvalue; ``com`` = 0 (the manifold is built on the fermionized state, whose centre of mass is in
its ground state); scalars ``delta`` = dE/dg = omega sqrt(m/omega) K/g~^2 and ``contact`` =
(2 mu)^2 g^2 dE/dg = m^2 g^2 dE/dg = (m omega)^(3/2) K, both of the O(1/g) model; observables ``density_up``/``density_down`` at g = inf (Deuretzbacher et al. 2014):
n_s(x) = sum_i rho_i(x) Prob(site i has spin s), rho_i the density of the i-th particle from the left.

Error estimate (rule of this backend, calibrated on no other method): the neglected term is
c2/g~^2; c2 is known for 1+1 only, c2 = (1 - ln 2) K^2 = 0.31 K^2 (expanding Busch's equation,
T. Busch et al., Found. Phys. 28, 549 (1998), about lambda = inf). Each level carries
NEXT_ORDER_FACTOR K^2/g~^2 with NEXT_ORDER_FACTOR = 1, about three times the 1+1 coefficient: for
N > 2 this is an estimate, not a bound. The K = 0 level (the spin-symmetric, fully antisymmetric
state) is exact at every g. Below g~ = MIN_COUPLING_OVER_K K_max the expansion is flagged unreliable.
The repulsive branch only: g <= 0 is unsupported.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..problems.spec import Problem
from .base import Backend, Capabilities, Parameter, Support
from .result import Observable, Solution
from .spin_chain import MAX_CHAIN_STATES, chain_is_tractable, spin_chain_spectrum, spin_resolved_densities

# |c2| <= NEXT_ORDER_FACTOR K^2 is assumed for the neglected O(1/g^2) term (see the module docstring)
NEXT_ORDER_FACTOR = 1.0
# below g~ = MIN_COUPLING_OVER_K * K_max the levels of the manifold are not well separated by 1/g: warn
MIN_COUPLING_OVER_K = 2.0


def _suffix(state: int) -> str:
    return "" if state == 0 else f"@{state}"


class StrongCouplingBackend(Backend):
    name = "strong-coupling"
    version = "1"
    summary = (
        "First order in 1/g about fermionization: effective spin chain (Volosniev et al. 2014,"
        " Deuretzbacher et al. 2014); equal masses, g > 0"
    )
    parameters = (
        Parameter(
            "tolerance",
            float,
            1e-12,
            "absolute convergence target of the exchange coefficients J_k (Gauss-Legendre node doubling)",
            minimum=1e-15,
        ),
    )

    # unequal masses or trap frequencies lift the degeneracy of the fermionized manifold the chain acts
    # in; the expansion is in 1/g about g = +inf, so only the repulsive branch
    capabilities = Capabilities(
        unequal_masses=False,
        unequal_frequencies=False,
        couplings="repulsive",
        observables=("density", "contact"),
        error_bars=True,
        built_on=("fermionization",),  # E_inf is the fermionized tower (its K comes by a route of its own)
    )

    def supports(self, problem: Problem, params: dict[str, Any] | None = None) -> Support:
        up, down = problem.species
        if up.count < 1 or down.count < 1:
            return Support.no("both species need at least one particle (otherwise g does nothing: use g = 0 results)")
        if not chain_is_tractable(up.count, down.count):
            return Support.no(
                f"the spin chain of {up.count}+{down.count} has {math.comb(problem.n_particles, up.count)} states;"
                f" at most {MAX_CHAIN_STATES} are diagonalized here"
            )
        size = math.comb(problem.n_particles, up.count)
        wanted = problem.targets.parity
        if wanted != "any":
            size = int(np.sum(spin_chain_spectrum(up.count, down.count).spatial_parity == (1 if wanted == "even" else -1)))
        if problem.targets.states > size:
            return Support.no(
                f"the fermionized manifold has {size} states in parity sector '{wanted}';"
                f" ask for targets.states <= {size}"
            )
        return Support.yes()

    def compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        up, down = problem.species
        mass, omega = up.mass, up.omega
        n = problem.n_particles
        spectrum = spin_chain_spectrum(up.count, down.count, params["tolerance"])
        couplings = spectrum.couplings
        wanted = {"any": None, "even": 1, "odd": -1}[problem.targets.parity]
        chosen = [i for i, p in enumerate(spectrum.spatial_parity) if wanted in (None, p)][: problem.targets.states]
        g_scaled = problem.coupling * math.sqrt(mass / omega)
        k_values = [float(spectrum.k_values[i]) for i in chosen]
        energies = [omega * (n * n / 2 - k / g_scaled) for k in k_values]
        errors = [omega * NEXT_ORDER_FACTOR * k * k / g_scaled**2 for k in k_values]
        states = [
            {
                "parity": int(spectrum.spatial_parity[i]),
                "com": 0,
                "K": k,
                "degeneracy": sum(1 for other in spectrum.k_values if abs(other - k) < 1e-9 * max(1.0, k)),
            }
            for i, k in zip(chosen, k_values)
        ]
        scalars = {}
        for position, k in enumerate(k_values):
            slope = omega * math.sqrt(mass / omega) * k / g_scaled**2
            scalars["delta" + _suffix(position)] = slope
            scalars["contact" + _suffix(position)] = mass**2 * problem.coupling**2 * slope
        observables = {}
        if "density" in problem.targets.observables:
            x_max, _ = problem.extent()
            x = np.linspace(-x_max, x_max, problem.targets.grid_points)
            width = 1.0 / math.sqrt(mass * omega)
            for position, i in enumerate(chosen):
                n_up, n_down = spin_resolved_densities(spectrum, i, x / width)
                for name, values, count in (("density_up", n_up, up.count), ("density_down", n_down, down.count)):
                    observables[name + _suffix(position)] = Observable(
                        values=values / width,
                        axes={"x": x},
                        units="1/length",
                        normalization=f"integral dx = {count} (g = inf limit)",
                        state=position,
                    )
        warnings = []
        if g_scaled < MIN_COUPLING_OVER_K * max(spectrum.k_values):
            warnings.append(
                f"g = {g_scaled:.4g} is not large against K_max = {max(spectrum.k_values):.4g}:"
                " the first-order expansion in 1/g is unreliable here"
            )
        return Solution(
            energies=energies,
            states=states,
            observables=observables,
            scalars=scalars,
            error_estimate=max(errors),
            energy_errors=errors,
            diagnostics={
                "J": list(couplings.values),
                "J_quadrature_nodes": couplings.nodes,
                "J_convergence": couplings.convergence,
                "manifold_size": len(spectrum.k_values),
            },
            warnings=warnings,
        )
