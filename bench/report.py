"""The generated report: Markdown and self-contained HTML with tables and figures, from the store only.

``write_report(store, output, suite=None)`` reads every stored result (or, with a suite, those of
its tasks), attaches the reference values (``tables.attach_references``) and writes

- ``output/report.md``: the Markdown report, figures linked from ``figures/``;
- ``output/report.html``: the same content with the figures embedded (base64 PNG), one file to share;
- ``output/figures/*.png`` and ``output/tables/*.csv`` (the numbers behind each table and figure).

Sections: the method map (cheapest backend reaching 1e-3 and 1e-5 relative error of the ground-state
energy, per particle number and mass ratio), agreement with every reference (one table per source,
with its citation), accuracy against cost (wall time and peak memory, one line per backend), cost
against particle number, the physics figures (``report_figures``), failed tasks, and the machine,
library versions and git commit recorded with the runs. Relative errors are against a reference
where one exists, else the backend's own error bar over |E| (the tables say which). Cost is the CPU
time of the solve unless a column says wall time; peak memory is the task process's resident peak,
which includes the libraries preloaded by the runner (the same few tens of MiB for every task).
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..backends.provenance import library_version, source_revision
from ..backends.provenance import machine as host_machine
from . import report_figures
from .report_figures import mass_ratio, ratio_text
from .tables import (accuracy_vs_cost_table, attach_references, cost_vs_particle_number_table, failures_table,
                     format_value, successful_ground_states, to_markdown)

MAP_TARGETS = (1e-3, 1e-5)
SCALING_ACCURACY = 1e-3
SCALING_MAX_STATES = 4
MAX_COST_FIGURES = 24
FIGURE_DPI = 100


# ----------------------------------------------------------------------------- document blocks


@dataclass
class Heading:
    level: int
    text: str


@dataclass
class Paragraph:
    text: str  # Markdown inline: `code` and *emphasis* only


@dataclass
class Table:
    frame: pd.DataFrame
    caption: str = ""
    csv_name: str | None = None


@dataclass
class Picture:
    path: Path  # relative to the report folder
    caption: str
    number: int = 0


@dataclass
class Document:
    title: str
    blocks: list = field(default_factory=list)
    figures: int = 0

    def add(self, *blocks) -> None:
        self.blocks.extend(blocks)


def _inline_html(text: str) -> str:
    escaped = html.escape(text, quote=False)
    escaped = re.sub(r"`([^`]+)`", r"<code>\1</code>", escaped)
    return re.sub(r"\*([^*]+)\*", r"<em>\1</em>", escaped)


def render_markdown(document: Document) -> str:
    lines = [f"# {document.title}", ""]
    for block in document.blocks:
        if isinstance(block, Heading):
            lines += ["#" * block.level + " " + block.text, ""]
        elif isinstance(block, Paragraph):
            lines += [block.text, ""]
        elif isinstance(block, Table):
            if block.caption:
                lines += [f"*{block.caption}*", ""]
            lines += [to_markdown(block.frame), ""]
        elif isinstance(block, Picture):
            lines += [f"![Figure {block.number}]({block.path.as_posix()})", "",
                      f"*Figure {block.number}: {block.caption}*", ""]
    return "\n".join(lines)


HTML_STYLE = """
body { font-family: system-ui, sans-serif; max-width: 75em; margin: 2em auto; padding: 0 1em; line-height: 1.45; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.5em 0 1.5em; }
th, td { border: 1px solid #bbb; padding: 0.2em 0.5em; text-align: right; }
th { background: #eee; }
figure { margin: 1em 0 2em; }
figure img { max-width: 100%; }
figcaption, .caption { font-size: 0.9em; color: #333; }
code { background: #f3f3f3; padding: 0 0.2em; }
"""


def render_html(document: Document, folder: Path) -> str:
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             f"<title>{html.escape(document.title)}</title><style>{HTML_STYLE}</style></head><body>",
             f"<h1>{html.escape(document.title)}</h1>"]
    for block in document.blocks:
        if isinstance(block, Heading):
            parts.append(f"<h{block.level}>{html.escape(block.text)}</h{block.level}>")
        elif isinstance(block, Paragraph):
            parts.append(f"<p>{_inline_html(block.text)}</p>")
        elif isinstance(block, Table):
            if block.caption:
                parts.append(f'<p class="caption"><em>{_inline_html(block.caption)}</em></p>')
            parts.append(_table_html(block.frame))
        elif isinstance(block, Picture):
            data = base64.b64encode((folder / block.path).read_bytes()).decode("ascii")
            parts.append(f'<figure><img alt="Figure {block.number}" src="data:image/png;base64,{data}">'
                         f"<figcaption>Figure {block.number}: {_inline_html(block.caption)}</figcaption></figure>")
    parts.append("</body></html>")
    return "\n".join(parts)


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_-]+", "_", text).strip("_") or "problem"


def _table_html(frame: pd.DataFrame) -> str:
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in frame.columns)
    body = "".join("<tr>" + "".join(f"<td>{html.escape(format_value(v))}</td>" for v in row) + "</tr>"
                   for row in frame.itertuples(index=False))
    if not body:
        body = f'<tr><td colspan="{max(len(frame.columns), 1)}">(no rows)</td></tr>'
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


# ----------------------------------------------------------------------------- tables of the report


def method_map(frame: pd.DataFrame, targets: tuple[float, ...] = MAP_TARGETS) -> pd.DataFrame:
    """The backend to use for each relative error, per particle number N and mass ratio m_up/m_down.

    For each backend and single-g problem of the group, the cheapest stored run (solve CPU time) whose
    ground-state relative error is <= the target. The backend named is the one that reached the target
    on the most problems of the group (ties: the cheaper), "k of M" saying how many when not all; its
    cost is the largest over those problems of the cheapest qualifying run. The other backends that
    reached the target are listed with their counts.
    """
    ok = successful_ground_states(frame)
    if ok.empty:
        return pd.DataFrame(columns=["N", "N_up+N_down", "mass ratio", "problems"])
    ok = ok.assign(n=ok["n_up"] + ok["n_down"], ratio=[mass_ratio(r) for r in ok.to_dict("records")])
    rows = []
    for (n, ratio), group in ok.groupby(["n", "ratio"]):
        total = group["problem_key"].nunique()
        row = {"N": int(n), "N_up+N_down": ", ".join(sorted({f"{a}+{b}" for a, b in zip(group["n_up"], group["n_down"])})),
               "mass ratio": ratio_text(float(ratio)), "problems": total}
        for target in targets:
            reaching = []
            for backend, runs in group.groupby("backend"):
                good = runs[pd.to_numeric(runs["accuracy"], errors="coerce") <= target]
                if not good.empty:
                    cost = good.groupby("problem_key")["cost_cpu_s"].min().max()
                    reaching.append((-good["problem_key"].nunique(), cost, backend))
            reaching.sort()
            label = f"{target:.0e}"

            def named(entry) -> str:
                count = -entry[0]
                return entry[2] + ("" if count == total else f" ({count} of {total})")

            row[f"backend at {label}"] = named(reaching[0]) if reaching else "none"
            row[f"CPU s at {label}"] = reaching[0][1] if reaching else None
            row[f"also reaching {label}"] = ", ".join(named(e) for e in reaching[1:])
        rows.append(row)
    return pd.DataFrame(rows)


def agreement_by_source(frame: pd.DataFrame) -> list[tuple[str, pd.DataFrame]]:
    """One table per reference source: each stored energy with a reference, the most converged run per backend.

    Per single-g problem, level and backend the costliest run (the most converged parameters) is shown,
    with the count of runs and how many of them agree within the suite tolerance.
    """
    ok = frame[(frame["status"] == "ok") & frame["ref_value"].notna()].copy()
    if ok.empty:
        return []
    ok["_cost"] = pd.to_numeric(ok["solve_cpu_s"], errors="coerce").fillna(0.0)
    out = []
    for source, rows in ok.groupby("ref_source", sort=False):
        picked = []
        for _, runs in rows.groupby(["problem_key", "state", "backend"], sort=False):
            last = runs.sort_values("_cost").iloc[-1]
            record = {"problem": last["problem_name"], "g": last["g"], "state": int(last["state"]),
                      "backend": last["backend"], "params": last["params_text"], "energy": last["energy"],
                      "error bar": last["error_bar"], "reference": last["ref_value"], "kind": last["ref_kind"],
                      "abs(E - ref)": last["abs_error"], "within tolerance": bool(last["within_tolerance"]),
                      "within error bar": last["within_error_bar"],
                      "runs agreeing": f"{int(runs['within_tolerance'].astype(bool).sum())}/{len(runs)}"}
            picked.append(record)
        out.append((str(source), pd.DataFrame(picked)))
    return out


def slope_agreement(frame: pd.DataFrame) -> pd.DataFrame:
    """dE0/dg at g = 0 (the stored scalar ``delta``, Hellmann-Feynman) against first-order perturbation theory."""
    from ..problems.references import FIRST_ORDER_SOURCE, first_order_slope
    from ..problems.spec import Problem

    column = "scalar.delta"
    if column not in frame:
        return pd.DataFrame()
    rows = []
    at_zero = frame[(frame["status"] == "ok") & (frame["state"] == 0) & (frame["g"] == 0.0) & frame[column].notna()]
    for r in at_zero.to_dict("records"):
        problem = Problem.from_dict(r["problem"])
        if not problem.trap.is_harmonic or problem.targets.parity != "any":
            continue
        reference = first_order_slope(problem)
        rows.append({"problem": r["problem_name"], "backend": r["backend"], "params": r["params_text"],
                     "⟨sum delta⟩ at g=0": r[column], "first-order c1": reference,
                     "abs(difference)": abs(r[column] - reference), "source": FIRST_ORDER_SOURCE})
    return pd.DataFrame(rows)


def machine_table(store, task_keys: set[str] | None) -> pd.DataFrame:
    """The runs that produced the results shown: host, CPU, cores, git commit, library versions."""
    runs = store.runs_frame()
    tasks = store.tasks_frame()
    if task_keys is not None:
        tasks = tasks[tasks["task_key"].isin(task_keys)]
    used = set(tasks["run_id"].dropna().astype(int))
    runs = runs[runs["run_id"].isin(used)]
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


# ----------------------------------------------------------------------------- cost figures


def plot_accuracy_vs_cost(frame: pd.DataFrame, problem_key: str):
    """Ground-state relative error against wall time (left) and peak memory (right), one line per backend."""
    from matplotlib.figure import Figure

    ok = successful_ground_states(frame)
    ok = ok[(ok["problem_key"] == problem_key) & ok["accuracy"].notna()].copy()
    ok["wall"] = pd.to_numeric(ok["solve_wall_s"], errors="coerce").fillna(pd.to_numeric(ok["wall_time_s"], errors="coerce"))
    figure = Figure(figsize=(10, 4.2), layout="constrained")
    left, right = figure.subplots(1, 2, sharey=True)
    for backend, group in ok.groupby("backend"):
        group = group.sort_values("wall")
        accuracy = np.maximum(group["accuracy"].to_numpy(float), 1e-16)
        basis = "reference" if (group["error_basis"] == "reference").all() else "own error bar"
        left.loglog(group["wall"].clip(lower=1e-5), accuracy, "o-", label=f"{backend} (vs {basis})")
        group = group.sort_values("peak_mib")
        right.semilogy(group["peak_mib"], np.maximum(group["accuracy"].to_numpy(float), 1e-16), "o-")
    for target in MAP_TARGETS:
        for ax in (left, right):
            ax.axhline(target, color="0.5", ls=":", lw=0.8)
    left.set_xlabel("wall time of the solve [s]")
    right.set_xlabel("peak resident memory of the task [MiB]")
    left.set_ylabel("relative error of the ground-state energy")
    for ax in (left, right):
        ax.grid(True, which="both", alpha=0.3)
    _plain_log_ticks(left.xaxis)
    left.legend(fontsize="small", loc="best")
    first = ok.iloc[0]
    figure.suptitle(f"{first['problem_name']} (g = {first['g']:g}): error against cost")
    return figure


def _plain_log_ticks(axis) -> None:
    """Label only the decades of a log axis (the default minor labels overlap on short ranges)."""
    from matplotlib.ticker import NullFormatter

    axis.set_minor_formatter(NullFormatter())


def cost_problems(frame: pd.DataFrame) -> list[str]:
    """Single-g problems where some backend was measured at two or more parameter sets (a trade-off curve)."""
    ok = successful_ground_states(frame)
    ok = ok[ok["accuracy"].notna()]
    counts = ok.groupby(["problem_key", "backend"])["params_text"].nunique()
    keys = sorted({k for (k, _), n in counts.items() if n >= 2})
    order = ok.drop_duplicates("problem_key").set_index("problem_key")
    return sorted(keys, key=lambda k: (int(order.loc[k, "n_up"] + order.loc[k, "n_down"]), str(order.loc[k, "problem_name"]),
                                       float(order.loc[k, "g"])))


def benchmark_rows(frame: pd.DataFrame) -> pd.Series:
    """True for rows whose problem asks for at most SCALING_MAX_STATES levels and no observables."""
    def plain(problem) -> bool:
        targets = problem.get("targets", {}) if isinstance(problem, dict) else {}
        return int(targets.get("states", 1)) <= SCALING_MAX_STATES and not targets.get("observables")

    return pd.Series([plain(p) for p in frame["problem"]], index=frame.index, dtype=bool)


def plot_cost_scaling(table: pd.DataFrame, accuracy: float):
    """CPU time and peak memory against N, per backend (cheapest run reaching ``accuracy``)."""
    from matplotlib.figure import Figure

    figure = Figure(figsize=(10, 4.2), layout="constrained")
    left, right = figure.subplots(1, 2)
    reached = table[table["cpu_s"].notna()]
    for backend, group in reached.groupby("backend"):
        group = group.sort_values("n")
        left.semilogy(group["n"], group["cpu_s"].clip(lower=1e-5), "o-", label=backend)
        right.semilogy(group["n"], group["peak_mib"], "o-", label=backend)
    left.set_ylabel("CPU time of the solve [s]")
    right.set_ylabel("peak resident memory of the task [MiB]")
    for ax in (left, right):
        ax.set_xlabel(r"particle number $N = N_\uparrow + N_\downarrow$")
        ax.xaxis.get_major_locator().set_params(integer=True)
        ax.grid(True, which="both", alpha=0.3)
    left.legend(fontsize="small")
    figure.suptitle(f"Cost of reaching relative error {accuracy:.0e} against particle number")
    return figure


# ----------------------------------------------------------------------------- assembly


def _save(figure, folder: Path, name: str) -> Path:
    relative = Path("figures") / f"{name}.png"
    figure.savefig(folder / relative, dpi=FIGURE_DPI)
    return relative


def _picture(document: Document, path: Path, caption: str) -> Picture:
    document.figures += 1
    return Picture(path, caption, document.figures)


def build_document(store, folder: Path, suite=None, task_keys: set[str] | None = None,
                   title: str | None = None, command: str | None = None) -> tuple[Document, dict]:
    """Compose the report (writing its figures into ``folder/figures``); returns it and its tables by name.

    ``suite`` supplies the tolerances (and the title unless ``title`` is given); ``task_keys`` limits
    the report to those tasks (None: every stored result); ``command`` is the command line that
    regenerates the report, quoted at its top.
    """
    keys = list(task_keys) if task_keys is not None else None
    raw = store.results_frame(keys=keys)
    suite_name = title or (suite.name if suite is not None else "all stored results")
    document = Document(f"trapbench report: {suite_name}")
    tables: dict[str, pd.DataFrame] = {}
    (folder / "figures").mkdir(parents=True, exist_ok=True)
    if raw.empty:
        document.add(Paragraph("The store holds no results for this suite: run `trapbench report` without"
                               " `--from-store`, or `trapbench sweep` first."))
        return document, tables
    frame = attach_references(raw, tolerance=suite.tolerance if suite is not None else None)
    statuses = frame.drop_duplicates("task_key")["status"].value_counts()
    document.add(Paragraph(
        f"Generated {_dt.datetime.now(_dt.UTC).strftime('%Y-%m-%d %H:%M UTC')} from the results store"
        f" `{store.path.name}`: {frame['task_key'].nunique()} tasks ("
        + ", ".join(f"{n} {s}" for s, n in statuses.items()) + "). Every number below comes from the store."
        " Units: hbar = omega = m0 = 1; energies in hbar omega, g in sqrt(hbar^3 omega/m0), lengths in"
        " sqrt(hbar/(m0 omega)), momenta in sqrt(hbar m0 omega). Relative errors are against a reference value"
        " where one exists, else the backend's own error bar over |E|; cost is the CPU time of the solve."
        + (f" Regenerate with `{command}`." if command else "")))

    document.add(Heading(2, "Method map"))
    tables["method_map"] = method_map(frame)
    document.add(Table(tables["method_map"], "For each particle number and mass ratio m_up/m_down: the backend that"
                       " reached a relative error of 1e-3 (and of 1e-5) in the ground-state energy on the most stored"
                       " problems of the group, the cheaper on ties, with 'k of M' when not on all; its CPU time is the"
                       " largest over those problems of the cheapest qualifying run. Other backends that reached the"
                       " target follow.", "method_map"))

    document.add(Heading(2, "Agreement with reference values"))
    by_source = agreement_by_source(frame)
    if not by_source:
        document.add(Paragraph("*No stored result has a reference value.*"))
    for i, (source, table) in enumerate(by_source, start=1):
        name = f"agreement_{i}"
        tables[name] = table
        within = int(table["within tolerance"].sum())
        short = source.split(":")[0].split(",")[0].split(" (")[0]
        document.add(Heading(3, f"[{i}] {short}"),
                     Paragraph(f"Source: {source}. {within} of {len(table)} rows agree within the suite tolerance."),
                     Table(table, "One row per problem, level and backend: its most converged (costliest) run;"
                           " 'runs agreeing' counts all its runs within the suite tolerance.", name))
    slopes = slope_agreement(frame)
    if not slopes.empty:
        tables["slope_g0"] = slopes
        document.add(Heading(3, "Slope at g = 0"),
                     Table(slopes.drop(columns="source"), "The stored ⟨sum delta(x_up - x_down)⟩ = dE/dg at g = 0 against"
                           " the first-order coefficient c1 = sum_ij int phi_i^2 phi_j^2 dx (source: "
                           + slopes["source"].iloc[0] + ").", "slope_g0"))

    document.add(Heading(2, "Accuracy against cost"))
    problems = cost_problems(frame)
    accuracy_table = accuracy_vs_cost_table(frame, thresholds=MAP_TARGETS)
    tables["accuracy_vs_cost_all"] = accuracy_table
    if problems:
        ladders = accuracy_vs_cost_table(frame[frame["problem_key"].isin(problems)], thresholds=MAP_TARGETS)
        tables["accuracy_vs_cost"] = ladders
        document.add(Table(ladders, "For each problem measured at several parameter sets, g and backend: the cheapest"
                           " stored parameters reaching each relative error (CPU and wall time of the solve, peak"
                           " memory of the task). Every problem: tables/accuracy_vs_cost_all.csv.", "accuracy_vs_cost"))
    if not problems:
        document.add(Paragraph("*No problem was measured at two or more parameter sets of one backend: no trade-off"
                               " curves to draw. Give a backend a `ladder` or `grid` in the suite.*"))
    for key in problems[:MAX_COST_FIGURES]:
        figure = plot_accuracy_vs_cost(frame, key)
        name = frame.loc[frame["problem_key"] == key, "problem_name"].iloc[0]
        g = frame.loc[frame["problem_key"] == key, "g"].iloc[0]
        path = _save(figure, folder, f"cost_{_slug(str(name))}_g{g:g}_{key[:6]}")
        document.add(_picture(document, path, f"{name} at g = {g:g}: relative error of the ground-state energy"
                              " against the wall time of the solve (left) and the peak resident memory of the task"
                              " (right), one line per backend through its parameter sets; dotted lines at 1e-3 and"
                              " 1e-5. The legend says whether the error is measured against a reference or is the"
                              " backend's own error bar; an error can claim no less than the reference's own"
                              " uncertainty (1e-12 relative for the exact closed forms), where such points sit."))
    if len(problems) > MAX_COST_FIGURES:
        document.add(Paragraph(f"*{len(problems) - MAX_COST_FIGURES} more problems are in the table above only.*"))

    document.add(Heading(2, "Cost against particle number"))
    scaling = cost_vs_particle_number_table(frame[benchmark_rows(frame)], accuracy=SCALING_ACCURACY)
    tables["cost_vs_n"] = scaling
    document.add(Table(scaling, f"Per backend and N: the cheapest stored run reaching relative error"
                       f" {SCALING_ACCURACY:.0e}, the largest over the problems with that N. Only problems asking for"
                       f" at most {SCALING_MAX_STATES} levels and no observables count (the figures' problems ask for"
                       " more, which costs more at any N).", "cost_vs_n"))
    if scaling["cpu_s"].notna().any():
        path = _save(plot_cost_scaling(scaling, SCALING_ACCURACY), folder, "cost_vs_particle_number")
        document.add(_picture(document, path, f"CPU time of the solve (left) and peak resident memory of the task"
                              f" (right) needed to reach relative error {SCALING_ACCURACY:.0e} in the ground-state"
                              " energy, against the particle number, per backend (values of the table above)."))
    else:
        document.add(Paragraph(f"*No backend reached {SCALING_ACCURACY:.0e} on any stored problem: nothing to draw.*"))

    document.add(Heading(2, "Physics"))
    for outcome in report_figures.physics_figures(frame, store):
        document.add(Heading(3, outcome.title))
        if outcome.missing:
            document.add(Paragraph(f"*{outcome.missing}*"))
            continue
        path = _save(outcome.figure, folder, outcome.key)
        document.add(_picture(document, path, outcome.caption))
        if outcome.table is not None:
            tables[outcome.key] = outcome.table
            document.add(Table(outcome.table, "The numbers drawn above.", outcome.key))

    failures = failures_table(frame)
    document.add(Heading(2, "Tasks that did not succeed"))
    if failures.empty:
        document.add(Paragraph("Every task succeeded."))
    else:
        tables["failures"] = failures
        document.add(Table(failures, "Status and first line of the error of each task that did not succeed.", "failures"))

    document.add(Heading(2, "Machine, library versions and source revision"))
    machine = machine_table(store, task_keys)
    tables["machine"] = machine
    document.add(Table(machine, "The sweeps whose results this report shows (recorded by the store with each run).",
                       "machine"))
    here, git = host_machine(), source_revision()
    commit = (git["commit"] or "unknown")[:12] + (" (modified tree)" if git["dirty"] else "")
    document.add(Paragraph(f"This report was written on {here['host']} ({here['cpu']}, {here['cores']} cores,"
                           f" {here['system']}, Python {here['python']}) by trapbench {library_version('trapbench')}"
                           f" at commit `{commit}` with pandas {library_version('pandas')} and matplotlib"
                           f" {library_version('matplotlib')}."))
    return document, tables


def write_report(store, output: str | Path, suite=None, task_keys: set[str] | None = None,
                 title: str | None = None, command: str | None = None) -> list[Path]:
    """Write report.md, report.html, figures/*.png and tables/*.csv into ``output``; returns the paths."""
    folder = Path(output)
    folder.mkdir(parents=True, exist_ok=True)
    figures = folder / "figures"
    if figures.is_dir():
        for old in figures.glob("*.png"):
            old.unlink()
    document, tables = build_document(store, folder, suite, task_keys, title, command)
    written = [folder / p.path for p in document.blocks if isinstance(p, Picture)]
    (folder / "tables").mkdir(exist_ok=True)
    for old in (folder / "tables").glob("*.csv"):
        old.unlink()
    for name, table in tables.items():
        path = folder / "tables" / f"{name}.csv"
        table.to_csv(path, index=False)
        written.append(path)
    markdown = folder / "report.md"
    markdown.write_text(render_markdown(document), encoding="utf-8")
    page = folder / "report.html"
    page.write_text(render_html(document, folder), encoding="utf-8")
    return [markdown, page, *written]
