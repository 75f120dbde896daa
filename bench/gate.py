"""The regression gate: compare a suite's current results with a stored baseline.

A baseline is a JSON file written by ``write_baseline`` (``trapbench check --update-baseline``)::

    {"format": "trapbench-baseline", "version": 1, "suite": "quick", "created_utc": "...",
     "tolerances": {"energy": {"abs": 1e-09, "rel": 1e-06}, ...},
     "tasks": {"<task key>": {"problem_name": ..., "g": ..., "backend": ..., "params": {...},
                              "status": "ok", "energies": [...], "scalars": {...}}}}

``compare(tasks, baseline, tolerance)`` returns one row per compared quantity with a verdict.
Regressions (the gate fails) are: a value that moved beyond its tolerance
(|x - x_base| > abs + rel |x_base|), a task that succeeded in the baseline and now fails, a task
(or a level, or a scalar) of the baseline that is missing now. Not regressions: tasks new since the
baseline, and tasks that failed before and now succeed ("fixed") or still fail.

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
    path = Path(path)
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise SpecError("--baseline", f"no file '{path}'; create it with --update-baseline") from None
    except (OSError, json.JSONDecodeError) as exc:
        raise SpecError("--baseline", f"cannot read '{path}' ({exc})") from None
    if not isinstance(document, dict) or document.get("format") != FORMAT:
        raise SpecError("--baseline", f"'{path}' is not a trapbench baseline (missing \"format\": \"{FORMAT}\")")
    if document.get("version") != VERSION:
        raise SpecError("--baseline", f"'{path}' has version {document.get('version')}; this trapbench reads {VERSION}")
    if not isinstance(document.get("tasks"), dict):
        raise SpecError("--baseline.tasks", f"'{path}' has no task table")
    return document


def _tolerance_from(document: dict) -> Callable[[str, str | None], Tolerance]:
    stored = {k: Tolerance(**v) for k, v in document.get("tolerances", {}).items()}

    def tolerance(quantity: str, backend: str | None = None) -> Tolerance:
        if quantity in stored:
            return stored[quantity]
        return DEFAULT_TOLERANCES.get(quantity, SCALAR_DEFAULT)

    return tolerance


def _finite(x) -> bool:
    return isinstance(x, (int, float)) and math.isfinite(x)


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
            ok = _finite(value) and abs(difference) <= allowed
            add(key, entry, label, base, value, "ok" if ok else "changed", difference, allowed)
    for key, now in current.items():
        if key not in baseline["tasks"]:
            add(key, now, "task", None, now["status"], "new", note="not in the baseline")
    return pd.DataFrame(rows, columns=["problem_name", "g", "backend", "params", "quantity", "baseline", "current",
                                       "difference", "allowed", "verdict", "note", "task_key"])


@dataclass
class GateResult:
    diff: pd.DataFrame

    @property
    def regressions(self) -> pd.DataFrame:
        return self.diff[self.diff["verdict"].isin(REGRESSIONS)]

    @property
    def passed(self) -> bool:
        return self.regressions.empty

    def report(self, everything: bool = False) -> str:
        from .tables import to_markdown

        counts = self.diff["verdict"].value_counts().to_dict()
        summary = ", ".join(f"{n} {v}" for v, n in sorted(counts.items()))
        shown = self.diff if everything else self.diff[self.diff["verdict"] != "ok"]
        verdict = "PASSED" if self.passed else f"FAILED: {len(self.regressions)} regression(s)"
        table = to_markdown(shown.drop(columns=["task_key"])) if not shown.empty else "(every value within tolerance)"
        return f"regression gate {verdict} ({summary})\n\n{table}\n"


def check_against(tasks: pd.DataFrame, baseline_path: str | Path, suite=None) -> GateResult:
    """Compare a tasks frame with the baseline file, under the suite's tolerances when a suite is given."""
    baseline = read_baseline(baseline_path)
    tolerance = suite.tolerance if suite is not None else None
    return GateResult(compare(tasks, baseline, tolerance))


def assert_no_regression(suite, baseline_path: str | Path, store_path: str | Path | None = None, **options) -> GateResult:
    """Run ``suite`` (a Suite, built-in name or path) afresh and raise AssertionError with the diff on any regression."""
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
    result = check_against(tasks, baseline_path, suite)
    if not result.passed:
        raise AssertionError(result.report())
    return result
