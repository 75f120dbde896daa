"""Odd-even staggering Delta(N) = E(N) - [E(N-1) + E(N+1)]/2 at odd N from the best stored ground energies.

The definition and its error propagation are ``bench.pairing.pairing_gaps`` (three-point formula,
common practice; N_up = ceil(N/2), N_down = floor(N/2), E(0) = 0). Delta vanishes at g = 0 for
every N and is positive when pairing lowers the even systems.
"""

from __future__ import annotations

import math

import pandas as pd

from . import G_LABEL, FigureOutcome, best_tasks, is_missing, missing, new_figure, requested

KEY, TITLE = "odd_even", "Odd-even energy differences"
COLUMNS = ["N", "g", "E(N-1)", "E(N)", "E(N+1)", "Delta", "error bar", "backends"]


def best_stored_ground_energies(frame: pd.DataFrame) -> dict[tuple[int, int, float | None], tuple[float, float | None, str]]:
    """(N_up, N_down, g) -> (ground energy, error bar, backend) for equal masses and frequencies, harmonic trap.

    N_up and N_down are ordered (larger first): with equal masses the species are interchangeable.
    A configuration with an empty species does not feel g and is entered at g = None. Of several
    stored results the one with the smallest own error bar wins.
    """
    out = {}
    for r in best_tasks(frame).to_dict("records"):
        problem = r["problem"] if isinstance(r["problem"], dict) else {}
        up, down = problem.get("up", {}), problem.get("down", {})
        if not (math.isclose(r["mass_up"], r["mass_down"]) and up.get("omega", 1.0) == down.get("omega", 1.0)):
            continue
        if requested(r).get("parity", "any") != "any" or problem.get("trap", {}).get("shape", "harmonic") != "harmonic":
            continue
        n_up, n_down = sorted((int(r["n_up"]), int(r["n_down"])), reverse=True)
        bar = r["energy_error"] if not is_missing(r["energy_error"]) else r["error_estimate"]
        key = (n_up, n_down, None if n_down == 0 else float(r["g"]))
        candidate = (float(r["energy"]), None if is_missing(bar) else float(bar), r["backend"])
        if key not in out or _width(candidate) < _width(out[key]):
            out[key] = candidate
    return out


def _width(entry) -> float:
    return math.inf if entry[1] is None else entry[1]


def select(frame: pd.DataFrame) -> pd.DataFrame:
    """The staggering table: one row per odd N and g where E(N-1), E(N) and E(N+1) are all stored."""
    from ...pairing import balanced_counts, pairing_gaps

    energies = best_stored_ground_energies(frame)
    couplings = sorted({k[2] for k in energies if k[2] is not None})
    rows = []
    for g in couplings:
        for n in range(0, max(k[0] + k[1] for k in energies) + 1):
            n_up, n_down = balanced_counts(n)
            entry = (0.0, 0.0, "E(0) = 0") if n == 0 else energies.get((n_up, n_down, None if n_down == 0 else g))
            if entry is not None:
                rows.append({"backend": "best stored", "N": n, "g": g, "energy": entry[0],
                             "error": math.nan if entry[1] is None else entry[1], "status": "ok", "source": entry[2]})
    if not rows:
        return pd.DataFrame(columns=COLUMNS)
    stored = pd.DataFrame(rows)
    by = stored.set_index(["N", "g"])
    table = []
    for gap in pairing_gaps(stored).itertuples():
        n, g = int(gap.N), gap.g
        sources = [by.loc[(m, g), "source"] for m in (n - 1, n, n + 1)]
        table.append({"N": n, "g": g, "E(N-1)": by.loc[(n - 1, g), "energy"], "E(N)": by.loc[(n, g), "energy"],
                      "E(N+1)": by.loc[(n + 1, g), "energy"], "Delta": gap.gap,
                      "error bar": None if math.isnan(gap.error) else gap.error,
                      "backends": ", ".join(dict.fromkeys(sources))})
    return pd.DataFrame(table, columns=COLUMNS)


def draw(table: pd.DataFrame):
    figure, axes = new_figure(7.5, 4.6, 1)
    ax = axes[0]
    for n, part in table.groupby("N"):
        part = part.sort_values("g")
        bars = pd.to_numeric(part["error bar"], errors="coerce").fillna(0.0)
        ax.errorbar(part["g"], part["Delta"], yerr=bars, fmt="o-", ms=4, capsize=3,
                    label=f"N = {n} ({(n + 1) // 2}+{n // 2})")
    ax.axhline(0.0, color="0.4", lw=0.8)
    ax.set_xlabel(G_LABEL)
    ax.set_ylabel(r"$\Delta(N) = E(N) - [E(N-1) + E(N+1)]/2$ [$\hbar\omega$]")
    ax.legend(fontsize="small")
    ax.grid(True, alpha=0.3)
    return figure


CAPTION = ("Odd-even staggering of the ground-state energy at odd N, Delta(N) = E(N) - [E(N-1) + E(N+1)]/2"
           " (three-point formula, common practice; spins as balanced as possible, equal masses, E(0) = 0)."
           " Delta vanishes at g = 0 and grows with attraction, where the odd particle is left unpaired. Error"
           " bars: the energies' own error bars (linear sum; none drawn where a backend gives none). The backend"
           " of each energy is in the table.")


def build(frame: pd.DataFrame) -> FigureOutcome:
    table = select(frame)
    if table.empty:
        return missing(KEY, TITLE, "ground energies of N-1, N and N+1 particles (N odd, spins balanced) at equal masses"
                       " and the same g")
    return FigureOutcome(KEY, TITLE, CAPTION, draw(table), table)
