"""Spectra against g: the lowest levels of one configuration for equal masses and for one unequal mass ratio.

The unequal ratio is the one measured at the most g (the figures suite uses the demo mixture, a 53Cr-6Li
pair with m_up/m_down = 8.8). Levels are joined across g within each parity sector (the frame's ``parity``
label), in order of energy: levels of one sector do not cross unless another symmetry separates them; those
of opposite parity may. A level whose error bar exceeds MAX_BAR is listed in the caption, not drawn. The
g = +inf levels are drawn at the right edge where they are known exactly (``infinite_coupling_levels``:
fermionization for equal masses, the hard-wall wedges for 2+1 / 1+2 with any masses).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from . import (ENERGY_LABEL, G_LABEL, FigureOutcome, backends_text, best_tasks, infinite_coupling_levels, is_missing,
               levels_of, mass_ratio, missing, new_figure, ratio_text, requested)

KEY, TITLE = "spectra", "Spectra against g: equal masses and an unequal mass ratio"
MIN_STATES = 6
MIN_POINTS = 3
MAX_BAR = 0.5  # hbar omega
STYLES = {1: ("tab:blue", "-", "o", "even parity"), -1: ("tab:red", "--", "s", "odd parity"),
          0: ("0.2", "-", "o", "parity not reported")}


@dataclass
class Panel:
    ratio: float
    points_per_g: int
    lines: dict = field(default_factory=dict)  # (parity, k-th level of that sector) -> [(g, E, bar)]
    infinite: list = field(default_factory=list)  # levels at g = +inf where known exactly


@dataclass
class Spectra:
    n_up: int
    n_down: int
    panels: list
    table_rows: list
    used: pd.DataFrame
    levels: int
    max_bar: float = 0.0
    hidden: list = field(default_factory=list)


def select(frame: pd.DataFrame) -> Spectra | None:
    """The configuration with the most g measured in both panels, its levels split by parity sector."""
    best = best_tasks(frame)
    if best.empty:
        return None
    best = best[[int(requested(r).get("states", 1)) >= MIN_STATES and requested(r).get("parity", "any") == "any"
                 for r in best.to_dict("records")]]
    best = best.assign(ratio=[mass_ratio(r) for r in best.to_dict("records")])
    candidates = []
    for (n_up, n_down), group in best.groupby(["n_up", "n_down"]):
        equal = group[np.isclose(group["ratio"], 1.0)]
        unequal = group[~np.isclose(group["ratio"], 1.0)]
        if unequal.empty:
            continue
        counts = unequal.groupby("ratio")["g"].nunique()
        imbalanced = unequal[unequal["ratio"] == counts.idxmax()]
        if equal["g"].nunique() >= MIN_POINTS and imbalanced["g"].nunique() >= MIN_POINTS:
            candidates.append((min(equal["g"].nunique(), imbalanced["g"].nunique()), int(n_up), int(n_down), equal,
                               imbalanced))
    if not candidates:
        return None
    _, n_up, n_down, equal, imbalanced = max(candidates, key=lambda c: (c[0], c[1] + c[2]))
    panels, table_rows, used, hidden, max_bar = [], [], [], [], 0.0
    for group in (equal, imbalanced):
        first = group.iloc[0]
        panel = Panel(float(group["ratio"].iloc[0]), group["g"].nunique(),
                      infinite=infinite_coupling_levels(int(n_up), int(n_down), float(first["mass_up"]),
                                                        float(first["mass_down"]), int(requested(first).get("states", 1))))
        for task in group.sort_values("g").itertuples():
            rows = levels_of(frame, task.task_key)
            used.append(rows)
            seen: dict[int, int] = {}
            for r in rows.itertuples():
                parity = 0 if is_missing(r.parity) else int(r.parity)
                index = seen.get(parity, 0)
                seen[parity] = index + 1
                bar = r.energy_error if not is_missing(r.energy_error) else task.error_estimate
                if not is_missing(bar) and float(bar) > MAX_BAR:
                    hidden.append(f"level {int(r.state)} at g = {task.g:g} (m_up/m_down = {ratio_text(panel.ratio)}):"
                                  f" {float(r.energy):.6g} +- {float(bar):.2g}")
                else:
                    panel.lines.setdefault((parity, index), []).append(
                        (float(task.g), float(r.energy), 0.0 if is_missing(bar) else float(bar)))
                    if not is_missing(bar):
                        max_bar = max(max_bar, float(bar))
                table_rows.append({"mass ratio": ratio_text(panel.ratio), "g": float(task.g), "state": int(r.state),
                                   "parity": parity or None, "energy": float(r.energy), "error bar": bar,
                                   "backend": task.backend})
        panels.append(panel)
    used = pd.concat(used)
    return Spectra(n_up, n_down, panels, table_rows, used, int(used["state"].max()) + 1, max_bar, hidden)


def draw(data: Spectra):
    n = data.n_up + data.n_down
    figure, axes = new_figure(11, 5.0, 2, sharey=True)
    for ax, panel in zip(axes, data.panels):
        labelled = set()
        for (parity, _), points in sorted(panel.lines.items()):
            color, dash, marker, label = STYLES[parity]
            gs, es, bars = zip(*points)
            # a sector's k-th level is joined only where every g holds it (the topmost levels may fall outside the
            # requested states at some g); the others are drawn as markers alone
            ax.errorbar(gs, es, yerr=bars, ls=dash if len(points) == panel.points_per_g else "none", marker=marker,
                        ms=3, lw=1.1, capsize=2, color=color, label=None if parity in labelled else label)
            labelled.add(parity)
        ax.axhline(n * n / 2, color="0.4", ls=":", lw=1, label=f"$N^2/2$ = {n * n / 2:g}")
        if panel.infinite:  # the exact g = +inf levels, as ticks beyond the largest g drawn
            right = max(g for points in panel.lines.values() for g, _, _ in points) if panel.lines else 1.0
            ax.plot([right * 1.04 + 0.3] * len(panel.infinite), panel.infinite, ls="none", marker="_", ms=14, mew=2,
                    color="tab:green", label=r"exact levels at $g = +\infty$")
        ax.set_xlabel(G_LABEL)
        ax.set_title(f"{data.n_up}+{data.n_down}, " + ("equal masses" if math.isclose(panel.ratio, 1.0) else
                                                       f"$m_\\uparrow/m_\\downarrow$ = {ratio_text(panel.ratio)}"))
        ax.grid(True, alpha=0.3)
        ax.legend(fontsize="small", loc="lower right")
    axes[0].set_ylabel(ENERGY_LABEL)
    return figure


def caption(data: Spectra) -> str:
    n = data.n_up + data.n_down
    return (f"The {data.levels} lowest levels of {data.n_up}+{data.n_down} fermions against g (total energies, centre of"
            " mass included), equal masses (left) and mass ratio m_up/m_down = "
            f"{ratio_text(data.panels[1].ratio)} (right; m0 = the lighter mass), joined across g within each parity"
            " sector in order of energy. Horizontal lines are levels that do not depend on g (for equal masses the"
            " spatially antisymmetric states, whose wave function vanishes at every contact). The dotted line is"
            f" N^2/2 = {n * n / 2:g}, where the C(N, N_up)-fold fermionized manifold of equal masses converges as"
            " g -> infinity; with unequal masses that manifold is split into groups with different limits. Green ticks at"
            " the right edge: the exact levels at g = +inf where known (fermionized towers for equal masses, hard-wall"
            " wedges of the Jacobi plane for 2+1 with any masses), the upper bounds of the levels at every finite g > 0."
            " Error bars:"
            f" the backend's own (largest among the drawn points: {data.max_bar:.2g} hbar omega). Computed with "
            + backends_text(data.used) + "."
            + (f" Not drawn, error bar above {MAX_BAR:g} hbar omega: " + "; ".join(data.hidden) + "." if data.hidden
               else ""))


def table(data: Spectra) -> pd.DataFrame:
    """One row per mass ratio and g: the levels E0, E1, ..., the largest error bar and the parities."""
    long = pd.DataFrame(data.table_rows)
    wide = long.pivot_table(index=["mass ratio", "g"], columns="state", values="energy", sort=False)
    wide.columns = [f"E{state}" for state in wide.columns]
    wide["largest error bar"] = pd.to_numeric(long["error bar"], errors="coerce").groupby(
        [long["mass ratio"], long["g"]], sort=False).max()
    wide["parities"] = long.groupby(["mass ratio", "g"], sort=False)["parity"].agg(
        lambda p: " ".join("+" if v == 1 else "-" if v == -1 else "?" for v in p))
    return wide.reset_index()


def build(frame: pd.DataFrame) -> FigureOutcome:
    data = select(frame)
    if data is None:
        return missing(KEY, TITLE, f"at least {MIN_STATES} levels at {MIN_POINTS} or more g, for equal masses and for"
                       " one unequal mass ratio, same particle numbers")
    return FigureOutcome(KEY, TITLE, caption(data), draw(data), table(data))
