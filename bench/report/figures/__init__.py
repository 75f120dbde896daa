"""The report's figures, one module per family; each selects its rows, draws, and writes its caption.

Every family takes the results frame with reference columns (``tables.attach_references(
store.results_frame())``); only figures that draw arrays (densities, noise maps) also read the
open ``Store`` for the full results. A family returns a ``FigureOutcome``: a matplotlib Figure
with a caption and the table of the numbers drawn, or a "no data" message naming the sweep that
provides them. Data are found by their physics (particle numbers, masses, requested levels and
observables), not by problem names, so the problems of ``problems/suites/figures.toml`` feed the
figures from whichever suite ran them.

Where several results exist for the same single-g problem, the one with the smallest error (the
measured bound against a reference, else the backend's own error bar; ``tables.ranking_error``)
is drawn, ties going to the costlier (more converged) run. Units: hbar = omega = m0 = 1; energies
in hbar omega, lengths in sqrt(hbar/(m0 omega)), momenta in sqrt(hbar m0 omega), g in
sqrt(hbar^3 omega/m0).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ...tables import ranking_error

ENERGY_LABEL = r"energy $E$ [$\hbar\omega$]"
G_LABEL = r"coupling $g$ [$\sqrt{\hbar^3\omega/m_0}$]"
X_LABEL = r"position $x$ [$\sqrt{\hbar/(m_0\omega)}$]"
DENSITY_LABEL = r"density $n_s(x)$ [$1/\sqrt{\hbar/(m_0\omega)}$]"
P_UP_LABEL = r"$p_\uparrow$ [$\sqrt{\hbar m_0\omega}$]"
P_DOWN_LABEL = r"$p_\downarrow$ [$\sqrt{\hbar m_0\omega}$]"
FIGURES_SWEEP = "trapbench sweep figures"
RATIO_DIGITS = 6


@dataclass
class FigureOutcome:
    """One figure of the report: the drawing, its caption and the numbers behind it, or why it is missing."""

    key: str
    title: str
    caption: str = ""
    figure: object | None = None
    table: pd.DataFrame | None = None
    missing: str | None = None


def missing(key: str, title: str, what: str) -> FigureOutcome:
    return FigureOutcome(key, title, missing=f"No data for this figure ({what}): run `{FIGURES_SWEEP}` first"
                         " (or a suite holding the problems of problems/suites/figures.toml), then the report again.")


def file_stem(text: str) -> str:
    """A file-name-safe form of a problem name: runs of other characters become one '_'."""
    return re.sub(r"[^A-Za-z0-9_-]+", "_", text).strip("_") or "problem"


def mass_ratio(row) -> float:
    return round(float(row["mass_up"]) / float(row["mass_down"]), RATIO_DIGITS)


# Named mass ratios: the demo mixture of the figures (a 53Cr-6Li pair, 52.9406 u / 6.0151 u = 8.801, taken as 8.8
# as in problems/examples) and the check value 20/3 of the reference dataset.
NAMED_RATIOS = ((8.8, "53Cr/6Li"), (1 / 8.8, "6Li/53Cr"), (20 / 3, "20/3"), (3 / 20, "3/20"))


def ratio_text(ratio: float) -> str:
    """m_up/m_down for people: '1', '2', '8.8 (53Cr/6Li)', '6.667 (20/3)'."""
    for value, name in NAMED_RATIOS:
        if math.isclose(ratio, value, rel_tol=1e-5):  # mass_ratio rounds to RATIO_DIGITS decimals
            return f"{ratio:.4g} ({name})"
    return f"{ratio:.4g}"


def infinite_coupling_levels(n_up: int, n_down: int, mass_up: float, mass_down: float, states: int) -> list[float]:
    """The levels at g = +inf where trapbench knows them exactly (``references_for``'s ``energy_g_inf``), else [].

    Known: equal masses (fermionization), 1+1 with any masses (Busch's limit), 2+1 / 1+2 with any masses (wedges).
    """
    from ....problems.references import references_for
    from ....problems.spec import Problem

    problem = Problem.create(n_up, n_down, 1.0, mass_up=mass_up, mass_down=mass_down, states=states)
    return [r.value for r in sorted(references_for(problem), key=lambda r: r.state) if r.quantity == "energy_g_inf"]


def requested(row) -> dict:
    """The problem's targets (states, parity, observables, grid) of a frame row."""
    problem = row["problem"] if isinstance(row["problem"], dict) else {}
    return problem.get("targets", {})


def is_missing(value) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def best_tasks(frame: pd.DataFrame) -> pd.DataFrame:
    """One ground-state row per single-g problem: the most accurate successful task (ties: the costliest)."""
    ok = frame[(frame["status"] == "ok") & (frame["state"] == 0)].copy()
    if ok.empty:
        return ok
    ok["_error"] = ranking_error(ok).fillna(np.inf)
    ok["_cost"] = pd.to_numeric(ok["solve_cpu_s"], errors="coerce").fillna(0.0)
    ok = ok.sort_values(["_error", "_cost"], ascending=[True, False], kind="stable")
    return ok.drop_duplicates("problem_key").drop(columns=["_error", "_cost"])


def levels_of(frame: pd.DataFrame, task_key: str) -> pd.DataFrame:
    """Every level of one task, lowest first."""
    rows = frame[(frame["task_key"] == task_key) & (frame["state"] >= 0)]
    return rows.sort_values("state")


def backends_text(rows: pd.DataFrame) -> str:
    used = rows.drop_duplicates(["backend", "params_text"])
    return "; ".join(f"{r.backend} ({r.params_text or 'default parameters'})" for r in used.itertuples())


def new_figure(width: float, height: float, columns: int, **kwargs):
    """A matplotlib Figure (no pyplot state) with ``columns`` axes side by side."""
    from matplotlib.figure import Figure

    figure = Figure(figsize=(width, height), layout="constrained")
    return figure, np.atleast_1d(figure.subplots(1, columns, **kwargs))


def decade_labels_only(axis) -> None:
    """Label only the decades of a log axis (the default minor labels overlap on short ranges)."""
    from matplotlib.ticker import NullFormatter

    axis.set_minor_formatter(NullFormatter())


def colors(count: int) -> list:
    from matplotlib import colormaps

    cmap = colormaps["viridis"]
    return [cmap(i / max(count - 1, 1) * 0.9) for i in range(count)]
