"""Heavy and light one-body densities n_up(x), n_down(x) of the lowest state at several g (unequal masses).

The density arrays are read from the store (``Store.result``); the frame only selects the tasks.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from . import (DENSITY_LABEL, X_LABEL, FigureOutcome, backends_text, best_tasks, mass_ratio, missing, new_figure,
               ratio_text, requested)

KEY, TITLE = "densities", "Heavy and light densities in the lowest state"
MAX_PANELS = 4


def select(frame: pd.DataFrame) -> pd.DataFrame:
    """The tasks with densities of the unequal-mass configuration measured at the most g (lowest g first)."""
    best = best_tasks(frame)
    if best.empty:
        return best
    best = best[[("density" in requested(r).get("observables", [])) and not math.isclose(mass_ratio(r), 1.0)
                 for r in best.to_dict("records")]]
    if best.empty:
        return best
    groups = sorted(best.groupby(["n_up", "n_down", "mass_up", "mass_down"]), key=lambda item: -item[1]["g"].nunique())
    return groups[0][1].sort_values("g").iloc[:MAX_PANELS]


def draw(tasks: pd.DataFrame, store):
    """The figure and the table of each density's integral, <x^2> and n(0)."""
    first = tasks.iloc[0]
    mass_up, mass_down = first["mass_up"], first["mass_down"]
    figure, axes = new_figure(3.6 * len(tasks) + 0.6, 3.8, len(tasks), sharey=True)
    rows = []
    heavy_is_up = mass_up > mass_down
    for ax, task in zip(axes, tasks.itertuples()):
        result = store.result(task.task_key)
        for species, mass in (("up", mass_up), ("down", mass_down)):
            density = result.observables[f"density_{species}"]
            x, n = density.axes["x"], density.values
            heavy = (species == "up") == heavy_is_up
            label = f"{'heavy' if heavy else 'light'} ({species}, m = {mass:.4g})"
            ax.plot(x, n, color="tab:red" if heavy else "tab:blue", lw=1.6, label=label)
            norm = float(np.trapezoid(n, x))
            rows.append({"g": float(task.g), "species": label, "integral n dx": norm,
                         "⟨x^2⟩": float(np.trapezoid(x * x * n, x) / norm), "n(0)": float(np.interp(0.0, x, n)),
                         "backend": task.backend})
        ax.set_title(f"g = {task.g:g}")
        ax.set_xlabel(X_LABEL)
        ax.grid(True, alpha=0.3)
    axes[0].set_ylabel(DENSITY_LABEL)
    axes[0].set_ylim(0.0, 1.3 * axes[0].get_ylim()[1])  # headroom for the legend above the curves
    axes[0].legend(fontsize="small", loc="upper left")
    return figure, pd.DataFrame(rows)


def caption(tasks: pd.DataFrame) -> str:
    first = tasks.iloc[0]
    return (f"One-body densities n_up(x) and n_down(x) of the lowest state of {int(first['n_up'])}+{int(first['n_down'])}"
            f" fermions with m_up/m_down = {ratio_text(first['mass_up'] / first['mass_down'])} (each integrates to its"
            f" particle number), at g = {', '.join(f'{g:g}' for g in tasks['g'])}. With growing repulsion the light"
            " species is pushed out of the centre, where the heavy one sits: the table gives ⟨x^2⟩ and n(0) per"
            " species. Computed with " + backends_text(tasks) + ".")


def build(frame: pd.DataFrame, store) -> FigureOutcome:
    tasks = select(frame)
    if tasks.empty:
        return missing(KEY, TITLE, "lowest-state densities with unequal masses")
    figure, numbers = draw(tasks, store)
    return FigureOutcome(KEY, TITLE, caption(tasks), figure, numbers)
