"""Tables and plots built from the store's tidy results frame (``Store.results_frame()``).

Every function takes a pandas DataFrame and returns a DataFrame (or a matplotlib Figure), so that
reports can compose them::

    frame = attach_references(store.results_frame(), tolerance=suite.tolerance)
    agreement_table(frame)          # each result vs its reference: abs/rel error, within tolerance, within own error bar
    accuracy_vs_cost_table(frame)   # cheapest parameters reaching 1e-2 ... 1e-6 relative error, time and memory
    cost_vs_particle_number_table(frame, accuracy=1e-4)
    failures_table(frame)           # tasks that did not succeed, with their cause
    to_markdown(table); table.to_csv(...); table.to_html(...)
    plot_error_vs_cost(frame, "1+1 g=2")   # Figure: error vs CPU time and vs peak memory, per backend

References come from ``trapbench.problems.references.references_for(problem)`` (matched on the
physics of each single-g problem). The relative error of a result is measured against its
reference when one exists (``error_basis`` = "reference"); otherwise the backend's own error bar
divided by |E| stands in for it (``error_basis`` = "own estimate"), and tables say so. Cost is the
CPU time of the solve (``solve_cpu_s``), which background load distorts less than wall time.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .suite import DEFAULT_TOLERANCES, Tolerance

THRESHOLDS = (1e-2, 1e-3, 1e-4, 1e-6)
# Round-off allowed on top of tolerances and error bars when comparing with a reference: a few ulps of
# |E| (a result exactly on the edge of its bar must not fail by the last bit of a subtraction).
ROUNDING = 8 * float(np.finfo(float).eps)
# Exact references are stated with uncertainty 0 but evaluated to ~1e-12 relative (root finding and
# special functions; see ``problems.references``): that is the floor of any comparison with them.
EXACT_EVALUATION = 1e-12
MIB = 1024 * 1024


def default_references() -> Callable | None:
    """``references_for`` from the references module, or None when it is not installed."""
    try:
        from ..problems.references import references_for
    except ImportError:
        return None
    return references_for


def _problem(row: dict):
    from ..problems.spec import Problem

    data = row["problem"] if isinstance(row["problem"], dict) else json.loads(row["problem"])
    return Problem.from_dict(data)


def attach_references(
    frame: pd.DataFrame,
    references: Callable | None = None,
    tolerance: Callable[[str, str | None], Tolerance] | None = None,
) -> pd.DataFrame:
    """Add reference and error columns to a results frame (one row per task and state).

    Added: ``ref_value``, ``ref_uncertainty``, ``ref_source``, ``ref_kind``, ``abs_error``,
    ``rel_error`` (vs the reference), ``allowed`` (tolerance abs + rel |ref|), ``within_tolerance``
    (|E - ref| <= allowed + reference uncertainty), ``within_error_bar`` (|E - ref| <= own error bar
    + reference uncertainty; None without a bar), both with ``ROUNDING`` |ref| of round-off slack
    (an exact reference, uncertainty 0, counts as known to ``EXACT_EVALUATION`` |ref|),
    ``error_bar`` (the backend's energy_error, else error_estimate), ``accuracy`` (relative error
    used for cost tables: (|E - ref| + reference uncertainty) / |ref|, a bound on the true relative
    error, else own error bar / |E|) and ``error_basis``.
    """
    references = references if references is not None else default_references()
    tolerance = tolerance or (lambda quantity, backend: DEFAULT_TOLERANCES["energy"])
    frame = frame.copy()
    cache: dict[str, list] = {}
    added: dict[str, list] = {k: [] for k in (
        "ref_value", "ref_uncertainty", "ref_source", "ref_kind", "abs_error", "rel_error", "allowed",
        "within_tolerance", "within_error_bar", "error_bar", "accuracy", "error_basis")}
    for row in frame.to_dict("records"):
        energy, state = row.get("energy"), int(row.get("state", -1))
        ref = None
        if references is not None and energy is not None and state >= 0 and not _missing(energy):
            key = row["problem_key"]
            if key not in cache:
                try:
                    cache[key] = list(references(_problem(row)))
                except Exception:  # a reference lookup that fails must not hide the results
                    cache[key] = []
            ref = next((r for r in cache[key] if r.quantity == "energy" and r.state == state), None)
        bar = row.get("energy_error")
        if _missing(bar):
            bar = row.get("error_estimate")
        bar = None if _missing(bar) else float(bar)
        values: dict[str, Any] = dict.fromkeys(added)
        values["error_bar"] = bar
        if ref is not None:
            diff = abs(float(energy) - ref.value)
            allowed = tolerance("energy", row.get("backend")).allowed(ref.value)
            uncertainty = ref.uncertainty if ref.uncertainty > 0 else EXACT_EVALUATION * abs(ref.value)
            slack = uncertainty + ROUNDING * abs(ref.value)
            values.update(
                ref_value=ref.value, ref_uncertainty=ref.uncertainty, ref_source=ref.source, ref_kind=ref.kind,
                abs_error=diff, rel_error=diff / abs(ref.value) if ref.value else diff, allowed=allowed,
                within_tolerance=diff <= allowed + slack,
                within_error_bar=None if bar is None else diff <= bar + slack,
            )
            # the true error is bounded by the distance to the reference plus the reference's own uncertainty
            bound = diff + uncertainty
            values["accuracy"] = bound / abs(ref.value) if ref.value else bound
            values["error_basis"] = "reference"
        elif bar is not None and energy is not None and not _missing(energy):
            values["accuracy"] = bar / abs(float(energy)) if energy else bar
            values["error_basis"] = "own estimate"
        for k, v in values.items():
            added[k].append(v)
    for k, v in added.items():
        frame[k] = v
    return frame


def _missing(value: Any) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def _cost(frame: pd.DataFrame) -> pd.Series:
    solve = pd.to_numeric(frame["solve_cpu_s"], errors="coerce")
    return solve.fillna(pd.to_numeric(frame["cpu_time_s"], errors="coerce"))


def successful_ground_states(frame: pd.DataFrame, state: int = 0) -> pd.DataFrame:
    """Rows of successful tasks for one level (the ground state by default), with ``cost_cpu_s`` and ``peak_mib``."""
    ok = frame[(frame["status"] == "ok") & (frame["state"] == state)].copy()
    ok["cost_cpu_s"] = _cost(ok)
    ok["peak_mib"] = pd.to_numeric(ok["peak_rss_bytes"], errors="coerce") / MIB
    return ok


_ok = successful_ground_states  # the name bench/report.py imports


# ----------------------------------------------------------------------------- tables


def agreement_table(frame: pd.DataFrame) -> pd.DataFrame:
    """Each successful result next to its reference (rows without a reference keep empty cells)."""
    ok = frame[frame["status"] == "ok"]
    columns = ["problem_name", "g", "backend", "params_text", "state", "energy", "error_bar", "ref_value",
               "ref_uncertainty", "abs_error", "rel_error", "allowed", "within_tolerance", "within_error_bar",
               "ref_kind", "ref_source"]
    return ok[columns].rename(columns={"params_text": "params"}).reset_index(drop=True)


def accuracy_vs_cost_table(frame: pd.DataFrame, thresholds: Iterable[float] = THRESHOLDS) -> pd.DataFrame:
    """For each problem (and g) and backend, the cheapest parameters whose ground-state error is below each threshold."""
    ok = successful_ground_states(frame)
    rows = []
    for (name, g, backend), group in ok.groupby(["problem_name", "g", "backend"], sort=False):
        measured = group[group["accuracy"].notna()]
        for threshold in thresholds:
            reached = measured[measured["accuracy"] <= threshold]
            row = {"problem_name": name, "g": g, "backend": backend, "target": threshold}
            if measured.empty:
                row.update(params="no error measure (no reference, no error bar)", accuracy=None, error_basis=None,
                           cpu_s=None, wall_s=None, peak_mib=None)
            elif reached.empty:
                row.update(params="not reached", accuracy=measured["accuracy"].min(), error_basis=None, cpu_s=None,
                           wall_s=None, peak_mib=None)
            else:
                pick = reached.loc[reached["cost_cpu_s"].idxmin()]
                row.update(params=pick["params_text"], accuracy=pick["accuracy"], error_basis=pick["error_basis"],
                           cpu_s=pick["cost_cpu_s"], wall_s=pick["solve_wall_s"], peak_mib=pick["peak_mib"])
            rows.append(row)
    return pd.DataFrame(rows, columns=["problem_name", "g", "backend", "target", "params", "accuracy",
                                       "error_basis", "cpu_s", "wall_s", "peak_mib"])


def cost_vs_particle_number_table(frame: pd.DataFrame, accuracy: float = 1e-4) -> pd.DataFrame:
    """Per backend and particle number N: the cheapest cost reaching ``accuracy``, over the problems with that N.

    ``cpu_s`` is the largest over problems of each problem's cheapest qualifying run (the cost to
    expect for any of them), ``peak_mib`` likewise; ``problems_reached`` counts how many of the
    measured problems with that N reached the accuracy at all.
    """
    ok = successful_ground_states(frame)
    ok["n"] = ok["n_up"] + ok["n_down"]
    rows = []
    for (backend, n), group in ok.groupby(["backend", "n"]):
        costs, peaks, reached, total = [], [], 0, 0
        for _, problem_rows in group.groupby(["problem_key"]):
            total += 1
            good = problem_rows[problem_rows["accuracy"] <= accuracy]
            if good.empty:
                continue
            reached += 1
            pick = good.loc[good["cost_cpu_s"].idxmin()]
            costs.append(pick["cost_cpu_s"])
            peaks.append(pick["peak_mib"])
        rows.append({"backend": backend, "n": int(n), "accuracy": accuracy, "problems_reached": f"{reached}/{total}",
                     "cpu_s": max(costs) if costs else None, "peak_mib": max(peaks) if peaks else None})
    return pd.DataFrame(rows, columns=["backend", "n", "accuracy", "problems_reached", "cpu_s", "peak_mib"])


def failures_table(frame: pd.DataFrame) -> pd.DataFrame:
    """Tasks that did not succeed, with their status and the first line of the error."""
    bad = frame[frame["status"] != "ok"].drop_duplicates("task_key")
    table = bad[["problem_name", "g", "backend", "params_text", "status", "error"]].copy()
    table["error"] = [str(e).splitlines()[0] if isinstance(e, str) and e else "" for e in table["error"]]
    return table.rename(columns={"params_text": "params"}).reset_index(drop=True)


# ----------------------------------------------------------------------------- formatting


# Columns printed with 12 significant digits (values to compare digit by digit); others get 4.
PRECISE_COLUMNS = frozenset({"energy", "ref_value", "baseline", "current", "g"})


def format_value(value: Any, digits: int = 12) -> str:
    """A table cell as plain text: `digits` significant digits (3 below 1e-3), yes/no, blank for missing."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (float, np.floating)):
        return f"{value:.{digits}g}" if abs(value) >= 1e-3 or value == 0 else f"{value:.3g}"
    return str(value)


def _cell(value: Any, digits: int = 12) -> str:
    return format_value(value, digits).replace("|", "\\|").replace("\n", " ")


def to_markdown(table: pd.DataFrame) -> str:
    """A GitHub-flavoured Markdown table (no extra dependency)."""
    header = "| " + " | ".join(map(str, table.columns)) + " |"
    rule = "|" + "|".join("---" for _ in table.columns) + "|"
    digits = [12 if c in PRECISE_COLUMNS else 4 for c in table.columns]
    body = ["| " + " | ".join(_cell(v, d) for v, d in zip(row, digits)) + " |" for row in table.itertuples(index=False)]
    return "\n".join([header, rule, *body]) if body else header + "\n" + rule + "\n(no rows)"


def suite_tables(frame: pd.DataFrame, suite=None, references: Callable | None = None) -> dict[str, pd.DataFrame]:
    """All tables of a sweep, keyed by a file-friendly name."""
    tolerance = suite.tolerance if suite is not None else None
    frame = attach_references(frame, references, tolerance)
    return {
        "agreement": agreement_table(frame),
        "accuracy_vs_cost": accuracy_vs_cost_table(frame),
        "cost_vs_n": cost_vs_particle_number_table(frame),
        "failures": failures_table(frame),
    }


TITLES = {
    "agreement": "Agreement with reference values",
    "accuracy_vs_cost": "Accuracy against cost (cheapest parameters reaching each relative error)",
    "cost_vs_n": "Cost against particle number (relative error 1e-4)",
    "failures": "Tasks that did not succeed",
}


def accuracy_vs_cost_summary(table: pd.DataFrame) -> pd.DataFrame:
    """The accuracy-vs-cost table folded to one row per problem and backend, one column per target.

    Each cell reads ``params; CPU s; MiB`` for the cheapest run reaching that relative error.
    """
    if table.empty:
        return pd.DataFrame(columns=["problem_name", "g", "backend"])
    rows = []
    for (name, g, backend), group in table.groupby(["problem_name", "g", "backend"], sort=False):
        row = {"problem_name": name, "g": g, "backend": backend}
        for record in group.to_dict("records"):
            if record["cpu_s"] is None or pd.isna(record["cpu_s"]):
                cell = record["params"] if record["accuracy"] is None or pd.isna(record["accuracy"]) else (
                    f"{record['params']} (best {record['accuracy']:.2g})")
            else:
                cell = f"{record['params']}; {record['cpu_s']:.3g} s; {record['peak_mib']:.0f} MiB"
            row[f"{record['target']:g}"] = cell
        rows.append(row)
    return pd.DataFrame(rows)


def agreement_with_footnotes(table: pd.DataFrame, ground_state_only: bool = True) -> tuple[pd.DataFrame, list[str]]:
    """Rows with a reference (ground states only by default), sources as footnote numbers; returns (table, sources)."""
    shown = table[table["ref_value"].notna()]
    if ground_state_only:
        shown = shown[shown["state"] == 0]
    shown = shown.drop(columns=["state", "allowed", "ref_kind"]).copy()
    sources = list(dict.fromkeys(shown["ref_source"]))
    shown["ref_source"] = [f"[{sources.index(s) + 1}]" for s in shown["ref_source"]]
    return shown.rename(columns={"ref_source": "source", "ref_uncertainty": "ref_unc"}), sources


def suite_tables_markdown(frame: pd.DataFrame, suite=None, references: Callable | None = None) -> str:
    """The sweep's tables as one Markdown document, compact enough for a terminal.

    The agreement table lists the results that have a reference (sources as footnotes); the
    accuracy-vs-cost table is folded to one row per problem and backend.
    """
    tables = suite_tables(frame, suite, references)
    agreement, sources = agreement_with_footnotes(tables["agreement"])
    parts = [f"## {TITLES['agreement']} (ground states)\n\n{to_markdown(agreement)}"]
    parts[-1] += ("\n\nExcited levels and results without a reference: `trapbench export --tables DIR`"
                  " (agreement.csv / .md / .html).")
    if sources:
        parts[-1] += "\n\n" + "\n".join(f"[{i + 1}] {s}" for i, s in enumerate(sources))
    parts.append(f"## {TITLES['accuracy_vs_cost']}\n\n{to_markdown(accuracy_vs_cost_summary(tables['accuracy_vs_cost']))}")
    parts.append(f"## {TITLES['cost_vs_n']}\n\n{to_markdown(tables['cost_vs_n'])}")
    if not tables["failures"].empty:
        parts.append(f"## {TITLES['failures']}\n\n{to_markdown(tables['failures'])}")
    return "\n\n".join(parts) + "\n"


def write_tables(frame: pd.DataFrame, folder: str | Path, suite=None, references: Callable | None = None,
                 formats: Iterable[str] = ("md", "csv", "html"), plots: bool = True) -> list[Path]:
    """Write every table in each format, and one PNG of error vs cost per problem; returns the paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for name, table in suite_tables(frame, suite, references).items():
        for fmt in formats:
            path = folder / f"{name}.{fmt}"
            if fmt == "md":
                path.write_text(f"# {TITLES[name]}\n\n{to_markdown(table)}\n", encoding="utf-8")
            elif fmt == "csv":
                table.to_csv(path, index=False)
            elif fmt == "html":
                table.to_html(path, index=False, na_rep="")
            written.append(path)
    if plots:
        with_refs = attach_references(frame, references, suite.tolerance if suite is not None else None)
        for name in sorted(set(with_refs.loc[with_refs["status"] == "ok", "problem_name"])):
            figure = plot_error_vs_cost(with_refs, name)
            path = folder / f"error_vs_cost_{_slug(name)}.png"
            figure.savefig(path, dpi=110)
            written.append(path)
    return written


def _slug(text: str) -> str:
    return "".join(c if c.isalnum() or c in "-_" else "_" for c in text).strip("_") or "problem"


# ----------------------------------------------------------------------------- plots


def plot_error_vs_cost(frame: pd.DataFrame, problem_name: str):
    """Figure: ground-state relative error against CPU time (left) and peak memory (right), per backend and g.

    Errors against exact references bottom out at ``EXACT_EVALUATION`` (1e-12), their stated accuracy.
    """
    from matplotlib.figure import Figure

    ok = successful_ground_states(frame)
    ok = ok[(ok["problem_name"] == problem_name) & ok["accuracy"].notna()]
    figure = Figure(figsize=(10, 4.2), layout="constrained")
    left, right = figure.subplots(1, 2, sharey=True)
    for (backend, g), group in ok.groupby(["backend", "g"]):
        group = group.sort_values("cost_cpu_s")
        accuracy = np.maximum(group["accuracy"].to_numpy(float), 1e-16)
        label = f"{backend} (g={g:g})"
        left.loglog(group["cost_cpu_s"].clip(lower=1e-6), accuracy, "o-", label=label)
        right.semilogy(group["peak_mib"], accuracy, "o-", label=label)
    from matplotlib.ticker import NullFormatter

    left.xaxis.set_minor_formatter(NullFormatter())  # minor labels of a short log axis overlap
    left.set_xlabel("CPU time of the solve [s]")
    right.set_xlabel("peak resident memory [MiB]")
    left.set_ylabel("relative error of the ground-state energy")
    for axes in (left, right):
        axes.grid(True, which="both", alpha=0.3)
    if not ok.empty:
        left.legend(fontsize="small")
    figure.suptitle(f"{problem_name}: error against cost")
    return figure
