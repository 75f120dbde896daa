"""The sweep's tables, built from the store's tidy results frame (``Store.results_frame()``).

Every function takes a pandas DataFrame and returns a DataFrame, so that reports can compose them::

    frame = attach_references(store.results_frame(), tolerance=suite.tolerance)
    agreement_table(frame)          # each result vs its reference: abs/rel error, verdict vs tolerance, own error bar
    accuracy_vs_cost_table(frame)   # cheapest parameters reaching 1e-2 ... 1e-6 relative error, time and memory
    cost_vs_particle_number_table(frame, accuracy=1e-4)
    failures_table(frame)           # tasks that did not succeed, with their cause
    error_bar_calibration(frame)    # (from verdicts) per backend and N: coverage of |E - ref| by 2 error bars
    to_markdown(table)              # a Markdown table; format_value formats one cell
    write_tables(frame, folder)     # all of them as .md/.csv/.html, and the error-vs-cost figures

References come from ``trapbench.problems.references.references_for(problem, for_backend=...)``
(matched on the physics of each single-g problem; a dataset value never grades the backend that
produced it). Whether a result reaches an accuracy is decided by ``bench.verdicts``: only against a reference at least ten times tighter than the threshold;
otherwise the result is "unverified" and shown with its own error bar (``error_basis`` says
which). Cost is the CPU time of the solve (``solve_cpu_s``), which background load distorts less
than wall time.
"""

from __future__ import annotations

import inspect

import json
import math
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .suite import DEFAULT_TOLERANCES, Tolerance
from .verdicts import MISSED, REACHED, UNVERIFIED, error_bar_calibration, judge, judge_frame

THRESHOLDS = (1e-2, 1e-3, 1e-4, 1e-6)
COST_VS_N_ACCURACY = 1e-4
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

    Added: ``ref_value``, ``ref_uncertainty`` (as the reference states it), ``ref_source``,
    ``ref_kind``, ``ref_effective_uncertainty`` (the stated one, at least ``EXACT_EVALUATION`` |ref|
    for exact references, plus ``ROUNDING`` |ref| of round-off), ``abs_error`` = |E - ref|,
    ``rel_error`` = |E - ref| / |ref|, ``ref_rel_uncertainty`` = effective uncertainty / |ref|,
    ``error_bar`` (the backend's energy_error, else error_estimate), ``own_rel_error`` = error bar /
    |E|, ``accuracy`` = (|E - ref| + effective uncertainty) / |ref| (a bound on the true relative
    error; empty without a reference), ``error_basis`` ("reference" or "own estimate"),
    ``allowed`` (tolerance abs + rel |ref|), ``tolerance_verdict`` (``verdicts.judge`` of
    |E - ref| against ``allowed``), ``within_tolerance`` (True when reached, False when missed,
    None when unverified) and ``within_error_bar`` (|E - ref| <= own error bar + effective
    uncertainty; None without a bar).
    """
    references = references if references is not None else default_references()
    graded = references is not None and "for_backend" in inspect.signature(references).parameters
    tolerance = tolerance or (lambda quantity, backend: DEFAULT_TOLERANCES["energy"])
    frame = frame.copy()
    cache: dict[tuple, list] = {}
    added: dict[str, list] = {k: [] for k in (
        "ref_value", "ref_uncertainty", "ref_source", "ref_kind", "ref_effective_uncertainty", "abs_error",
        "rel_error", "ref_rel_uncertainty", "error_bar", "own_rel_error", "accuracy", "error_basis", "allowed",
        "tolerance_verdict", "within_tolerance", "within_error_bar")}
    for row in frame.to_dict("records"):
        energy, state = row.get("energy"), int(row.get("state", -1))
        ref = None
        if references is not None and energy is not None and state >= 0 and not _missing(energy):
            # a computed reference never grades the backend that produced it: ask per backend
            key = (row["problem_key"], row.get("backend") if graded else None)
            if key not in cache:
                try:
                    found = references(_problem(row), for_backend=key[1]) if graded else references(_problem(row))
                    cache[key] = list(found)
                except Exception:  # a reference lookup that fails must not hide the results
                    cache[key] = []
            ref = next((r for r in cache[key] if r.quantity == "energy" and r.state == state), None)
        bar = row.get("energy_error")
        if _missing(bar):
            bar = row.get("error_estimate")
        bar = None if _missing(bar) else float(bar)
        values: dict[str, Any] = dict.fromkeys(added)
        values["error_bar"] = bar
        if bar is not None and energy is not None and not _missing(energy) and energy:
            values["own_rel_error"] = bar / abs(float(energy))
        if ref is not None:
            diff = abs(float(energy) - ref.value)
            scale = abs(ref.value) or 1.0
            allowed = tolerance("energy", row.get("backend")).allowed(ref.value)
            uncertainty = max(ref.uncertainty, EXACT_EVALUATION * abs(ref.value)) + ROUNDING * abs(ref.value)
            verdict = judge(diff, uncertainty, bar, allowed)
            values.update(
                ref_value=ref.value, ref_uncertainty=ref.uncertainty, ref_source=ref.source, ref_kind=ref.kind,
                ref_effective_uncertainty=uncertainty, abs_error=diff, rel_error=diff / scale,
                ref_rel_uncertainty=uncertainty / scale, accuracy=(diff + uncertainty) / scale, error_basis="reference",
                allowed=allowed, tolerance_verdict=verdict.status,
                within_tolerance=None if verdict.status == UNVERIFIED else verdict.reached,
                within_error_bar=None if bar is None else diff <= bar + uncertainty,
            )
        elif bar is not None:
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


def ranking_error(frame: pd.DataFrame) -> pd.Series:
    """The error to rank runs by (not a verdict): the measured bound where a reference exists, else the own error bar."""
    return pd.to_numeric(frame["accuracy"], errors="coerce").fillna(pd.to_numeric(frame["own_rel_error"], errors="coerce"))


# ----------------------------------------------------------------------------- tables


def agreement_table(frame: pd.DataFrame) -> pd.DataFrame:
    """Each successful result next to its reference (rows without a reference keep empty cells)."""
    ok = frame[frame["status"] == "ok"]
    columns = ["problem_name", "g", "backend", "params_text", "state", "energy", "error_bar", "ref_value",
               "ref_uncertainty", "abs_error", "rel_error", "allowed", "tolerance_verdict", "within_tolerance",
               "within_error_bar", "ref_kind", "ref_source"]
    return ok[columns].rename(columns={"params_text": "params"}).reset_index(drop=True)


ACCURACY_VS_COST_COLUMNS = ["problem_name", "g", "backend", "target", "verdict", "params", "accuracy", "own_error",
                            "ref_rel_uncertainty", "error_basis", "cpu_s", "wall_s", "peak_mib"]


def _smallest(values: pd.Series):
    values = values.dropna()
    return None if values.empty else float(values.min())


def accuracy_vs_cost_table(frame: pd.DataFrame, thresholds: Iterable[float] = THRESHOLDS) -> pd.DataFrame:
    """For each problem (and g), backend and threshold: the cheapest run that reached it (``verdicts.judge_frame``).

    When none reached it, the row says why: "unverified" (no reference ten times tighter than the
    threshold; ``own_error`` is the best own error bar), "not reached" (``accuracy`` the best
    measured bound) or "no error measure".
    """
    ok = successful_ground_states(frame)
    for column in ("accuracy", "own_rel_error", "ref_rel_uncertainty"):
        ok[column] = pd.to_numeric(ok[column], errors="coerce")
    thresholds = tuple(thresholds)
    for i, threshold in enumerate(thresholds):
        ok[f"_verdict{i}"] = judge_frame(ok, threshold)
    rows = []
    for (name, g, backend), group in ok.groupby(["problem_name", "g", "backend"], sort=False):
        best = {"accuracy": _smallest(group["accuracy"]), "own_error": _smallest(group["own_rel_error"]),
                "ref_rel_uncertainty": _smallest(group["ref_rel_uncertainty"])}
        for i, threshold in enumerate(thresholds):
            status = group[f"_verdict{i}"]
            row = {"problem_name": name, "g": g, "backend": backend, "target": threshold, **best}
            if (status == REACHED).any():
                reached = group[status == REACHED]
                pick = reached.loc[reached["cost_cpu_s"].idxmin()]
                row.update(verdict=REACHED, params=pick["params_text"], accuracy=pick["accuracy"],
                           own_error=pick["own_rel_error"], error_basis=pick["error_basis"], cpu_s=pick["cost_cpu_s"],
                           wall_s=pick["solve_wall_s"], peak_mib=pick["peak_mib"])
            elif (status == UNVERIFIED).any():
                row.update(verdict=UNVERIFIED, params="unverified: no reference within a tenth of the target")
            elif (status == MISSED).any():
                row.update(verdict=MISSED, params="not reached")
            else:
                row.update(verdict="no measure", params="no error measure (no reference, no error bar)")
            rows.append(row)
    return pd.DataFrame(rows, columns=ACCURACY_VS_COST_COLUMNS)


COST_VS_N_COLUMNS = ["backend", "n", "accuracy", "problems_reached", "problems_unverified", "cpu_s", "peak_mib",
                     "cpu_s_own_bar", "peak_mib_own_bar"]


def cost_vs_particle_number_table(frame: pd.DataFrame, accuracy: float = COST_VS_N_ACCURACY) -> pd.DataFrame:
    """Per backend and particle number N: the cheapest cost reaching ``accuracy``, over the problems with that N.

    ``cpu_s`` is the largest over problems of each problem's cheapest run that reached the accuracy
    (``verdicts``; the cost to expect for any of them), ``peak_mib`` likewise; ``problems_reached``
    counts how many of the measured problems with that N reached it, ``problems_unverified`` how
    many could not be judged (no reference ten times tighter than ``accuracy``). For those,
    ``cpu_s_own_bar`` / ``peak_mib_own_bar`` are the same cost taken over runs whose *own* relative error
    bar is within ``accuracy``: what the method costs where nothing can check it (never a verdict).
    """
    ok = successful_ground_states(frame)
    ok["n"] = ok["n_up"] + ok["n_down"]
    ok["verdict"] = judge_frame(ok, accuracy)
    rows = []
    for (backend, n), group in ok.groupby(["backend", "n"]):
        cheapest, cheapest_own, reached, unverified, total = [], [], 0, 0, 0  # per problem: its cheapest run
        for _, problem_rows in group.groupby("problem_key"):
            total += 1
            good = problem_rows[problem_rows["verdict"] == REACHED]
            if good.empty:
                open_rows = problem_rows[problem_rows["verdict"] == UNVERIFIED]
                unverified += int(not open_rows.empty)
                own = pd.to_numeric(open_rows["own_rel_error"], errors="coerce")
                small_bar = open_rows[own.abs() <= accuracy]
                if not small_bar.empty:
                    cheapest_own.append(small_bar.loc[small_bar["cost_cpu_s"].idxmin()])
                continue
            reached += 1
            cheapest.append(good.loc[good["cost_cpu_s"].idxmin()])

        def largest(picks: list, column: str):
            return max(pick[column] for pick in picks) if picks else None

        rows.append({"backend": backend, "n": int(n), "accuracy": accuracy, "problems_reached": f"{reached}/{total}",
                     "problems_unverified": f"{unverified}/{total}",
                     "cpu_s": largest(cheapest, "cost_cpu_s"), "peak_mib": largest(cheapest, "peak_mib"),
                     "cpu_s_own_bar": largest(cheapest_own, "cost_cpu_s"),
                     "peak_mib_own_bar": largest(cheapest_own, "peak_mib")})
    return pd.DataFrame(rows, columns=COST_VS_N_COLUMNS)


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
        "calibration": error_bar_calibration(frame[frame["status"] == "ok"]),
        "failures": failures_table(frame),
    }


TITLES = {
    "agreement": "Agreement with reference values",
    "accuracy_vs_cost": "Accuracy against cost (cheapest parameters reaching each relative error)",
    "cost_vs_n": f"Cost against particle number (relative error {COST_VS_N_ACCURACY:g})",
    "calibration": "Error-bar calibration (share of |E - ref| within 2 error bars)",
    "failures": "Tasks that did not succeed",
}


def accuracy_vs_cost_summary(table: pd.DataFrame) -> pd.DataFrame:
    """The accuracy-vs-cost table folded to one row per problem and backend, one column per target.

    Each cell reads ``params; CPU s; MiB`` for the cheapest run reaching that relative error, else
    why none did ("unverified (own error bar x)", "not reached (best x)").
    """
    if table.empty:
        return pd.DataFrame(columns=["problem_name", "g", "backend"])
    rows = []
    for (name, g, backend), group in table.groupby(["problem_name", "g", "backend"], sort=False):
        row = {"problem_name": name, "g": g, "backend": backend}
        for record in group.to_dict("records"):
            if record["verdict"] == REACHED:
                cell = f"{record['params']}; {record['cpu_s']:.3g} s; {record['peak_mib']:.0f} MiB"
            elif record["verdict"] == UNVERIFIED:
                own = record["own_error"]
                cell = "unverified" + ("" if own is None or pd.isna(own) else f" (own error bar {own:.2g})")
            elif record["verdict"] == MISSED:
                cell = f"not reached (best {record['accuracy']:.2g})"
            else:
                cell = record["params"]
            row[f"{record['target']:g}"] = cell
        rows.append(row)
    return pd.DataFrame(rows)


def agreement_with_footnotes(table: pd.DataFrame, ground_state_only: bool = True) -> tuple[pd.DataFrame, list[str]]:
    """Rows with a reference (ground states only by default), sources as footnote numbers; returns (table, sources)."""
    shown = table[table["ref_value"].notna()]
    if ground_state_only:
        shown = shown[shown["state"] == 0]
    shown = shown.drop(columns=["state", "allowed", "ref_kind", "within_tolerance"]).copy()
    sources = list(dict.fromkeys(shown["ref_source"]))
    shown["ref_source"] = [f"[{sources.index(s) + 1}]" for s in shown["ref_source"]]
    return shown.rename(columns={"ref_source": "source", "ref_uncertainty": "ref_unc",
                                 "tolerance_verdict": "vs tolerance"}), sources


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
    parts.append(f"## {TITLES['calibration']}\n\n{to_markdown(tables['calibration'])}")
    if not tables["failures"].empty:
        parts.append(f"## {TITLES['failures']}\n\n{to_markdown(tables['failures'])}")
    return "\n\n".join(parts) + "\n"


def write_tables(frame: pd.DataFrame, folder: str | Path, suite=None, references: Callable | None = None,
                 formats: Iterable[str] = ("md", "csv", "html"), plots: bool = True) -> list[Path]:
    """Write every table in each format, and one PNG of error against CPU time per problem; returns the paths.

    Markdown and HTML come from the report's document renderers (``report.document``), the figures
    from ``report.figures.error_vs_cost``.
    """
    from .report.document import Document, Table, render_html, render_markdown

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    written = []
    for name, table in suite_tables(frame, suite, references).items():
        document = Document(TITLES[name], [Table(table)])
        for fmt in formats:
            path = folder / f"{name}.{fmt}"
            if fmt == "md":
                path.write_text(render_markdown(document), encoding="utf-8")
            elif fmt == "csv":
                table.to_csv(path, index=False)
            elif fmt == "html":
                path.write_text(render_html(document, folder), encoding="utf-8")
            else:
                from ..problems.errors import SpecError

                raise SpecError("formats", f"got '{fmt}'; choose among md, csv and html")
            written.append(path)
    if plots:
        from .report.figures import error_vs_cost, file_stem

        with_refs = attach_references(frame, references, suite.tolerance if suite is not None else None)
        for name in sorted(set(with_refs.loc[with_refs["status"] == "ok", "problem_name"])):
            figure = error_vs_cost.draw(error_vs_cost.select(with_refs, problem_name=name), name)
            path = folder / f"error_vs_cost_{file_stem(name)}.png"
            figure.savefig(path, dpi=error_vs_cost.DPI)
            written.append(path)
    return written
