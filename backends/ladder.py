"""The convergence ladder: solve a method at a sequence of resolutions and extrapolate to the limit.

Every method whose answer converges with one numerical knob runs through ``run_ladder``:
oscillator-ed (energy or orbital cutoff c -> infinity), lattice-ed and lattice-dmrg (spacing
a -> 0). The backend hands it

- ``steps``, the knob's values in the order solved (least converged first);
- a rung solver ``solve_rung(step, final) -> Rung``: the levels found at that step, each under a key
  that follows the level from rung to rung (e.g. (parity sector, rank in the sector), or the rank
  alone when there is no sector; a centre-of-mass label may join the sector), with its energy, the
  solver's own error at that step, its scalars and its state labels; ``final`` is True for the
  last rung, whose levels also carry what the backend needs for observables;
- a ``model`` from ``backends/extrapolation.py`` (``PolynomialModel``, ``DriftingPowerLaw``, ...)
  for the energies, and optionally another for the scalars.

Levels present on every rung are extrapolated, sorted by the limit, and the ``keep`` lowest are
reported with the labels of the final rung. Scalars are extrapolated for the ``scalar_states``
lowest reported levels (names of state k > 0 end in "@k").

How an error bar is formed (the one place where this is stated, for energies and scalars alike):

    error = limit error + solver error, and at least floor * max(1, |value|)

- limit error: with at least ``model.minimum_points`` rungs, the error bar of the model's
  extrapolation (documented with each model: fit error, sensitivity to dropping a rung or a term,
  a fraction of the last correction); with fewer rungs but at least two, no extrapolation is made:
  the value is the last rung's and the limit error is its change from the rung before -- or, when
  the model declares ``two_rung_power`` p (its slowest plausible convergence, error ~ resolution^p),
  the remainder that change implies, |change| / (r^p - 1) with r the ratio of the two steps (a change
  alone under-covers whenever r^p < 2); with one rung there is no error bar at all (None), because
  nothing measures the distance to the limit;
- solver error: the largest error the rung solver reported for that quantity along the ladder
  (e.g. an eigenvector residual norm, a DMRG truncation extrapolation); added, not combined in
  quadrature, because the two are not independent random errors;
- floor: what the solver can resolve at all (``floor`` for energies, ``scalar_floor`` for scalars,
  relative).

``error_estimate`` of a result is the largest error bar of its reported energies.

Observables on a grid (densities, correlation maps) are the last rung's, not extrapolated; their
error bar (``grid_error``) is the largest change over the grid from the rung before, turned into a
remainder by the same two-rung rule (``two_rung_remainder``). A backend may do better where it knows its
grids' law: the lattice densities are extrapolated to the continuum (``lattice.continuum_density``).
"""

from __future__ import annotations

from collections.abc import Callable, Hashable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .extrapolation import Extrapolation


@dataclass
class RungLevel:
    """One level found on one rung.

    ``scalars`` may be a dict or a callable returning it, evaluated only for reported levels (some
    scalars cost a matrix-vector product or more). ``scalar_errors`` are the solver's own errors of
    those scalars at this rung, if it knows them. ``payload`` is the backend's handle on the state
    (eigenvector, site expectations) for observables of the final rung.
    """

    energy: float
    labels: dict[str, Any] = field(default_factory=dict)
    solver_error: float = 0.0
    scalars: dict[str, float] | Callable[[], dict[str, float]] = field(default_factory=dict)
    scalar_errors: dict[str, float] = field(default_factory=dict)
    payload: Any = None

    def scalar_values(self) -> dict[str, float]:
        if callable(self.scalars):
            self.scalars = self.scalars()  # evaluate once
        return self.scalars


@dataclass
class Rung:
    """What the rung solver found at one step: levels under their following keys."""

    step: float
    levels: dict[Hashable, RungLevel]
    diagnostics: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)


@dataclass
class LadderOutcome:
    """The reported levels (lowest limit first), their error bars, and the ladder that gave them."""

    keys: list[Hashable]
    energies: list[float]
    energy_errors: list[float] | None
    states: list[dict[str, Any]]
    scalars: dict[str, float]
    scalar_errors: dict[str, float]
    rungs: list[Rung]
    energy_fits: list[dict] | None
    scalar_fits: dict[str, dict]
    warnings: list[str]

    @property
    def final(self) -> Rung:
        return self.rungs[-1]

    @property
    def error_estimate(self) -> float | None:
        return None if not self.energy_errors else float(max(self.energy_errors))

    def diagnostics(self) -> dict[str, Any]:
        """The ladder as data: steps, raw energies [rung][reported level], fits, per-rung diagnostics."""
        data = {
            "steps": [rung.step for rung in self.rungs],
            "raw_energies": [[rung.levels[key].energy for key in self.keys] for rung in self.rungs],
            "scalar_fits": self.scalar_fits,
            "per_rung": [rung.diagnostics for rung in self.rungs],
        }
        if self.energy_fits is not None:
            data["energy_fits"] = self.energy_fits
        return data


Model = Callable[[Sequence[float], Sequence[float]], Extrapolation]


def rank_keys(sectors: Sequence[Hashable]) -> list[tuple[Hashable, int]]:
    """Keys (sector, rank within the sector) for levels listed in ascending energy.

    Level order across sectors may change from rung to rung; order within a sector of a symmetry
    cannot (no crossing of levels of the same symmetry as the resolution improves, to the accuracy
    the ladder resolves), so this key follows a level.
    """
    counts: dict[Hashable, int] = {}
    keys = []
    for sector in sectors:
        rank = counts.get(sector, 0)
        counts[sector] = rank + 1
        keys.append((sector, rank))
    return keys


def last_change_bar(model: Model, steps: Sequence[float], change: float) -> float:
    """The limit error a change between the last two rungs implies (module docstring: two rungs)."""
    power = getattr(model, "two_rung_power", None)
    return two_rung_remainder(steps, change, power) if power else change


def two_rung_remainder(steps: Sequence[float], change: float, power: float) -> float:
    """|change| / (r^p - 1): the distance to the limit of the last rung when the error falls like
    resolution^p and the last two steps differ by the ratio r (>= 1)."""
    ratio = max(steps[-1], steps[-2]) / min(steps[-1], steps[-2])
    return change / (ratio**power - 1.0)


def grid_error(model: Model, steps: Sequence[float], final: np.ndarray, previous: np.ndarray) -> float:
    """Error bar of an observable on a grid (same grid on both rungs): the largest change over the grid
    between the last two rungs, turned into a remainder like a two-rung energy (``last_change_bar``).

    Not extrapolated: the reported observable is the last rung's, so its distance to the limit is what
    the bar must hold. Where the model declares no ``two_rung_power`` the bar is the change itself.
    """
    change = float(np.max(np.abs(np.asarray(final) - np.asarray(previous)))) if np.size(final) else 0.0
    return last_change_bar(model, steps, change)


def limit(model: Model, steps: Sequence[float], values: Sequence[float]) -> tuple[float, float | None, dict | None]:
    """(value, limit error, fit) of one quantity along the ladder (module docstring: the limit error)."""
    if len(values) >= getattr(model, "minimum_points", 2):
        fit = model(steps, values)
        return fit.value, fit.error, fit.as_dict()
    if len(values) >= 2:
        return float(values[-1]), last_change_bar(model, steps, abs(float(values[-1]) - float(values[-2]))), None
    return float(values[-1]), None, None


def run_ladder(
    steps: Sequence[float],
    solve_rung: Callable[[float, bool], Rung],
    model: Model,
    keep: int,
    scalar_model: Model | None = None,
    scalar_states: int | None = None,
    floor: float = 0.0,
    scalar_floor: float = 0.0,
) -> LadderOutcome:
    """Solve every rung, follow the levels by key, extrapolate and report (see the module docstring)."""
    rungs = [solve_rung(step, i == len(steps) - 1) for i, step in enumerate(steps)]
    ladder_steps = [rung.step for rung in rungs]
    final = rungs[-1]
    followed = [key for key in final.levels if all(key in rung.levels for rung in rungs)]
    warnings = [w for rung in rungs for w in rung.warnings]

    def bar(limit_error: float | None, solver_error: float, value: float, relative_floor: float) -> float | None:
        if limit_error is None:
            return None
        return float(max(limit_error + solver_error, relative_floor * max(1.0, abs(value))))

    values, errors, fits = {}, {}, {}
    for key in followed:
        value, limit_error, fit = limit(model, ladder_steps, [rung.levels[key].energy for rung in rungs])
        solver_error = max(rung.levels[key].solver_error for rung in rungs)
        values[key], errors[key], fits[key] = value, bar(limit_error, solver_error, value, floor), fit
    keys = sorted(followed, key=lambda k: values[k])[:keep]
    for rank, key in enumerate(keys):
        if fits[key] is not None and fits[key].get("warning"):
            warnings.append(f"state {rank}: {fits[key]['warning']}")
    has_errors = all(errors[k] is not None for k in keys)

    scalars, scalar_errors, scalar_fits = {}, {}, {}
    for rank, key in enumerate(keys[: len(keys) if scalar_states is None else scalar_states]):
        suffix = "" if rank == 0 else f"@{rank}"
        per_rung = [rung.levels[key].scalar_values() for rung in rungs]
        for name in per_rung[-1]:
            if not all(name in found for found in per_rung):
                continue
            series = [found[name] for found in per_rung]
            value, limit_error, fit = limit(scalar_model or model, ladder_steps, series)
            solver_error = max(rung.levels[key].scalar_errors.get(name, 0.0) for rung in rungs)
            scalars[name + suffix] = value
            error = bar(limit_error, solver_error, value, scalar_floor)
            if error is not None:
                scalar_errors[name + suffix] = error
            scalar_fits[name + suffix] = fit if fit is not None else {"value": value, "values": series}
    return LadderOutcome(
        keys=keys,
        energies=[values[k] for k in keys],
        energy_errors=[errors[k] for k in keys] if has_errors else None,
        states=[dict(final.levels[k].labels) for k in keys],
        scalars=scalars,
        scalar_errors=scalar_errors,
        rungs=rungs,
        energy_fits=[fits[k] for k in keys] if any(fits[k] is not None for k in keys) else None,
        scalar_fits=scalar_fits,
        warnings=list(dict.fromkeys(warnings)),
    )
