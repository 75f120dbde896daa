"""Discretization of the continuum problem on a uniform lattice, shared by the lattice backends.

Finite-difference discretization (common practice): the positions x_j of L sites with spacing a,
for each species s the tight-binding one-body Hamiltonian

    h_s = sum_j (2 t_s + V_s(x_j)) n_{s,j} - t_s sum_j (c+_{s,j} c_{s,j+1} + h.c.),  t_s = 1/(2 m_s a^2),

the three-point Laplacian for p^2/(2 m_s), with open ends, and the contact term
g delta(x_up - x_down) -> U sum_j n_{up,j} n_{down,j} with U = g / a. Energies in hbar omega_ref,
lengths in sqrt(hbar/(m0 omega_ref)).

A site amplitude c_j is sqrt(a) psi(x_j): a lattice orbital delta_{jk} is the continuum function
1/sqrt(a) at x_k, and its momentum amplitude (continuum normalization, integral dp |phi(p)|^2 = 1 over
the Brillouin zone |p| < pi/a) is phi_k(p) = sqrt(a / (2 pi)) exp(-i p x_k).

Measured discretization error (1+1, x_max = 6, spacings 0.05-0.2, masses (1, 1) and (1, 40/6),
g = +-2, against the exact two-body roots): E(a) - E = c_2 a^2 + c_4 a^4 + ... to high accuracy; the
local order is 2.0, the error is negative for g > 0 and positive for g < 0, and a fit with powers
(2, 4) over a = 0.2 ... 0.075 leaves relative errors of 1e-8 to 1e-5. The continuum limit is
therefore taken with ``extrapolate_polynomial(powers=(2, 4))`` over a ladder of spacings.

Box: a hard-wall trap keeps its walls (Dirichlet sites strictly inside); any other trap gets the
half width X from the widest occupied one-body orbital plus a margin, validated by the weight of
that orbital at the edge sites (grown until it is below ``edge_tolerance``).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.sparse as sp

from ..problems.errors import SpecError
from ..problems.spec import Problem, Species
from .extrapolation import Extrapolation, extrapolate_polynomial

# Powers of the spacing in the continuum extrapolation (see the module docstring for the measurement).
CONTINUUM_POWERS = (2.0, 4.0)
# Default ladder: spacings as fractions of the shortest length of the problem (see ``length_scale``).
DEFAULT_SPACING_FRACTIONS = (0.3, 0.22, 0.16, 0.12)
# Default room beyond the classical turning point of the widest orbital, in its oscillator lengths.
DEFAULT_MARGIN = 4.5
# Largest allowed |phi(edge)|^2 / max |phi|^2 of the widest occupied one-body orbital.
DEFAULT_EDGE_TOLERANCE = 1e-10


@dataclass(frozen=True)
class Grid:
    """L lattice sites at positions ``x`` (ascending, symmetric about 0) with spacing ``spacing``."""

    x: np.ndarray
    spacing: float

    @property
    def sites(self) -> int:
        return len(self.x)

    @property
    def brillouin_zone(self) -> float:
        """The largest lattice momentum pi / a (units of sqrt(hbar m0 omega_ref))."""
        return math.pi / self.spacing


def hopping(species: Species, spacing: float) -> float:
    """t_s = hbar^2 / (2 m_s a^2) in hbar omega_ref (three-point Laplacian)."""
    return 1.0 / (2.0 * species.mass * spacing**2)


def onsite_coupling(g: float, spacing: float) -> float:
    """U = g / a: the contact interaction g delta(x) integrated over one lattice cell."""
    return g / spacing


def length_scale(problem: Problem) -> float:
    """The shortest physical length the lattice must resolve.

    The smallest oscillator length b_s = 1/sqrt(m_s omega_s) of the two species (in a box: the half
    wavelength W / N of the highest occupied orbital, N = N_up + N_down), and for g < 0 the size
    1/(mu |g|) of the two-body bound state (mu the reduced mass), whichever is shorter.
    """
    if problem.trap.shape == "box":
        lengths = [problem.trap.half_width / problem.n_particles]
    else:
        lengths = [s.oscillator_length for s in problem.species if s.count > 0]
    g = problem.coupling
    if g < 0 and problem.up.count and problem.down.count:
        lengths.append(1.0 / (problem.reduced_mass() * abs(g)))
    return min(lengths)


def default_spacings(problem: Problem, fractions: Sequence[float] = DEFAULT_SPACING_FRACTIONS) -> tuple[float, ...]:
    """A ladder of spacings, coarsest first, as fractions of ``length_scale(problem)``."""
    scale = length_scale(problem)
    return tuple(sorted((f * scale for f in fractions), reverse=True))


def make_grid(problem: Problem, spacing: float, half_width: float) -> Grid:
    """The lattice of spacing close to ``spacing`` over [-half_width, half_width].

    Box trap: the L sites strictly inside the walls, x_j = -W + (j + 1) a with a = 2W / (L + 1),
    so that psi vanishes on the walls. Other traps: L sites from -X to X inclusive, a = 2X / (L - 1).
    """
    if spacing <= 0 or not math.isfinite(spacing):
        raise SpecError("param.spacings", f"got {spacing!r}; every spacing must be a positive number")
    if problem.trap.shape == "box":
        intervals = max(int(round(2 * half_width / spacing)), 2)
        a = 2 * half_width / intervals
        x = -half_width + a * np.arange(1, intervals)
    else:
        intervals = max(int(round(2 * half_width / spacing)), 2)
        a = 2 * half_width / intervals
        x = -half_width + a * np.arange(intervals + 1)
    # exact symmetry about 0, so that the reflection j -> L - 1 - j maps the grid onto itself
    x = 0.5 * (x - x[::-1])
    return Grid(x=x, spacing=a)


def one_body_matrix(problem: Problem, species: Species, grid: Grid) -> sp.csr_matrix:
    """The tridiagonal h_s of the module docstring, a sparse L x L matrix."""
    t = hopping(species, grid.spacing)
    potential = _site_potential(problem, species, grid)
    off = np.full(grid.sites - 1, -t)
    return sp.diags([off, 2 * t + potential, off], [-1, 0, 1], format="csr")


def one_body_spectrum(problem: Problem, species: Species, grid: Grid, count: int | None = None):
    """Eigenvalues (ascending) and eigenvectors (columns) of h_s; the ``count`` lowest when given."""
    t = hopping(species, grid.spacing)
    diagonal = 2 * t + _site_potential(problem, species, grid)
    off = np.full(grid.sites - 1, -t)
    select = ("a", None) if count is None else ("i", (0, min(count, grid.sites) - 1))
    return scipy.linalg.eigh_tridiagonal(diagonal, off, select=select[0], select_range=select[1])


def _site_potential(problem: Problem, species: Species, grid: Grid) -> np.ndarray:
    potential = problem.trap.potential(grid.x, species)
    if not np.all(np.isfinite(potential)):
        raise SpecError("trap", "the potential is infinite on a lattice site inside the box; this is a bug in the grid")
    return potential


def widest_orbital(problem: Problem, species: Species) -> int:
    """Index of the highest one-body orbital the species can occupy.

    N_s - 1 without repulsion; for g > 0 the system fermionizes towards N = N_up + N_down spinless
    fermions, whose density reaches out to orbital N - 1, so that index is used.
    """
    if problem.coupling > 0:
        return problem.n_particles - 1
    return max(species.count - 1, 0)


def half_width(
    problem: Problem,
    margin: float = DEFAULT_MARGIN,
    edge_tolerance: float = DEFAULT_EDGE_TOLERANCE,
    probe_spacing: float | None = None,
) -> float:
    """Half width X of the lattice: the box's own walls, else from the widest occupied orbital.

    Start from the harmonic estimate X = (sqrt(2 n + 1) + margin) b_s (n = ``widest_orbital``),
    then solve h_s of the actual trap on a probe lattice and widen X by one oscillator length until
    |phi_n(edge)|^2 / max |phi_n|^2 < edge_tolerance for both species.
    """
    if problem.trap.shape == "box":
        return problem.trap.half_width
    probe = probe_spacing or 0.5 * length_scale(problem)
    active = [s for s in problem.species if s.count > 0]
    x = max((math.sqrt(2 * widest_orbital(problem, s) + 1) + margin) * s.oscillator_length for s in active)
    for _ in range(40):
        grid = make_grid(problem, min(probe, x / 8), x)
        if all(edge_weight(problem, s, grid) < edge_tolerance for s in active):
            return x
        x += max(s.oscillator_length for s in active)
    raise SpecError(
        "param.x_max",
        f"no half width up to {x:.3g} keeps the occupied orbitals away from the lattice edges; give x_max explicitly",
    )


def edge_weight(problem: Problem, species: Species, grid: Grid) -> float:
    """|phi_n(edge)|^2 / max |phi_n|^2 for the widest occupied orbital n of ``species`` on ``grid``."""
    n = widest_orbital(problem, species)
    _, vectors = one_body_spectrum(problem, species, grid, count=n + 1)
    weight = vectors[:, n] ** 2
    return float(max(weight[0], weight[-1]) / weight.max())


def density_edge_warning(density: np.ndarray, grid: Grid, label: str, tolerance: float) -> str | None:
    """A warning text when a computed density n(x) is not negligible at the lattice edges."""
    peak = float(np.max(density))
    edge = float(max(density[0], density[-1]))
    if peak > 0 and edge / peak > tolerance:
        return (
            f"{label}: the density at the lattice edge is {edge / peak:.2e} of its peak (> {tolerance:g})"
            f" with sites out to |x| = {grid.x[-1]:.4g}; increase x_max"
        )
    return None


def continuum_limit(spacings: Sequence[float], values: Sequence[float]) -> Extrapolation:
    """E(a -> 0) from a ladder of spacings with the model E(a) = E0 + c2 a^2 + c4 a^4.

    With two spacings only the a^2 term is kept (Richardson extrapolation); one spacing gives no
    limit (error None is not allowed, so the caller must refuse a ladder shorter than two).
    """
    if len(spacings) < 2:
        raise ValueError("a continuum limit needs at least two spacings")
    powers = CONTINUUM_POWERS if len(spacings) >= 1 + len(CONTINUUM_POWERS) else CONTINUUM_POWERS[:1]
    return extrapolate_polynomial(spacings, values, powers=powers)


# ----------------------------------------------------------------------------- momentum space


def momentum_grid(problem: Problem, grid: Grid) -> tuple[np.ndarray, str | None]:
    """The problem's momentum grid, clipped to the Brillouin zone |p| < pi / a (with a note if clipped)."""
    _, p_max = problem.extent()
    note = None
    limit = grid.brillouin_zone
    if p_max > limit:
        note = f"momentum grid clipped from p_max = {p_max:.4g} to the lattice limit pi/a = {limit:.4g}"
        p_max = limit * (1 - 1.0 / problem.targets.grid_points)
    return np.linspace(-p_max, p_max, problem.targets.grid_points), note


def momentum_orbitals(grid: Grid, momenta: np.ndarray) -> np.ndarray:
    """F[p, k] = sqrt(a / (2 pi)) exp(-i p x_k): the momentum amplitude of lattice orbital k."""
    return math.sqrt(grid.spacing / (2 * math.pi)) * np.exp(-1j * np.outer(momenta, grid.x))


def momentum_distribution(site_obdm: np.ndarray, grid: Grid, momenta: np.ndarray) -> np.ndarray:
    """n(p) = sum_jk conj(F[p, j]) <c+_j c_k> F[p, k], normalized to integral dp n(p) = N over |p| < pi/a."""
    f = momentum_orbitals(grid, momenta)
    return np.real(np.einsum("pj,jk,pk->p", f.conj(), site_obdm, f))
