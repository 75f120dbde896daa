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

Measured discretization error (1+1, x_max = 6, spacings 0.05-0.2, masses (1, 1) and (1, 20/3),
g = +-2, against the exact two-body roots): E(a) - E = c_2 a^2 + c_4 a^4 + ... to high accuracy; the
local order is 2.0, the error is negative for g > 0 and positive for g < 0, and a fit with powers
(2, 4) over a = 0.2 ... 0.075 leaves relative errors of 1e-8 to 1e-5. The continuum limit is
therefore ``CONTINUUM_MODEL`` (a polynomial in a with powers (2, 4)) over a ladder of spacings, run
through the shared convergence ladder (``solve_continuum_ladder``, ``backends/ladder.py``). Its bar is at
least 5 % of the extrapolation; ``continuum_order = 6`` fits powers (2, 4, 6) over five or more spacings
instead (``SixthOrderSpacingFit``), its bar from the a^6 term and the coarsest spacing. Measured against
``three-body`` on 2+1 (lattice-dmrg on the dataset grid and the map's rungs, 34 ground states; lattice-ed on
its widened default ladder, 6): every ground state within the sixth-order bar, median error 0.03 of it, and
the order-4 bar a median 66 times wider (``bench_lattice_results.md``).

Every lattice backend builds its operator from ``terms(problem, grid)`` (``LatticeTerms``), the one
description of the lattice Hamiltonian. Default ladders are fractions of the problem's shortest
length (``length_scale``: oscillator lengths, box wavelength, two-body bound-state size); when the
finest of them exceeds a backend's size budget (``Budget``), the same ladder shape is scaled to the
finest spacing that fits, the result says so with the error bar that ladder gave, and the problem is
refused only when no useful ladder fits (``fit_to_budget``).

Densities are extrapolated to the continuum on the finest lattice's sites (``continuum_density``): each
coarser lattice's site densities are interpolated onto those sites (a quintic spline), and the a^2 law of the
three-point Laplacian (common practice) is removed by Richardson's rule from the two finest spacings,
n = n_1 + (n_1 - n_2) / (r^2 - 1), r = a_2 / a_1. Its error bar is the largest change over the grid from the
same rule on the two spacings before, as the remainder of a law h^p in the pair's mean spacing h = sqrt(a_1 a_2),
p = ``RICHARDSON_POWER`` (``ladder.two_rung_remainder``). A two-spacing ladder reports the finest density with
its largest change from the other one as the remainder of an a^p law, p = ``DENSITY_POWER``.
The other observables on a grid (one-body density matrix, momentum distribution, pair correlations) carry
none (``error`` None): their grids move with the spacing, and the pair correlation's cusp would put the
interpolation's error into the bar.

Box: a hard-wall trap keeps its walls (Dirichlet sites strictly inside); any other trap gets the
half width X from the widest occupied one-body orbital plus a margin, validated by the weight of
that orbital at the edge sites (grown until it is below ``edge_tolerance``).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import scipy.linalg
from scipy.interpolate import make_interp_spline
import scipy.sparse as sp

from ..problems.errors import SpecError
from ..problems.spec import Problem, Species
from .base import Parameter, Support
from .extrapolation import PolynomialModel, SixthOrderSpacingFit
from .ladder import Rung, RungLevel, rank_keys, run_ladder, two_rung_remainder
from .result import Observable, Solution

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


@dataclass(frozen=True)
class LatticeTerms:
    """The lattice Hamiltonian of the module docstring on one grid: the single description every
    lattice backend builds its operator from.

    ``hopping[s]`` = t_s, ``onsite[s]`` = 2 t_s + V_s(x_j) (finite on every site), ``interaction`` =
    U = g / a, for s = 0 (up), 1 (down).
    """

    grid: Grid
    hopping: tuple[float, float]
    onsite: tuple[np.ndarray, np.ndarray]
    interaction: float

    def one_body_matrix(self, species: int) -> sp.csr_matrix:
        """The tridiagonal h_s, a sparse L x L matrix."""
        off = np.full(self.grid.sites - 1, -self.hopping[species])
        return sp.diags([off, self.onsite[species], off], [-1, 0, 1], format="csr")


def terms(problem: Problem, grid: Grid) -> LatticeTerms:
    """The lattice Hamiltonian of ``problem`` on ``grid``; refuses a potential infinite on a site."""
    hoppings = tuple(hopping(s, grid.spacing) for s in problem.species)
    onsite = tuple(2 * t + _site_potential(problem, s, grid) for t, s in zip(hoppings, problem.species))
    return LatticeTerms(grid, hoppings, onsite, onsite_coupling(problem.coupling, grid.spacing))


def one_body_matrix(problem: Problem, species: Species, grid: Grid) -> sp.csr_matrix:
    """The tridiagonal h_s of the module docstring, a sparse L x L matrix."""
    return terms(problem, grid).one_body_matrix(problem.species.index(species))


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


# ----------------------------------------------------------------------------- continuum ladder

# The continuum limit: E(a) = E0 + c2 a^2 + c4 a^4 (two spacings: the a^2 term only).
CONTINUUM_MODEL = PolynomialModel(powers=CONTINUUM_POWERS)
# ``continuum_order`` = 6: E0 + c2 a^2 + c4 a^4 + c6 a^6 over five or more spacings, a bar without the
# 5 % floor (measured against three-body: bench_lattice_results.md, "The sixth-order continuum fit").
CONTINUUM_MODELS = {4: CONTINUUM_MODEL, 6: SixthOrderSpacingFit()}
# A budget-fitted default ladder is useful while its finest spacing is at most this fraction of
# ``length_scale`` (its coarsest, 2.5 times wider, then still puts a site per shortest length).
# Measured: 2+1, masses 0.15/1, g = 5 over a = 0.70 ... 0.36 (of a length 1) extrapolates to within
# 2e-5 relative of oscillator-ed (bench_lattice_results.md).
USEFUL_FINEST_FRACTION = 0.4
# The law a^p behind the error bar of a density from two spacings (module docstring). The density's error is
# O(a^2) on default ladders; at spacings of half the shortest length and more its local order falls to
# 0.5-1.7, where p = 2 or 3/2 would under-cover. p = 1 holds both: measured on 1+1 and 2+1 against two-body and
# three-body densities (bench_lattice_results.md, "Density error bars").
DENSITY_POWER = 1.0
# Degree of the spline that carries a coarser lattice's densities onto the finest sites: a cubic one's error
# (~a^4 times the fourth derivative) dominated the extrapolated density of a heavy species (bench_lattice_results.md).
DENSITY_SPLINE_DEGREE = 5
# The law h^p behind the bar of a Richardson density (module docstring). Its residual is O(a^4), i.e. h^4, which
# makes the change from the pair before only (a_3/a_1)^2 - 1 times the error: 1.44 on lattice-dmrg's default
# ladders, where a bar of the change alone fell short once in 16 (bench_lattice_results.md); p = 2 is half that order.
RICHARDSON_POWER = 2.0

# The discretization parameters every lattice backend takes.
LADDER_PARAMETERS = (
    Parameter("spacings", tuple, None, "lattice spacings (>= 2; default: fractions of the shortest length, coarsened to fit the budget)"),
    Parameter("x_max", float, None, "lattice half width (default: widest occupied orbital plus a margin)"),
    Parameter(
        "continuum_order",
        int,
        4,
        "highest power of the spacing in the continuum fit: 4 (bar at least 5 % of the extrapolation) or 6"
        " (five or more spacings; bar from the a^6 term and the coarsest spacing, a median 66 times narrower on 2+1)",
    ),
)


@dataclass(frozen=True)
class Budget:
    """A backend's size limit on one lattice: ``measure(sites) <= limit`` (e.g. the basis dimension)."""

    parameter: str  # the backend parameter that sets ``limit``, e.g. "max_dimension"
    limit: float
    measure: Callable[[int], float]
    quantity: str  # what ``measure`` counts, e.g. "basis states"

    def fits(self, grid: Grid) -> bool:
        return self.measure(grid.sites) <= self.limit

    def excess(self, grid: Grid) -> str:
        return f"{grid.sites} sites give {self.measure(grid.sites):.3g} {self.quantity} (> {self.parameter} = {self.limit:.3g})"


@dataclass(frozen=True)
class SpacingLadder:
    """The spacings (coarsest first), the half width, and why the default ladder was coarsened (or None)."""

    spacings: tuple[float, ...]
    half_width: float
    fitted: str | None = None
    continuum_order: int = 4


def resolve_ladder(
    problem: Problem,
    spacings: Sequence[float] | None,
    x_max: float | None,
    fractions: Sequence[float] = DEFAULT_SPACING_FRACTIONS,
    budget: Budget | None = None,
    continuum_order: int = 4,
) -> SpacingLadder:
    """The spacing ladder from the parameters or the problem, within ``budget``.

    Without ``spacings`` the ladder is ``fractions`` of ``length_scale(problem)``. When its finest
    lattice exceeds the budget, the same ladder shape is scaled up to the finest spacing that fits
    (``fit_to_budget``). A default ladder shorter than the continuum fit needs gains coarser spacings
    (``widened_fractions``). Given spacings whose finest lattice exceeds the budget are refused, as is a
    ``continuum_order`` other than 4 or 6, or given spacings fewer than its fit needs.
    """
    if continuum_order not in CONTINUUM_MODELS:
        raise SpecError("param.continuum_order", f"got {continuum_order}; choose 4 or 6")
    needed = CONTINUUM_MODELS[continuum_order].minimum_points
    half = half_width(problem) if x_max is None else float(x_max)
    if problem.trap.shape == "box" and x_max is not None and x_max != problem.trap.half_width:
        raise SpecError("param.x_max", "the box trap fixes the lattice to its walls; leave x_max unset")
    fitted = None
    if spacings is None:
        fractions = widened_fractions(fractions, needed)
        spacings = default_spacings(problem, fractions)
        if budget is not None and not budget.fits(make_grid(problem, min(spacings), half)):
            spacings, fitted = fit_to_budget(problem, half, fractions, budget)
    spacings = tuple(float(a) for a in spacings)
    if len(spacings) < 2:
        raise SpecError("param.spacings", f"got {list(spacings)}; give at least two spacings for the continuum limit")
    if any(not np.isfinite(a) or a <= 0 for a in spacings):
        raise SpecError("param.spacings", f"got {list(spacings)}; every spacing must be a positive number")
    if len(set(spacings)) != len(spacings):
        raise SpecError("param.spacings", f"got {list(spacings)}; the spacings must differ from each other")
    if max(spacings) > half / 4:
        raise SpecError("param.spacings", f"spacing {max(spacings):g} is too coarse for half width {half:.4g}")
    finest = make_grid(problem, min(spacings), half)
    if budget is not None and not budget.fits(finest):
        raise SpecError(
            f"param.{budget.parameter}",
            f"the finest lattice (a = {finest.spacing:.4g}): {budget.excess(finest)}; give coarser spacings or raise {budget.parameter}",
        )
    if len(spacings) < needed:
        raise SpecError(
            "param.spacings",
            f"{len(spacings)} spacings; continuum_order = {continuum_order} needs at least {needed}: give more spacings"
            " or leave continuum_order at 4",
        )
    return SpacingLadder(tuple(sorted(spacings, reverse=True)), half, fitted, continuum_order)


def widened_fractions(fractions: Sequence[float], count: int) -> tuple[float, ...]:
    """``fractions`` (coarsest first) with coarser spacings prepended, continuing the ratio of the two coarsest,
    until there are ``count``: a default ladder too short for the continuum fit grows where it costs least."""
    grown = list(fractions)
    while len(grown) < count:
        grown.insert(0, grown[0] * grown[0] / grown[1])
    return tuple(grown)


def fit_to_budget(problem: Problem, half: float, fractions: Sequence[float], budget: Budget) -> tuple[tuple[float, ...], str]:
    """The default ladder's shape scaled to the finest spacing within ``budget``, and a note saying so.

    The number of sites falls as the spacing grows, so the finest spacing that fits is found by
    bisection. Refused (SpecError on the budget parameter) when even ``USEFUL_FINEST_FRACTION`` of
    the shortest length does not fit: no ladder that fits resolves the problem.
    """
    scale = length_scale(problem)
    wanted = min(fractions) * scale
    coarse = USEFUL_FINEST_FRACTION * scale
    if not budget.fits(make_grid(problem, coarse, half)):
        grid = make_grid(problem, coarse, half)
        raise SpecError(
            f"param.{budget.parameter}",
            f"no useful lattice ladder fits: even a finest spacing of {coarse:.3g} ({USEFUL_FINEST_FRACTION} of the"
            f" shortest length {scale:.3g}) over |x| <= {half:.3g}: {budget.excess(grid)}; raise {budget.parameter}",
        )
    fine = wanted
    for _ in range(60):  # bisection on the spacing down to a relative width of ~1e-12
        middle = 0.5 * (fine + coarse)
        if budget.fits(make_grid(problem, middle, half)):
            coarse = middle
        else:
            fine = middle
    finest = make_grid(problem, coarse, half).spacing
    spacings = tuple(sorted((finest * f / min(fractions) for f in fractions), reverse=True))
    note = (
        f"the default spacings (finest a = {wanted:.3g}) exceed the budget ({budget.excess(make_grid(problem, wanted, half))});"
        f" solved on the finest ladder that fits, a = {spacings[-1]:.3g} ... {spacings[0]:.3g}"
        f" ({spacings[-1] / scale:.2f} ... {spacings[0] / scale:.2f} of the shortest length {scale:.3g})"
    )
    return spacings, note


def ladder_support(make_ladder: Callable[[], SpacingLadder], budget: str, alternatives: str = "") -> Support:
    """A backend's ``supports`` answer: yes when ``make_ladder`` finds a ladder within the budget
    parameter ``budget``, else no with the reason (and ``alternatives``); other input errors propagate."""
    try:
        make_ladder()
    except SpecError as error:
        if error.field != f"param.{budget}":
            raise
        return Support.no(error.reason + (f"; {alternatives}" if alternatives else ""))
    return Support.yes()


@dataclass
class LatticeLevels:
    """What a lattice solver found on one grid, one entry per level, ascending within each sector.

    ``states`` holds each level's labels (a "parity" label is its reflection sector).
    ``observe(level, rank)`` (finest grid only) returns the observables of ``level`` named for its
    final position ``rank`` (suffix "@rank"), and notes.
    """

    energies: list[float]
    solver_errors: list[float]
    states: list[dict[str, Any]]
    scalars: list[dict[str, float]] = field(default_factory=list)
    site_densities: list[tuple[np.ndarray, np.ndarray]] = field(default_factory=list)  # <n_{s,j}> per level
    observe: Callable[[int, int], tuple[dict[str, Observable], list[str]]] | None = None
    diagnostics: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)


def solve_continuum_ladder(
    problem: Problem,
    ladder: SpacingLadder,
    solve_on_grid: Callable[[Grid, bool], LatticeLevels],
    keep: int,
    edge_tolerance: float = 1e-8,
) -> Solution:
    """Solve on every spacing (coarsest first, observables on the finest) through the shared
    convergence ladder (``backends/ladder.py``: how error bars are formed), energies and scalars
    extrapolated with the ladder's continuum model (``CONTINUUM_MODELS``); report the ``keep`` lowest levels.

    Levels are followed by (reflection sector, rank in the sector). The solver error of a level is
    what ``solve_on_grid`` reports (residual norm, DMRG truncation). Observables are those of the
    finest lattice, on its sites, and say so; densities carry the error bar of the module docstring.
    """
    grids, densities, finest_levels = [], [], []

    def solve_rung(spacing: float, final: bool) -> Rung:
        grid = make_grid(problem, spacing, ladder.half_width)
        levels = solve_on_grid(grid, final)
        grids.append(grid)
        densities.append(levels.site_densities)
        if final:
            finest_levels.append(levels)
        keys = rank_keys([state.get("parity") for state in levels.states])
        found = {
            key: RungLevel(
                energy=levels.energies[i],
                labels=levels.states[i],
                solver_error=levels.solver_errors[i],
                scalars=levels.scalars[i] if i < len(levels.scalars) else {},
                payload=i,
            )
            for i, key in enumerate(keys)
        }
        return Rung(grid.spacing, found, levels.diagnostics, levels.warnings)

    outcome = run_ladder(ladder.spacings, solve_rung, CONTINUUM_MODELS[ladder.continuum_order], keep)
    finest, grid = finest_levels[0], grids[-1]
    warnings = list(outcome.warnings)
    if ladder.fitted and outcome.error_estimate is not None:
        lowest = abs(outcome.energies[0]) if outcome.energies else 1.0
        warnings.append(
            f"{ladder.fitted}: the error bar it gives here is {outcome.error_estimate:.2g}"
            f" ({outcome.error_estimate / max(lowest, 1e-300):.1g} relative)"
        )
    if finest.site_densities:
        lowest = finest.site_densities[int(np.argmin(finest.energies))]
        for species, density in zip(problem.species, lowest):
            if species.count:
                text = density_edge_warning(density, grid, f"density of {species.name}", edge_tolerance)
                if text:
                    warnings.append(text)
    observables = {}
    if finest.observe is not None:
        for rank, key in enumerate(outcome.keys):
            found, notes = finest.observe(outcome.final.levels[key].payload, rank)
            ladder_densities = [on_rung[rung.levels[key].payload] for on_rung, rung in zip(densities, outcome.rungs)]
            for s, name in enumerate(("up", "down")):  # a ladder has two spacings or more (``resolve_ladder``)
                observable = found.get(f"density_{name}{'' if rank == 0 else f'@{rank}'}")
                if observable is not None:
                    observable.values, observable.error = continuum_density(grids, [d[s] for d in ladder_densities])
            observables.update(found)
            warnings.extend(n for n in notes if n not in warnings)
    return Solution(
        energies=outcome.energies,
        states=outcome.states,
        observables=observables,
        scalars=outcome.scalars,
        scalar_errors=outcome.scalar_errors,
        error_estimate=outcome.error_estimate,
        energy_errors=outcome.energy_errors,
        diagnostics={
            "half_width": ladder.half_width,
            "spacings": [g.spacing for g in grids],
            "sites": [g.sites for g in grids],
            **outcome.diagnostics(),
            "observables_on": f"sites of the finest lattice (a = {grid.spacing:.6g}); densities "
            + ("extrapolated (a^2, the two finest spacings)" if len(grids) >= 3 else "not extrapolated (two spacings)")
            + ", the other observables not extrapolated",
            **({"fitted_to_budget": ladder.fitted} if ladder.fitted else {}),
        },
        warnings=warnings,
    )


def continuum_density(grids: Sequence[Grid], site_densities: Sequence[np.ndarray]) -> tuple[np.ndarray, float]:
    """(density in 1/length on the finest grid's sites, error bar) from one species' site occupations <n_j> on
    every lattice of a ladder (coarsest first), as the module docstring states: Richardson's a^2 rule on the
    two finest spacings, the h^``RICHARDSON_POWER`` remainder of its change from the same rule on the two before
    as the bar; with two spacings, the finest density and the a^``DENSITY_POWER`` remainder of its change."""
    finest = grids[-1]
    on_finest = [
        np.asarray(n) / g.spacing if g is finest
        else make_interp_spline(g.x, np.asarray(n) / g.spacing, k=min(DENSITY_SPLINE_DEGREE, g.sites - 1))(finest.x)
        for g, n in zip(grids, site_densities)
    ]
    spacings = [g.spacing for g in grids]
    if len(grids) == 2:
        change = float(np.max(np.abs(on_finest[1] - on_finest[0])))
        return on_finest[1], two_rung_remainder(spacings, change, DENSITY_POWER)

    def richardson(fine: int, coarse: int) -> np.ndarray:
        return on_finest[fine] + (on_finest[fine] - on_finest[coarse]) / ((spacings[coarse] / spacings[fine]) ** 2 - 1)

    value = richardson(-1, -2)
    change = float(np.max(np.abs(value - richardson(-2, -3))))
    mean_spacings = [math.sqrt(spacings[-3] * spacings[-2]), math.sqrt(spacings[-2] * spacings[-1])]
    return value, two_rung_remainder(mean_spacings, change, RICHARDSON_POWER)


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
