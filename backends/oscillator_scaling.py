"""An oscillator basis whose length differs from the trap's, and the automatic choice of that length.

Species s (mass m, trap frequency omega, trap length b_t = 1/sqrt(m omega)) may be expanded in the
orbitals phi_n(x; b) of an oscillator of another length b, i.e. of frequency w = 1/(m b^2)
(units of ``problems.spec``). In that basis the one-body Hamiltonian is no longer diagonal:

    h = p^2/(2m) + m omega^2 x^2/2 = [p^2/(2m) + m w^2 x^2/2] + m (omega^2 - w^2) x^2/2
      = diag(w (n + 1/2)) + ((omega/w)^2 - 1) T_w,      T_w = <a| m w^2 x^2/2 |b>,

with T_w pentadiagonal (``problems.exact.oscillator.trap_matrix``, ladder-operator algebra); parity
(-1)^n is still conserved. The trap's own lowering operator is the Bogoliubov combination
a_t = ((r + 1/r)/2) c + ((r - 1/r)/2) c+, r = b/b_t (from x = b (c + c+)/sqrt 2, p = i (c+ - c)/(b sqrt 2)).

Why: a bound dimer of reduced mass mu has relative size 1/(mu |g|); for heavy-light mixtures with
attraction (mass ratio 20/3, g = -3) it is far smaller than the light species' trap length, and the
trap orbitals need very many quanta to describe it. ``choose_lengths`` minimizes the lowest energy of
the bare (variational) Hamiltonian at a small cutoff over the length of each species (Rayleigh-Ritz:
the lower energy is the better basis at that size; common practice, no source), by coordinate
descent over log(b_s / b_t,s) with Brent's bounded method.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
from scipy.optimize import minimize_scalar

from ..problems.exact.oscillator import trap_matrix

# the basis length is searched in [SMALLEST_SCALE, 1] x the trap length: a bound pair only shrinks
# the wave function, and a basis wider than the trap was never lower in energy where measured
SMALLEST_SCALE = 0.15
SWEEPS = 2  # coordinate-descent sweeps over the species (a second sweep moved b by < 2 % where measured)


def basis_frequency(mass: float, length: float) -> float:
    """w = 1/(m b^2): the frequency whose oscillator has length b."""
    return 1.0 / (mass * length**2)


def one_body_matrix(n_orbitals: int, mass: float, omega: float, length: float) -> np.ndarray:
    """h = diag(w (n + 1/2)) + ((omega/w)^2 - 1) T_w in the orbitals of length b (module docstring)."""
    w = basis_frequency(mass, length)
    h = ((omega / w) ** 2 - 1.0) * trap_matrix(n_orbitals, w)
    h[np.diag_indices(n_orbitals)] += w * (np.arange(n_orbitals) + 0.5)
    return h


def trap_potential_matrix(n_orbitals: int, mass: float, omega: float, length: float) -> np.ndarray:
    """<a| m omega^2 x^2/2 |b> = (omega/w)^2 T_w in the orbitals of length b."""
    w = basis_frequency(mass, length)
    return (omega / w) ** 2 * trap_matrix(n_orbitals, w)


def trap_lowering_matrix(n_orbitals: int, trap_length: float, length: float) -> np.ndarray:
    """<a| a_t |b> of the trap's lowering operator a_t = u c + v c+ (u, v in the module docstring)."""
    r = length / trap_length
    u, v = 0.5 * (r + 1 / r), 0.5 * (r - 1 / r)
    n = np.arange(1, n_orbitals)
    matrix = np.zeros((n_orbitals, n_orbitals))
    matrix[n - 1, n] = u * np.sqrt(n)
    matrix[n, n - 1] = v * np.sqrt(n)
    return matrix


def choose_lengths(
    trap_lengths: Sequence[float], lowest_energy: Callable[[tuple[float, ...]], float]
) -> tuple[tuple[float, ...], dict]:
    """Basis lengths b_s minimizing ``lowest_energy(lengths)`` (the bare ground energy at a small cutoff).

    Each b_s is searched on log(b_s / b_t,s) in [log SMALLEST_SCALE, 0]. Returns the lengths and a
    record of the search (energies at the trap lengths and at the optimum, number of evaluations).
    """
    logs = [0.0] * len(trap_lengths)
    evaluations = 0

    def energy(candidate: Sequence[float]) -> float:
        nonlocal evaluations
        evaluations += 1
        return float(lowest_energy(tuple(b * math.exp(s) for b, s in zip(trap_lengths, candidate))))

    at_trap = energy(logs)
    best = at_trap
    for _ in range(SWEEPS):
        for index in range(len(logs)):
            def along(s: float, index=index) -> float:
                trial = list(logs)
                trial[index] = s
                return energy(trial)

            found = minimize_scalar(along, bounds=(math.log(SMALLEST_SCALE), 0.0), method="bounded", options={"xatol": 0.01})
            if found.fun < best:
                best, logs[index] = float(found.fun), float(found.x)
    lengths = tuple(b * math.exp(s) for b, s in zip(trap_lengths, logs))
    return lengths, {"energy_at_trap_lengths": at_trap, "energy_at_chosen_lengths": best, "evaluations": evaluations}
