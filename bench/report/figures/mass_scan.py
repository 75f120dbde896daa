"""The lowest levels against the mass ratio m_up/m_down at one g, with the exact g = +inf levels as curves.

Selects the configuration and coupling measured at the most mass ratios (at least MIN_RATIOS, each with at
least MIN_STATES levels, parity "any"). The g = +inf levels (``infinite_coupling_levels``: the hard-wall
wedges for 2+1 / 1+2 at any masses, fermionization at equal masses) are evaluated on a dense grid of ratios
and drawn as dashed curves: every level at finite g > 0 lies at or below its g = +inf counterpart.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from . import (ENERGY_LABEL, FigureOutcome, backends_text, best_tasks, colors, infinite_coupling_levels, levels_of,
               mass_ratio, missing, new_figure, ratio_text, requested)

KEY, TITLE = "mass_scan", "Levels against the mass ratio"
MIN_RATIOS = 5
MIN_STATES = 3
CURVE_POINTS = 60
DEMO_RATIO = 8.8  # the 53Cr-6Li pair of the figures suite and problems/examples


def select(frame: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(tasks, their levels): one task per mass ratio of the best-covered (N_up, N_down, g), lowest ratio first."""
    best = best_tasks(frame)
    empty = (best.iloc[0:0], frame.iloc[0:0])
    if best.empty:
        return empty
    best = best[[int(requested(r).get("states", 1)) >= MIN_STATES and requested(r).get("parity", "any") == "any"
                 for r in best.to_dict("records")]]
    if best.empty:
        return empty
    best = best.assign(ratio=[mass_ratio(r) for r in best.to_dict("records")])
    groups = [(group["ratio"].nunique(), key, group) for key, group in best.groupby(["n_up", "n_down", "g"])]
    count, _, tasks = max(groups, key=lambda item: (item[0], item[1][2]))
    if count < MIN_RATIOS:
        return empty
    tasks = tasks.sort_values("ratio").drop_duplicates("ratio")
    levels = pd.concat([levels_of(frame, key).assign(ratio=ratio) for key, ratio in zip(tasks["task_key"], tasks["ratio"])])
    return tasks, levels


def infinite_curves(tasks: pd.DataFrame, states: int) -> tuple[np.ndarray, np.ndarray | None]:
    """Ratios on a log grid over the measured range and the g = +inf levels there (None where not known)."""
    first = tasks.iloc[0]
    ratios = np.geomspace(tasks["ratio"].min(), tasks["ratio"].max(), CURVE_POINTS)
    rows = []
    for r in ratios:  # lighter species at mass 1, as the suites give them
        mass_up, mass_down = (r, 1.0) if r >= 1 else (1.0, 1 / r)
        rows.append(infinite_coupling_levels(int(first["n_up"]), int(first["n_down"]), mass_up, mass_down, states))
    if any(len(row) < states for row in rows):
        return ratios, None
    return ratios, np.array(rows)


def draw(tasks: pd.DataFrame, levels: pd.DataFrame):
    figure, axes = new_figure(7.5, 5.0, 1)
    ax = axes[0]
    states = int(levels.groupby("ratio")["state"].max().min()) + 1
    palette = colors(states)
    for state in range(states):
        rows = levels[levels["state"] == state].sort_values("ratio")
        bars = pd.to_numeric(rows["energy_error"], errors="coerce").fillna(0.0)
        ax.errorbar(rows["ratio"], rows["energy"], yerr=bars, fmt="o-", ms=3.5, lw=1.1, capsize=2, color=palette[state],
                    label=f"level {state}")
    ratios, infinite = infinite_curves(tasks, states)
    if infinite is not None:
        for state in range(states):
            ax.plot(ratios, infinite[:, state], "--", lw=1, color=palette[state],
                    label=r"exact at $g = +\infty$" if state == 0 else None)
    if ratios.min() <= DEMO_RATIO <= ratios.max():
        ax.axvline(DEMO_RATIO, color="0.5", lw=0.8, ls=":", label=f"{ratio_text(DEMO_RATIO)}")
    ax.set_xscale("log")
    ax.set_xlabel(r"mass ratio $m_\uparrow/m_\downarrow$")
    ax.set_ylabel(ENERGY_LABEL)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize="small", ncols=2)
    first = tasks.iloc[0]
    ax.set_title(f"{int(first['n_up'])}+{int(first['n_down'])} at g = {first['g']:g}")
    return figure, infinite is not None


def table(tasks: pd.DataFrame, levels: pd.DataFrame) -> pd.DataFrame:
    """One row per mass ratio: the measured levels E0, E1, ... and the exact g = +inf levels where known."""
    states = int(levels.groupby("ratio")["state"].max().min()) + 1
    first = tasks.iloc[0]
    rows = []
    for ratio, part in levels.groupby("ratio", sort=True):
        part = part.set_index("state")
        mass_up, mass_down = float(part["mass_up"].iloc[0]), float(part["mass_down"].iloc[0])  # not the rounded ratio
        limits = infinite_coupling_levels(int(first["n_up"]), int(first["n_down"]), mass_up, mass_down, states)
        row = {"mass ratio": ratio_text(ratio)}
        row.update({f"E{k}": float(part.loc[k, "energy"]) for k in range(states)})
        row.update({f"E{k} at g=inf": (limits[k] if k < len(limits) else None) for k in range(states)})
        rows.append(row)
    return pd.DataFrame(rows)


def caption(tasks: pd.DataFrame, with_limits: bool) -> str:
    first = tasks.iloc[0]
    return (f"The lowest levels of {int(first['n_up'])}+{int(first['n_down'])} fermions at g = {first['g']:g} against the"
            f" mass ratio m_up/m_down ({len(tasks)} ratios from {tasks['ratio'].min():.4g} to {tasks['ratio'].max():.4g};"
            " m0 = the lighter mass; total energies, centre of mass included). "
            + ("Dashed: the exact levels at g = +inf (for 2+1 the hard-wall wedges of the mass-scaled Jacobi plane,"
               " whose angles follow from the masses), which bound the finite-g levels from above. " if with_limits else
               "No exact g = +inf levels are known for this configuration. ")
            + f"Dotted: the demo mixture, m_up/m_down = {ratio_text(DEMO_RATIO)}. Error bars: the backend's own. Computed"
            " with " + backends_text(tasks) + ".")


def build(frame: pd.DataFrame) -> FigureOutcome:
    tasks, levels = select(frame)
    if tasks.empty:
        return missing(KEY, TITLE, f"at least {MIN_STATES} levels at {MIN_RATIOS} or more mass ratios, one configuration"
                       " and one g")
    figure, with_limits = draw(tasks, levels)
    return FigureOutcome(KEY, TITLE, caption(tasks, with_limits), figure, table(tasks, levels))
