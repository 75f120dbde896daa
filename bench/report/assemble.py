"""Assemble the report from the store: sections in order, figures saved, Markdown/HTML/CSV written.

Sections: the method map, error-bar calibration, the reference dataset's coverage, agreement with every
reference (one table per source, with its citation), accuracy against cost, cost against particle number, the physics
figures, failed tasks, and the machine, library versions and git commit recorded with the runs.
Every judgement of accuracy follows ``bench.verdicts``.
"""

from __future__ import annotations

import datetime as _dt
import json
from collections import Counter
from collections.abc import Collection, Mapping
from pathlib import Path

import pandas as pd

from ...backends.provenance import library_version, source_revision
from ...backends.provenance import machine as host_machine
from ..advisor import graded_frame
from ..tables import accuracy_vs_cost_table, cost_vs_particle_number_table, failures_table
from ..verdicts import COVERAGE_TARGET, REFERENCE_MARGIN
from . import analysis
from .analysis import MAP_TARGETS, SCALING_ACCURACY, SCALING_MAX_STATES, target_label
from .document import Document, Heading, Paragraph, Table, render_html, render_markdown
from .figures import cost_scaling, densities, error_vs_cost, file_stem, mass_scan, noise, odd_even, spectra

MAX_COST_FIGURES = 24
FIGURE_DPI = 100


def _save(figure, folder: Path, name: str) -> Path:
    relative = Path("figures") / f"{name}.png"
    figure.savefig(folder / relative, dpi=FIGURE_DPI)
    return relative


def _targets_text(targets=MAP_TARGETS) -> str:
    return ", ".join(target_label(t) for t in targets)


def coverage_text(frame: pd.DataFrame, task_keys: Collection[str] | None, command: str | None) -> str:
    """How much of the suites the store holds: a report of a partial sweep says so, with the way to finish it.
    ``task_keys`` may map each key to its backend; the missing tasks are then counted per backend."""
    if task_keys is None:
        return ""
    stored = set(frame["task_key"])
    missing = [key for key in task_keys if key not in stored]
    if not missing:
        return f" The store holds every one of the suites' {len(task_keys)} tasks."
    whose = ""
    if isinstance(task_keys, Mapping):
        counts = Counter(task_keys[key] for key in missing)
        whose = " (" + ", ".join(f"{backend} {n}" for backend, n in sorted(counts.items())) + ")"
    finish = f" (`{command}` without `--from-store` runs them; stored results are kept)" if command else ""
    return (f" **Partial: {len(missing)} of the suites' {len(task_keys)} tasks{whose} have not been run yet{finish};"
            " every table below covers only the stored ones.**")


def introduction(frame: pd.DataFrame, store, command: str | None, task_keys: Collection[str] | None = None) -> Paragraph:
    statuses = frame.drop_duplicates("task_key")["status"].value_counts()
    return Paragraph(
        f"Generated {_dt.datetime.now(_dt.UTC).strftime('%Y-%m-%d %H:%M UTC')} from the results store"
        f" `{store.path.name}`: {frame['task_key'].nunique()} tasks ("
        + ", ".join(f"{n} {s}" for s, n in statuses.items()) + "). Every number below comes from the store."
        " Units: hbar = omega = m0 = 1; energies in hbar omega, g in sqrt(hbar^3 omega/m0), lengths in"
        " sqrt(hbar/(m0 omega)), momenta in sqrt(hbar m0 omega). A result counts as reaching a relative error only"
        f" against a reference whose uncertainty is at most 1/{REFERENCE_MARGIN:g} of that error; otherwise it is"
        " *unverified*, shown with its own error bar, and reaches nothing. Cost is the CPU time of the solve."
        + (f" Regenerate with `{command}`." if command else "") + coverage_text(frame, task_keys, command))


def method_map_section(document: Document, frame: pd.DataFrame) -> None:
    document.add(Heading(2, "Method map"), Table(
        analysis.method_map(frame),
        "One row per particle number, mass ratio m_up/m_down, g regime (attractive g < 0, g = 0, weak 0 < g <= 3,"
        f" strong g > 3: the advisor's) and relative-error target ({_targets_text()}) in the ground-state energy:"
        " the backend that reached the target on the most stored problems of the group, the cheaper on ties, with"
        " 'k of M' when not on all; its CPU time is the largest over those problems of its cheapest qualifying run,"
        " its memory the peak of those runs; then the runner-up by the same ranking, the backends whose results"
        f" are unverified there (no reference within 1/{REFERENCE_MARGIN:g} of the target), and those whose"
        f" error bars cover |E - ref| at 2 sigma in fewer than {100 * COVERAGE_TARGET:.0f} % of the checked results.",
        "method_map"))


def calibration_section(document: Document, frame: pd.DataFrame) -> None:
    document.add(Heading(2, "Error-bar calibration"), Table(
        analysis.calibration(frame),
        "Per backend and particle number, over every stored level with an error bar and a reference: 'checked'"
        f" counts those whose reference uncertainty is at most 1/{REFERENCE_MARGIN:g} of twice the error bar;"
        " 'coverage at 2 sigma' is the share of them with |E - ref| <= 2 error bars and 'median bar/abs(E - ref)' how"
        f" wide the bars are (inf: |E - ref| = 0). Flagged below {100 * COVERAGE_TARGET:.0f} %: error bars too narrow.",
        "calibration"))
    conflicts = analysis.dataset_disagreements()
    if not conflicts.empty:
        document.add(Table(
            conflicts,
            "Levels of the reference dataset where two method families differ by more than the sum of their error bars"
            " ('sigmas': the gap in units of that sum). At each, at least one of the two bars misses the truth; such a"
            " level grades neither method, so the coverage above, measured on agreed levels, cannot count it.",
            "dataset_disagreements"))
    stored = analysis.stored_disagreements(frame)
    if not stored.empty:
        document.add(Table(
            stored,
            "Levels of the results in this report where two method families differ by more than the sum of their error"
            " bars (the dataset's agreement rule applied to the stored runs; 'sigmas' as above). Such a level has no"
            " reference here, so the coverage above cannot count it either.",
            "stored_disagreements"))


def dataset_section(document: Document) -> None:
    from ...problems import dataset

    shipped = dataset.load()
    document.add(Heading(2, "Reference dataset"), Table(
        analysis.dataset_status(),
        f"The reference dataset v{shipped.version} shipped with the package ({dataset.SOURCE}; rule: {shipped.rule})"
        " per configuration: grid points (mass ratios x g) measured, levels published (N = 3 by the precision method,"
        " N >= 4 where two method families agree) or open (one family only, or a disagreement), and the relative"
        " uncertainty of the published levels (uncertainty / max(|E|, 1)) against the goal for that particle number."
        " A precision level is checked by another method family where one measured it: 'checks within 2 bars' counts"
        " those whose gap is at most twice the sum of the two bars; such a check also grades the precision method.",
        "dataset_status"))


def agreement_section(document: Document, frame: pd.DataFrame) -> None:
    document.add(Heading(2, "Agreement with reference values"))
    by_source = analysis.agreement_by_source(frame)
    if not by_source:
        document.add(Paragraph("*No stored result has a reference value.*"))
    for i, (source, table) in enumerate(by_source, start=1):
        counts = table["verdict"].value_counts()
        short = source.split(":")[0].split(",")[0].split(" (")[0]
        document.add(Heading(3, f"[{i}] {short}"),
                     Paragraph(f"Source: {source}. Of {len(table)} rows, {counts.get('reached', 0)} agree within the"
                               f" suite tolerance, {counts.get('missed', 0)} do not, {counts.get('unverified', 0)} are"
                               f" unverified (reference uncertainty above 1/{REFERENCE_MARGIN:g} of the tolerance)."),
                     Table(table, "One row per problem, level and backend: its most converged (costliest) run;"
                           " 'runs agreeing' counts all its runs that reached the suite tolerance.", f"agreement_{i}"))
    slopes = analysis.slope_agreement(frame)
    if not slopes.empty:
        document.add(Heading(3, "Slope at g = 0"),
                     Table(slopes.drop(columns="source"), "The stored ⟨sum delta(x_up - x_down)⟩ = dE/dg at g = 0 against"
                           " the first-order coefficient c1 = sum_ij int phi_i^2 phi_j^2 dx (source: "
                           + slopes["source"].iloc[0] + ").", "slope_g0"))


def accuracy_section(document: Document, frame: pd.DataFrame, folder: Path) -> None:
    document.add(Heading(2, "Accuracy against cost"))
    problems = analysis.cost_problems(frame)
    document.attachments["accuracy_vs_cost_all"] = accuracy_vs_cost_table(frame, thresholds=MAP_TARGETS)
    if not problems:
        document.add(Paragraph("*No problem was measured at two or more parameter sets of one backend: no trade-off"
                               " curves to draw. Give a backend a `ladder` or `grid` in the suite.*"))
        return
    document.add(Table(accuracy_vs_cost_table(frame[frame["problem_key"].isin(problems)], thresholds=MAP_TARGETS),
                       "For each problem measured at several parameter sets, g and backend: the cheapest stored"
                       " parameters reaching each relative error (CPU and wall time of the solve, peak memory of the"
                       " task), or why none did. Every problem: tables/accuracy_vs_cost_all.csv.", "accuracy_vs_cost"))
    for key in problems[:MAX_COST_FIGURES]:
        rows = error_vs_cost.select(frame, problem_key=key)
        name, g = rows["problem_name"].iloc[0], rows["g"].iloc[0]
        path = _save(error_vs_cost.draw(rows, f"{name} (g = {g:g})", MAP_TARGETS), folder,
                     f"cost_{file_stem(str(name))}_g{g:g}_{key[:6]}")
        document.add(document.picture(path, error_vs_cost.caption(str(name), float(g), MAP_TARGETS)))
    if len(problems) > MAX_COST_FIGURES:
        document.add(Paragraph(f"*{len(problems) - MAX_COST_FIGURES} more problems are in the table above only.*"))


def scaling_section(document: Document, frame: pd.DataFrame, folder: Path) -> None:
    document.add(Heading(2, "Cost against particle number"))
    scaling = cost_vs_particle_number_table(frame[analysis.benchmark_rows(frame)], accuracy=SCALING_ACCURACY)
    document.add(Table(scaling, f"Per backend and N: the cheapest stored run reaching relative error"
                       f" {target_label(SCALING_ACCURACY)}, the largest over the problems with that N; 'problems_unverified'"
                       f" counts problems without a reference within 1/{REFERENCE_MARGIN:g} of it; for those, the '_own_bar' columns"
                       " give the same cost over runs whose own error bar is within the target (unverified). Only problems asking"
                       f" for at most {SCALING_MAX_STATES} levels and no observables count (the figures' problems ask"
                       " for more, which costs more at any N).", "cost_vs_n"))
    reached = cost_scaling.select(scaling)
    if reached.empty:
        document.add(Paragraph(f"*No backend reached {target_label(SCALING_ACCURACY)} on any stored problem: nothing"
                               " to draw.*"))
        return
    path = _save(cost_scaling.draw(reached, SCALING_ACCURACY), folder, "cost_vs_particle_number")
    document.add(document.picture(path, cost_scaling.caption(SCALING_ACCURACY)))


def physics_section(document: Document, frame: pd.DataFrame, store, folder: Path) -> None:
    document.add(Heading(2, "Physics"))
    outcomes = [spectra.build(frame), mass_scan.build(frame), densities.build(frame, store), noise.build_maps(frame, store),
                noise.build_integral(frame), odd_even.build(frame)]
    for outcome in outcomes:
        document.add(Heading(3, outcome.title))
        if outcome.missing:
            document.add(Paragraph(f"*{outcome.missing}*"))
            continue
        document.add(document.picture(_save(outcome.figure, folder, outcome.key), outcome.caption))
        if outcome.table is not None:
            document.add(Table(outcome.table, "The numbers drawn above.", outcome.key))


def failures_section(document: Document, frame: pd.DataFrame) -> None:
    failures = failures_table(frame)
    document.add(Heading(2, "Tasks that did not succeed"))
    if failures.empty:
        document.add(Paragraph("Every task succeeded."))
    else:
        document.add(Table(failures, "Status and first line of the error of each task that did not succeed.", "failures"))


def machine_table(store, task_keys: Collection[str] | None) -> pd.DataFrame:
    """The runs that produced the results shown: host, CPU, cores, git commit, library versions."""
    runs = store.runs_frame()
    tasks = store.tasks_frame()
    if task_keys is not None:
        tasks = tasks[tasks["task_key"].isin(task_keys)]
    runs = runs[runs["run_id"].isin(set(tasks["run_id"].dropna().astype(int)))]
    rows = []
    for r in runs.to_dict("records"):
        versions = json.loads(r["versions"]) if isinstance(r["versions"], str) else {}
        dirty = "" if r["git_dirty"] is None or pd.isna(r["git_dirty"]) else (" (modified tree)" if r["git_dirty"] else "")
        rows.append({"run": int(r["run_id"]), "suite": r["suite"], "started (UTC)": r["started_utc"],
                     "host": r["host"], "CPU": r["cpu"], "cores": r["cores"],
                     "git commit": f"{(r['git_commit'] or '?')[:12]}{dirty}",
                     "results used": int((tasks["run_id"] == r["run_id"]).sum()),
                     "versions": ", ".join(f"{k} {v}" for k, v in versions.items() if v)})
    return pd.DataFrame(rows)


def provenance_section(document: Document, store, task_keys: Collection[str] | None) -> None:
    document.add(Heading(2, "Machine, library versions and source revision"),
                 Table(machine_table(store, task_keys), "The sweeps whose results this report shows (recorded by the"
                       " store with each run).", "machine"))
    here, git = host_machine(), source_revision()
    commit = (git["commit"] or "unknown")[:12] + (" (modified tree)" if git["dirty"] else "")
    document.add(Paragraph(f"This report was written on {here['host']} ({here['cpu']}, {here['cores']} cores,"
                           f" {here['system']}, Python {here['python']}) by trapbench {library_version('trapbench')}"
                           f" at commit `{commit}` with pandas {library_version('pandas')} and matplotlib"
                           f" {library_version('matplotlib')}."))


def build_document(store, folder: Path, suite=None, task_keys: Collection[str] | None = None,
                   title: str | None = None, command: str | None = None) -> Document:
    """Compose the report, writing its figures into ``folder/figures``.

    ``suite`` supplies the tolerances (and the title unless ``title`` is given); ``task_keys`` limits
    the report to those tasks (None: every stored result; a mapping key -> backend lets a partial report say
    whose tasks are missing); ``command`` is the command line that regenerates the report, quoted at its top.
    """
    raw = store.results_frame(keys=list(task_keys) if task_keys is not None else None)
    document = Document(f"trapbench report: {title or (suite.name if suite is not None else 'all stored results')}")
    (folder / "figures").mkdir(parents=True, exist_ok=True)
    if raw.empty:
        document.add(Paragraph("The store holds no results for this suite: run `trapbench report` without"
                               " `--from-store`, or `trapbench sweep` first."))
        return document
    # graded per backend: a method is never graded by a reference it produced (advisor.graded_frame)
    frame = graded_frame(raw, tolerance=suite.tolerance if suite is not None else None)
    document.add(introduction(frame, store, command, task_keys))
    method_map_section(document, frame)
    calibration_section(document, frame)
    dataset_section(document)
    agreement_section(document, frame)
    accuracy_section(document, frame, folder)
    scaling_section(document, frame, folder)
    physics_section(document, frame, store, folder)
    failures_section(document, frame)
    provenance_section(document, store, task_keys)
    return document


def _clear(folder: Path, pattern: str) -> None:
    if folder.is_dir():
        for old in folder.glob(pattern):
            old.unlink()


def write_report(store, output: str | Path, suite=None, task_keys: Collection[str] | None = None,
                 title: str | None = None, command: str | None = None) -> list[Path]:
    """Write report.md, report.html, figures/*.png and tables/*.csv into ``output``; returns the paths."""
    folder = Path(output)
    folder.mkdir(parents=True, exist_ok=True)
    _clear(folder / "figures", "*.png")
    document = build_document(store, folder, suite, task_keys, title, command)
    written = [folder / p.path for p in document.pictures()]
    (folder / "tables").mkdir(exist_ok=True)
    _clear(folder / "tables", "*.csv")
    for name, table in document.tables().items():
        path = folder / "tables" / f"{name}.csv"
        table.to_csv(path, index=False)
        written.append(path)
    markdown = folder / "report.md"
    markdown.write_text(render_markdown(document), encoding="utf-8")
    page = folder / "report.html"
    page.write_text(render_html(document, folder), encoding="utf-8")
    return [markdown, page, *written]
