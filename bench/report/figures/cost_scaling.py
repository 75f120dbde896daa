"""Cost against particle number: CPU time and peak memory needed to reach one relative error, per backend."""

from __future__ import annotations

import pandas as pd

from . import new_figure


def select(table: pd.DataFrame) -> pd.DataFrame:
    """The rows of a ``tables.cost_vs_particle_number_table`` where the backend reached the accuracy."""
    return table[table["cpu_s"].notna()]


def draw(reached: pd.DataFrame, accuracy: float):
    figure, (left, right) = new_figure(10, 4.2, 2)
    for backend, group in reached.groupby("backend"):
        group = group.sort_values("n")
        left.semilogy(group["n"], group["cpu_s"].clip(lower=1e-5), "o-", label=backend)
        right.semilogy(group["n"], group["peak_mib"], "o-", label=backend)
    left.set_ylabel("CPU time of the solve [s]")
    right.set_ylabel("peak resident memory of the task [MiB]")
    for axes in (left, right):
        axes.set_xlabel(r"particle number $N = N_\uparrow + N_\downarrow$")
        axes.xaxis.get_major_locator().set_params(integer=True)
        axes.grid(True, which="both", alpha=0.3)
    left.legend(fontsize="small")
    figure.suptitle(f"Cost of reaching relative error {accuracy:.0e} against particle number")
    return figure


def caption(accuracy: float) -> str:
    return (f"CPU time of the solve (left) and peak resident memory of the task (right) needed to reach relative error"
            f" {accuracy:.0e} in the ground-state energy, measured against a reference at least ten times tighter,"
            " against the particle number, per backend (values of the table above).")
