"""The benchmark catalogue: named problems with every reference value trapbench knows for them.

Configurations 1+1, 2+1, 1+2, 3+1, 2+2, 3+2, 3+3, 4+4, 6+6 with equal masses in four regimes of g
(strongly attractive, weak, intermediate, strongly repulsive); the configurations with N <= 4 also
with the mass ratios m_up/m_down = 20/3 and 3/20 (a heavy-light check value). The reference
mass m0 is the lighter species, so the heavy species has mass 20/3 and the light one 1. Harmonic trap,
omega = 1 for both species. Units: hbar = omega = m0 = 1, g in sqrt(hbar^3 omega / m0).

Entry names read "<N_up>+<N_down>/<masses>/<regime>", e.g. "2+1/equal/intermediate" or
"1+1/20:3/strong-attractive". References come from ``references.references_for`` and are computed
on first use; each carries its value, uncertainty, kind and source (the paper or library behind it,
evaluated by ``trapbench.problems.exact``), which ``trapbench catalogue NAME`` prints. Finite-g
energies are exact at g = 0 and for 1+1 at any g; elsewhere they come from the reference dataset
(``problems.dataset``) where it has the point, beside the exact coefficients K, dE/dg at g = 0 and the
g = +inf levels. Every point of the shipped dataset is also an entry of its own,
"dataset/<N_up>+<N_down>/m=<m_up/m_down>/g=<g>".
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

from . import dataset
from .errors import SpecError, did_you_mean
from .references import Reference, references_for
from .spec import Problem

CONFIGURATIONS = ((1, 1), (2, 1), (1, 2), (3, 1), (2, 2), (3, 2), (3, 3), (4, 4), (6, 6))
MASS_SETS = {"equal": (1.0, 1.0), "20:3": (20 / 3, 1.0), "3:20": (1.0, 20 / 3)}
MAX_PARTICLES_IMBALANCED = 4
REGIMES = {
    "strong-attractive": -4.0,
    "weak": 0.5,
    "intermediate": 2.0,
    "strong-repulsive": 20.0,
}


def _states(n_particles: int) -> int:
    """Levels requested: enough for the two-body spectrum's structure, one for large N."""
    return 4 if n_particles == 2 else 3 if n_particles <= 4 else 1


@dataclass(frozen=True)
class CatalogueEntry:
    """A named benchmark problem; ``references`` lists what is known about it (see ``references``)."""

    name: str
    problem: Problem
    regime: str

    @property
    def references(self) -> list[Reference]:
        return list(_references(self.name))


@lru_cache(maxsize=None)
def _entries() -> tuple[CatalogueEntry, ...]:
    result = []
    for n_up, n_down in CONFIGURATIONS:
        for masses, (mass_up, mass_down) in MASS_SETS.items():
            if masses != "equal" and n_up + n_down > MAX_PARTICLES_IMBALANCED:
                continue
            for regime, g in REGIMES.items():
                name = f"{n_up}+{n_down}/{masses}/{regime}"
                problem = Problem.create(
                    n_up, n_down, g, mass_up=mass_up, mass_down=mass_down, states=_states(n_up + n_down), label=name
                )
                result.append(CatalogueEntry(name, problem, regime))
    return tuple(result + _dataset_entries())


def _dataset_entries() -> list[CatalogueEntry]:
    """One entry per point of the shipped reference dataset, named "dataset/<N_up>+<N_down>/m=<ratio>/g=<g>"."""
    found = []
    for point in dataset.load().entries:
        states = len(point.levels) or 1
        ratio = f"{point.mass_up / point.mass_down:.6g}"
        name = f"dataset/{point.n_up}+{point.n_down}/m={ratio}/g={point.g:g}"
        problem = Problem.create(point.n_up, point.n_down, point.g, mass_up=point.mass_up, mass_down=point.mass_down,
                                 states=states, label=name)
        found.append(CatalogueEntry(name, problem, "dataset"))
    return found


@lru_cache(maxsize=None)
def _references(name: str) -> tuple[Reference, ...]:
    return tuple(references_for(get(name).problem))


def entries() -> list[CatalogueEntry]:
    """All catalogue entries in a stable order (configuration, masses, regime)."""
    return list(_entries())


def get(name: str) -> CatalogueEntry:
    """The entry called ``name``; an unknown name raises SpecError with the closest match."""
    for entry in _entries():
        if entry.name == name:
            return entry
    known = [e.name for e in _entries()]
    hint = did_you_mean(name, known, otherwise="see trapbench.problems.catalogue.entries()")
    raise SpecError("catalogue", f"no entry named '{name}'; {hint}")
