"""Observables of a lattice state in continuum normalization, from its site expectation values.

With c_j = sqrt(a) psi(x_j) (see ``lattice``):

- density n_s(x_j) = <n_{s,j}> / a, integral dx = N_s;
- one-body density matrix rho_s(x_i, x_j) = <c+_{s,i} c_{s,j}> / a, trace (sum_j a rho(x_j, x_j)) = N_s;
- momentum distribution n_s(p) = (a / 2 pi) sum_ij e^{i p (x_i - x_j)} <c+_{s,i} c_{s,j}>, integral dp = N_s
  over the Brillouin zone |p| < pi / a;
- pair correlation G(x_i, x_j) = <n_{up,i} n_{down,j}> / a^2, integral = N_up N_down;
- <sum delta(x_up - x_down)> = sum_j <n_{up,j} n_{down,j}> / a (= dE/dg on the lattice, Hellmann-Feynman),
  Tan's contact C = (2 mu)^2 g^2 <sum delta>; <V_trap> = sum_s sum_j V_s(x_j) <n_{s,j}>.

Units: lengths sqrt(hbar/(m0 omega_ref)), momenta sqrt(hbar m0 omega_ref), energies hbar omega_ref.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..problems.spec import Problem
from . import lattice
from .result import Observable


@dataclass
class SiteExpectations:
    """Expectation values of one lattice state; ``obdm``/``pair`` may be None when not requested."""

    densities: tuple[np.ndarray, np.ndarray]  # <n_{s,j}>, s = up, down
    double_occupancy: np.ndarray  # <n_{up,j} n_{down,j}>
    obdm: tuple[np.ndarray, np.ndarray] | None = None  # <c+_{s,i} c_{s,j}>
    pair: np.ndarray | None = None  # <n_{up,i} n_{down,j}>


def needs_obdm(problem: Problem) -> bool:
    return bool({"obdm", "momentum"} & set(problem.targets.observables))


def needs_pair(problem: Problem) -> bool:
    return "pair_position" in problem.targets.observables


def scalars(problem: Problem, grid: lattice.Grid, site: SiteExpectations, energy: float) -> dict[str, float]:
    """trap_energy, kinetic_energy, delta and contact of one state (always computed: they are cheap)."""
    g = problem.coupling
    delta = float(np.sum(site.double_occupancy)) / grid.spacing
    trap = sum(
        float(np.dot(problem.trap.potential(grid.x, s), n)) for s, n in zip(problem.species, site.densities) if s.count
    )
    return {
        "trap_energy": trap,
        "kinetic_energy": energy - trap - g * delta,
        "delta": delta,
        "contact": (2 * problem.reduced_mass()) ** 2 * g**2 * delta,
    }


def observables(problem: Problem, grid: lattice.Grid, site: SiteExpectations, state: int) -> tuple[dict[str, Observable], list[str]]:
    """The requested observables of one state, named as in ``result.OBSERVABLE_NAMES`` (suffix @k)."""
    wanted = set(problem.targets.observables)
    suffix = "" if state == 0 else f"@{state}"
    a = grid.spacing
    out: dict[str, Observable] = {}
    notes: list[str] = []
    for s, name in enumerate(("up", "down")):
        if "density" in wanted:
            out[f"density_{name}{suffix}"] = Observable(
                site.densities[s] / a, {"x": grid.x}, "1/length", f"integral dx = N_{name}", state
            )
        if "obdm" in wanted:
            out[f"obdm_{name}{suffix}"] = Observable(
                site.obdm[s] / a, {"x": grid.x, "x'": grid.x}, "1/length", f"trace = N_{name}", state
            )
        if "momentum" in wanted:
            momenta, note = lattice.momentum_grid(problem, grid)
            if note and note not in notes:
                notes.append(note)
            out[f"momentum_{name}{suffix}"] = Observable(
                lattice.momentum_distribution(site.obdm[s], grid, momenta),
                {"p": momenta},
                "1/momentum",
                f"integral dp = N_{name} over |p| < pi/a",
                state,
            )
    if "pair_position" in wanted:
        out[f"pair_position{suffix}"] = Observable(
            site.pair / a**2, {"x_up": grid.x, "x_down": grid.x}, "1/length^2", "integral = N_up N_down", state
        )
    return out, notes
