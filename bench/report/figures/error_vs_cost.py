"""Error against cost: the ground-state relative error against the solve's CPU time and the task's peak memory.

One line per backend (and per g when the selection spans several) through its stored parameter
sets. The error drawn is the measured bound (|E - ref| + u_ref)/|ref| where a reference exists
(filled markers), else the backend's own error bar over |E| (open markers, dashed: unverified,
``verdicts``). Errors against exact references bottom out near ``tables.EXACT_EVALUATION``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ...tables import successful_ground_states
from . import decade_labels_only, new_figure

DPI = 100
FLOOR = 1e-16  # drawn in place of an error of exactly 0 on the log axis


def select(frame: pd.DataFrame, problem_key: str | None = None, problem_name: str | None = None) -> pd.DataFrame:
    """Ground-state rows of one single-g problem (``problem_key``) or one named problem (all its g)."""
    ok = successful_ground_states(frame)
    if problem_key is not None:
        ok = ok[ok["problem_key"] == problem_key]
    if problem_name is not None:
        ok = ok[ok["problem_name"] == problem_name]
    measured = pd.to_numeric(ok["accuracy"], errors="coerce")
    own = pd.to_numeric(ok["own_rel_error"], errors="coerce")
    return ok.assign(drawn_error=measured.fillna(own), against_reference=measured.notna())[measured.notna() | own.notna()]


def draw(rows: pd.DataFrame, title: str, targets: tuple[float, ...] = ()):
    """Figure: error against CPU time (left) and peak memory (right); dotted lines at ``targets``."""
    figure, (left, right) = new_figure(10, 4.2, 2, sharey=True)
    split_g = rows["g"].nunique() > 1
    for (backend, g, against), group in rows.groupby(["backend", "g", "against_reference"]):
        label = backend + (f" (g={g:g})" if split_g else "") + (" vs reference" if against else ", own error bar (unverified)")
        style = dict(marker="o", ls="-" if against else "--", mfc=None if against else "none")
        group = group.sort_values("cost_cpu_s")
        error = np.maximum(group["drawn_error"].to_numpy(float), FLOOR)
        line, = left.loglog(group["cost_cpu_s"].clip(lower=1e-6), error, label=label, **style)
        by_memory = group.sort_values("peak_mib")
        right.semilogy(by_memory["peak_mib"], np.maximum(by_memory["drawn_error"].to_numpy(float), FLOOR),
                       color=line.get_color(), **style)
    for target in targets:
        for axes in (left, right):
            axes.axhline(target, color="0.5", ls=":", lw=0.8)
    decade_labels_only(left.xaxis)
    left.set_xlabel("CPU time of the solve [s]")
    right.set_xlabel("peak resident memory of the task [MiB]")
    left.set_ylabel("relative error of the ground-state energy")
    for axes in (left, right):
        axes.grid(True, which="both", alpha=0.3)
    if not rows.empty:
        left.legend(fontsize="small", loc="best")
    figure.suptitle(f"{title}: error against cost")
    return figure


def caption(name: str, g: float, targets: tuple[float, ...]) -> str:
    lines = " and ".join(f"{t:.0e}" for t in targets)
    return (f"{name} at g = {g:g}: relative error of the ground-state energy against the CPU time of the solve (left)"
            " and the peak resident memory of the task (right), one line per backend through its parameter sets;"
            f" dotted lines at {lines}. Filled markers: the error bound measured against a reference,"
            " (|E - ref| + u_ref)/|ref|, which can fall no lower than the reference's own uncertainty (1e-12 relative"
            " for the exact closed forms). Open markers on dashed lines: the backend's own error bar, unverified"
            " (no reference), which counts for no target.")
