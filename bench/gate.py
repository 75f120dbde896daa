"""The regression gate: compare a suite's current results with a stored baseline.

A baseline is a JSON file written by ``write_baseline`` (``trapbench check --update-baseline``)::

    {"format": "trapbench-baseline", "version": 1, "suite": "quick", "created_utc": "...",
     "tolerances": {"energy": {"abs": 1e-09, "rel": 1e-06}, ...},
     "tasks": {"<task key>": {"problem_name": ..., "g": ..., "backend": ..., "params": {...},
                              "status": "ok", "energies": [...], "scalars": {...}}}}

``compare(tasks, baseline, tolerance)`` returns one row per compared quantity with a verdict.
Regressions (the gate fails) are: a value that moved beyond its tolerance
(|x - x_base| > abs + rel |x_base|), a task that succeeded in the baseline and now fails, a task
(or a level, or a scalar) of the baseline that is missing now, and a task of the suite that the
baseline does not cover ("new") -- unless new tasks are expected (``allow_new``, ``check
--allow-new``). A gate that compared no task of the baseline at all never passes. Not regressions:
tasks that failed before and now succeed ("fixed") or still fail.

``read_baseline`` checks the whole document (types and required fields of every entry) and names
the file, the offending entry and what to do in one line (``SpecError``).

From pytest, use ``assert_no_regression`` or the ``trapbench_gate`` fixture of
``trapbench.bench.pytest_plugin``.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..problems.errors import SpecError
from .suite import DEFAULT_TOLERANCES, Tolerance

FORMAT = "trapbench-baseline"
VERSION = 1
REGRESSIONS = ("changed", "new failure", "missing")
NEW = "new"
SCALAR_DEFAULT = Tolerance(abs=1e-9, rel=1e-6)


def baseline_from_tasks(tasks: pd.DataFrame, suite_name: str, tolerances: dict[str, dict]) -> dict:
    """A baseline document from a ``Store.tasks_frame()``."""
    entries = {}
    for row in tasks.to_dict("records"):
        entries[row["task_key"]] = {
            "problem_name": row["problem_name"],
            "g": row["g"],
            "backend": row["backend"],
            "params": row["params"],
            "status": row["status"],
            "energies": row["energies"],
            "scalars": row["scalars"],
        }
    return {
        "format": FORMAT,
        "version": VERSION,
        "suite": suite_name,
        "created_utc": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "tolerances": tolerances,
        "tasks": entries,
    }


def write_baseline(path: str | Path, document: dict) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(document, indent=1, sort_keys=True, allow_nan=False) + "\n", encoding="utf-8")
    return path


def read_baseline(path: str | Path) -> dict:
    """The baseline document at ``path``, checked completely; SpecError (one line) for any defect."""
    path = Path(path)
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise SpecError("--baseline", f"no file '{path}'; create it with --update-baseline") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise SpecError("--baseline", f"cannot read '{path}' as JSON ({exc}); restore it or write a new one with"
                                      " --update-baseline") from None
    if not isinstance(document, dict) or document.get("format") != FORMAT:
        raise SpecError("--baseline", f"'{path}' is not a trapbench baseline (missing \"format\": \"{FORMAT}\");"
                                      " write one with --update-baseline")
    if document.get("version") != VERSION:
        raise SpecError("--baseline", f"'{path}' has version {document.get('version')!r}; this trapbench reads {VERSION}"
                                      " (write a new one with --update-baseline)")
    problem = _baseline_defect(document)
    if problem:
        raise SpecError("--baseline", f"'{path}': {problem}; fix that entry or write a new baseline with --update-baseline")
    return document


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _baseline_defect(document: dict) -> str | None:
    """The first malformed field of a baseline document, as "field: got ...; expected ...", or None."""
    tolerances = document.get("tolerances", {})
    if not isinstance(tolerances, dict):
        return f"tolerances: got {tolerances!r:.60}; expected a table quantity -> {{abs, rel}}"
    for quantity, rule in tolerances.items():
        if not isinstance(rule, dict) or not set(rule) <= {"abs", "rel"}:
            return f"tolerances.{quantity}: got {rule!r:.60}; expected {{\"abs\": number, \"rel\": number}}"
        for key, value in rule.items():
            if not _is_number(value) or value < 0:
                return f"tolerances.{quantity}.{key}: got {value!r:.60}; expected a number >= 0"
    tasks = document.get("tasks")
    if not isinstance(tasks, dict):
        return f"tasks: got {tasks!r:.60}; expected a table task key -> entry"
    for key, entry in tasks.items():
        where = f"tasks.{key}"
        if not isinstance(entry, dict):
            return f"{where}: got {entry!r:.60}; expected a table"
        if not isinstance(entry.get("status"), str):
            return f"{where}.status: got {entry.get('status')!r:.60}; expected a status such as \"ok\""
        energies = entry.get("energies")
        if entry["status"] == "ok" and not isinstance(energies, list):
            return f"{where}.energies: got {energies!r:.60}; an ok task needs a list of energies"
        for i, energy in enumerate(energies or []):
            if not _is_number(energy):
                return f"{where}.energies[{i}]: got {energy!r:.60}; expected a finite number"
        scalars = entry.get("scalars")
        if scalars is not None and not isinstance(scalars, dict):
            return f"{where}.scalars: got {scalars!r:.60}; expected a table name -> number"
        for name, value in (scalars or {}).items():
            if not _is_number(value):
                return f"{where}.scalars.{name}: got {value!r:.60}; expected a finite number"
        for field, kind, expected in (("params", dict, "a table"), ("problem_name", str, "a string"),
                                      ("backend", str, "a string")):
            if entry.get(field) is not None and not isinstance(entry[field], kind):
                return f"{where}.{field}: got {entry[field]!r:.60}; expected {expected}"
        if entry.get("g") is not None and not _is_number(entry["g"]):
            return f"{where}.g: got {entry['g']!r:.60}; expected a number"
    return None


def _tolerance_from(document: dict) -> Callable[[str, str | None], Tolerance]:
    stored = {k: Tolerance(**v) for k, v in document.get("tolerances", {}).items()}

    def tolerance(quantity: str, backend: str | None = None) -> Tolerance:
        if quantity in stored:
            return stored[quantity]
        return DEFAULT_TOLERANCES.get(quantity, SCALAR_DEFAULT)

    return tolerance


def compare(
    tasks: pd.DataFrame,
    baseline: dict,
    tolerance: Callable[[str, str | None], Tolerance] | None = None,
) -> pd.DataFrame:
    """Diff rows (task, quantity, baseline, current, difference, allowed, verdict); see the module docstring."""
    tolerance = tolerance or _tolerance_from(baseline)
    current = {row["task_key"]: row for row in tasks.to_dict("records")}
    rows = []

    def add(key, entry, quantity, base, now, verdict, difference=None, allowed=None, note=""):
        params = ", ".join(f"{k}={v}" for k, v in sorted((entry.get("params") or {}).items()))
        rows.append({"problem_name": entry.get("problem_name"), "g": entry.get("g"), "backend": entry.get("backend"),
                     "params": params, "quantity": quantity, "baseline": base, "current": now,
                     "difference": difference, "allowed": allowed, "verdict": verdict, "note": note, "task_key": key})

    for key, entry in baseline["tasks"].items():
        now = current.get(key)
        if now is None:
            add(key, entry, "task", entry["status"], None, "missing", note="not in the current results")
            continue
        if entry["status"] != "ok":
            verdict = "fixed" if now["status"] == "ok" else "still failing"
            add(key, entry, "status", entry["status"], now["status"], verdict)
            continue
        if now["status"] != "ok":
            first = (now.get("error") or "").splitlines()[0] if now.get("error") else ""
            add(key, entry, "status", "ok", now["status"], "new failure", note=first)
            continue
        backend = entry.get("backend")
        energies_now = now["energies"] or []
        pairs = [(f"energy[{i}]", "energy", e, energies_now[i] if i < len(energies_now) else None)
                 for i, e in enumerate(entry.get("energies") or [])]
        pairs += [(f"scalar.{name}", name, v, (now.get("scalars") or {}).get(name))
                  for name, v in (entry.get("scalars") or {}).items()]
        for label, quantity, base, value in pairs:
            if value is None:
                add(key, entry, label, base, None, "missing", note="the current result lacks it")
                continue
            rule = tolerance(quantity, backend)
            difference = value - base
            allowed = rule.allowed(base)
            ok = _is_number(value) and abs(difference) <= allowed
            add(key, entry, label, base, value, "ok" if ok else "changed", difference, allowed)
    for key, now in current.items():
        if key not in baseline["tasks"]:
            add(key, now, "task", None, now["status"], NEW, note="not in the baseline")
    return pd.DataFrame(rows, columns=["problem_name", "g", "backend", "params", "quantity", "baseline", "current",
                                       "difference", "allowed", "verdict", "note", "task_key"])


@dataclass
class GateResult:
    """The diff and the gate's verdict; ``allow_new`` accepts tasks the baseline does not cover."""

    diff: pd.DataFrame
    allow_new: bool = False

    @property
    def regressions(self) -> pd.DataFrame:
        failing = REGRESSIONS if self.allow_new else REGRESSIONS + (NEW,)
        return self.diff[self.diff["verdict"].isin(failing)]

    @property
    def compared_nothing(self) -> bool:
        """No task of the baseline is among the current results: nothing was actually checked."""
        present = self.diff[(self.diff["verdict"] != NEW) & (self.diff["verdict"] != "missing")]
        return present.empty

    @property
    def passed(self) -> bool:
        return self.regressions.empty and not self.compared_nothing

    def report(self, everything: bool = False) -> str:
        from .tables import to_markdown

        counts = self.diff["verdict"].value_counts().to_dict()
        summary = ", ".join(f"{n} {v}" for v, n in sorted(counts.items()))
        shown = self.diff if everything else self.diff[self.diff["verdict"] != "ok"]
        if self.compared_nothing:
            verdict = "FAILED: the baseline covers none of the current tasks (write one with --update-baseline)"
        elif self.passed:
            verdict = "PASSED"
        else:
            verdict = f"FAILED: {len(self.regressions)} regression(s)"
        new = int((self.diff["verdict"] == NEW).sum())
        if new and not self.allow_new:
            verdict += f"; {new} task(s) not in the baseline (listed as 'new'; pass --allow-new if they are expected)"
        table = to_markdown(shown.drop(columns=["task_key"])) if not shown.empty else "(every value within tolerance)"
        return f"regression gate {verdict} ({summary})\n\n{table}\n"


def check_against(tasks: pd.DataFrame, baseline_path: str | Path, suite=None, allow_new: bool = False) -> GateResult:
    """Compare a tasks frame with the baseline file, under the suite's tolerances when a suite is given."""
    baseline = read_baseline(baseline_path)
    tolerance = suite.tolerance if suite is not None else None
    return GateResult(compare(tasks, baseline, tolerance), allow_new)


def assert_no_regression(suite, baseline_path: str | Path, store_path: str | Path | None = None,
                         allow_new: bool = False, **options) -> GateResult:
    """Run ``suite`` (a Suite, built-in name or path) afresh and raise AssertionError with the diff on any regression.

    ``allow_new``: tasks of the suite that the baseline does not cover are not regressions.
    """
    from .store import Store
    from .suite import load_suite
    from .sweep import SweepOptions, run_sweep

    if not hasattr(suite, "tasks"):
        suite = load_suite(suite)
    options.setdefault("rerun", True)
    options.setdefault("progress", False)
    report = run_sweep(suite, SweepOptions(store_path=store_path, **options))
    with Store.open(store_path) as store:
        tasks = store.tasks_frame(keys=report.task_keys)
    result = check_against(tasks, baseline_path, suite, allow_new)
    if not result.passed:
        raise AssertionError(result.report())
    return result
