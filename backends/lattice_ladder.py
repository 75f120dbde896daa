"""The continuum limit of a lattice solver: solve on a ladder of spacings and extrapolate a -> 0.

Both lattice backends hand ``solve_ladder`` a function that solves the lattice problem on one grid
(``LatticeLevels``: the k lowest energies with the solver's own error at that spacing, their labels,
scalars, and on the finest grid the observables). Each level and each scalar is extrapolated with
``lattice.continuum_limit`` (E(a) = E0 + c2 a^2 + c4 a^4, weighted least squares; see
``backends/extrapolation.py`` for the error bar). The reported error of a level is the continuum
error bar plus the largest solver error met on the ladder (e.g. DMRG truncation), a deliberately
conservative sum. Levels are followed across the ladder by their position in the solver's list
(which may group them, e.g. by parity sector), then sorted by the extrapolated energy, and the
lowest ``keep`` are reported. Observables are those of the finest lattice, on its sites, and say so.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..problems.errors import SpecError
from ..problems.spec import Problem
from . import lattice
from .base import Parameter
from .result import Observable, Solution

# The discretization parameters every lattice backend takes.
LADDER_PARAMETERS = (
    Parameter("spacings", tuple, None, "lattice spacings (>= 2; default: fractions of the shortest length)"),
    Parameter("x_max", float, None, "lattice half width (default: widest occupied orbital plus a margin)"),
)


@dataclass
class LatticeLevels:
    """What a lattice solver found on one grid, one entry per level in a fixed order (e.g. by sector).

    ``observe(level, rank)`` (finest grid only) returns the observables of ``level`` named for its
    final position ``rank`` (suffix "@rank"), and notes.
    """

    energies: list[float]
    solver_errors: list[float]
    states: list[dict[str, Any]]
    scalars: list[dict[str, float]] = field(default_factory=list)
    site_densities: tuple[np.ndarray, np.ndarray] | None = None  # <n_{s,j}> of the lowest level
    observe: Callable[[int, int], tuple[dict[str, Observable], list[str]]] | None = None
    diagnostics: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)


SolveOnGrid = Callable[[lattice.Grid, bool], LatticeLevels]


def resolve_ladder(
    problem: Problem,
    spacings: Sequence[float] | None,
    x_max: float | None,
    fractions: Sequence[float] = lattice.DEFAULT_SPACING_FRACTIONS,
) -> tuple[tuple[float, ...], float]:
    """The spacings (coarsest first, at least two) and the half width from the parameters or the problem.

    Without ``spacings`` the ladder is ``fractions`` of ``lattice.length_scale(problem)``.
    """
    if spacings is None:
        spacings = lattice.default_spacings(problem, fractions)
    spacings = tuple(float(a) for a in spacings)
    if len(spacings) < 2:
        raise SpecError("param.spacings", f"got {list(spacings)}; give at least two spacings for the continuum limit")
    if any(not np.isfinite(a) or a <= 0 for a in spacings):
        raise SpecError("param.spacings", f"got {list(spacings)}; every spacing must be a positive number")
    if len(set(spacings)) != len(spacings):
        raise SpecError("param.spacings", f"got {list(spacings)}; the spacings must differ from each other")
    half_width = lattice.half_width(problem) if x_max is None else float(x_max)
    if problem.trap.shape == "box" and x_max is not None and x_max != problem.trap.half_width:
        raise SpecError("param.x_max", "the box trap fixes the lattice to its walls; leave x_max unset")
    if max(spacings) > half_width / 4:
        raise SpecError("param.spacings", f"spacing {max(spacings):g} is too coarse for half width {half_width:.4g}")
    return tuple(sorted(spacings, reverse=True)), half_width


def solve_ladder(
    problem: Problem,
    spacings: Sequence[float],
    half_width: float,
    solve_on_grid: SolveOnGrid,
    keep: int,
    edge_tolerance: float = 1e-8,
) -> Solution:
    """Solve on every spacing (coarsest first, observables on the finest), extrapolate to a = 0 and
    report the ``keep`` lowest levels."""
    grids = [lattice.make_grid(problem, a, half_width) for a in spacings]
    runs = [solve_on_grid(grid, i == len(grids) - 1) for i, grid in enumerate(grids)]
    steps = [grid.spacing for grid in grids]
    n_levels = min(len(run.energies) for run in runs)

    energies, errors, fits = [], [], []
    for level in range(n_levels):
        fit = lattice.continuum_limit(steps, [run.energies[level] for run in runs])
        solver_error = max(run.solver_errors[level] for run in runs)
        energies.append(fit.value)
        errors.append(fit.error + solver_error)
        fits.append(fit.as_dict() | {"solver_error": solver_error})

    order = sorted(range(n_levels), key=lambda i: energies[i])[:keep]
    finest = runs[-1]
    scalars = {}
    scalar_fits = {}
    for rank, level in enumerate(order):
        if level >= min(len(run.scalars) for run in runs):
            continue
        for name in finest.scalars[level]:
            fit = lattice.continuum_limit(steps, [run.scalars[level][name] for run in runs])
            key = name if rank == 0 else f"{name}@{rank}"
            scalars[key] = fit.value
            scalar_fits[key] = {"value": fit.value, "error": fit.error, "values": list(fit.values)}

    warnings = [w for run in runs for w in run.warnings]
    if finest.site_densities is not None:
        for species, density in zip(problem.species, finest.site_densities):
            if species.count:
                text = lattice.density_edge_warning(density, grids[-1], f"density of {species.name}", edge_tolerance)
                if text:
                    warnings.append(text)

    observables = {}
    if finest.observe is not None:
        for rank, level in enumerate(order):
            found, notes = finest.observe(level, rank)
            observables.update(found)
            warnings.extend(n for n in notes if n not in warnings)
    return Solution(
        energies=[energies[i] for i in order],
        states=[finest.states[i] for i in order],
        observables=observables,
        scalars=scalars,
        error_estimate=max(errors[i] for i in order),
        energy_errors=[errors[i] for i in order],
        diagnostics={
            "half_width": half_width,
            "spacings": steps,
            "sites": [grid.sites for grid in grids],
            "lattice_energies": [[run.energies[i] for i in order] for run in runs],
            "continuum_fits": [fits[i] for i in order],
            "scalar_fits": scalar_fits,
            "observables_on": f"sites of the finest lattice (a = {steps[-1]:.6g}), not extrapolated",
            "per_spacing": [run.diagnostics for run in runs],
        },
        warnings=warnings,
    )
