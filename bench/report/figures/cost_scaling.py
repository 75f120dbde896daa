"""Cost against particle number: CPU time and peak memory needed to reach one relative error, per backend."""

from __future__ import annotations

import pandas as pd

from . import new_figure


def select(table: pd.DataFrame) -> pd.DataFrame:
    """The rows of a ``tables.cost_vs_particle_number_table`` with a cost to draw: reached against a reference,
    or (drawn apart, hollow) only by the backend's own error bar where no reference decides."""
    return table[table["cpu_s"].notna() | table["cpu_s_own_bar"].notna()]


def draw(reached: pd.DataFrame, accuracy: float):
    figure, (left, right) = new_figure(10, 5.0, 2)
    for backend, group in reached.groupby("backend"):
        group = group.sort_values("n")
        verified = group[group["cpu_s"].notna()]
        own_bar = group[group["cpu_s_own_bar"].notna()]
        line = left.semilogy(verified["n"], verified["cpu_s"].clip(lower=1e-5), "o-", label=backend)[0]
        right.semilogy(verified["n"], verified["peak_mib"], "o-", color=line.get_color(), label=backend)
        if not own_bar.empty:
            style = dict(color=line.get_color(), linestyle="--", marker="o", markerfacecolor="none")
            left.semilogy(own_bar["n"], own_bar["cpu_s_own_bar"].clip(lower=1e-5),
                          label=f"{backend} (own error bar only)", **style)
            right.semilogy(own_bar["n"], own_bar["peak_mib_own_bar"], **style)
    left.set_ylabel("CPU time of the solve [s]")
    right.set_ylabel("peak resident memory of the task [MiB]")
    for axes in (left, right):
        axes.set_xlabel(r"particle number $N = N_\uparrow + N_\downarrow$")
        axes.xaxis.get_major_locator().set_params(integer=True)
        axes.grid(True, which="both", alpha=0.3)
    handles, labels = left.get_legend_handles_labels()  # below the panels: the curves stay uncovered
    figure.legend(handles, labels, loc="outside lower center", ncol=4, fontsize="small")
    figure.suptitle(f"Cost of reaching relative error {accuracy:.0e} against particle number")
    return figure


def caption(accuracy: float) -> str:
    return (f"CPU time of the solve (left) and peak resident memory of the task (right) needed to reach relative error"
            f" {accuracy:.0e} in the ground-state energy, measured against a reference at least ten times tighter,"
            " against the particle number, per backend (values of the table above). Hollow markers on dashed lines:"
            " problems without such a reference, where the backend's own error bar is within the target;"
            " unverified, shown for the cost trend only.")
