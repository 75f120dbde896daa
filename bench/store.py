"""The results store: one SQLite file holding runs and task results.

Python API (used by the sweep, the tables, the gate, the advisor and reports)::

    from trapbench.bench.store import Store
    with Store.open("trapbench-results/results.sqlite") as store:
        tasks = store.tasks_frame()      # one row per task (status, timings, memory, parameters)
        rows = store.results_frame()     # tidy: one row per task and state (energy per level)
        result = store.result(task_key)  # the full trapbench Result (observables included)
        store.export("out.parquet")      # or .csv

Tables:

- ``runs``: one row per sweep (suite, command, start/end, status, host, CPU model, cores, git
  commit and whether the tree was modified, library versions as JSON).
- ``tasks``: one row per task key (problem physics + backend + parameters; see ``suite.task_key``)
  with the problem (JSON, counts, masses, g), backend and version, parameters (JSON), status and
  error, energies / energy errors / scalars (JSON), the backend's error estimate, the full Result
  JSON, wall and CPU time of the task process, wall and CPU time of the solve alone, peak RSS in
  bytes, exit code, the limits it ran under, worker host and times.

Every task result is written in its own transaction (``journal_mode=WAL``), so a sweep killed at
any moment loses only the tasks in flight. A task already stored is skipped on the next run unless
it is asked to rerun (``sweep --rerun``), or it timed out / ran out of memory under a smaller limit
than the one now given, or its backend was missing.

Default path: ``$TRAPBENCH_STORE`` or ``./trapbench-results/results.sqlite``.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import sqlite3
from pathlib import Path
from typing import Any

from .runner import MISSING_BACKEND, OK, OUT_OF_MEMORY, TIMEOUT, Outcome
from .suite import Task

DEFAULT_STORE = Path("trapbench-results") / "results.sqlite"
SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT);
CREATE TABLE IF NOT EXISTS runs (
    run_id INTEGER PRIMARY KEY AUTOINCREMENT,
    suite TEXT, command TEXT, started_utc TEXT, finished_utc TEXT, status TEXT,
    host TEXT, cpu TEXT, cores INTEGER, git_commit TEXT, git_dirty INTEGER, versions TEXT,
    tasks_planned INTEGER, tasks_run INTEGER, tasks_skipped INTEGER
);
CREATE TABLE IF NOT EXISTS tasks (
    task_key TEXT PRIMARY KEY,
    run_id INTEGER REFERENCES runs(run_id),
    suite TEXT, problem_name TEXT, problem_key TEXT, problem TEXT,
    n_up INTEGER, n_down INTEGER, mass_up REAL, mass_down REAL, g REAL,
    backend TEXT, backend_version TEXT, params TEXT,
    status TEXT, error TEXT,
    energies TEXT, energy_errors TEXT, scalars TEXT, error_estimate REAL, result TEXT,
    wall_time_s REAL, cpu_time_s REAL, solve_wall_s REAL, solve_cpu_s REAL, peak_rss_bytes INTEGER,
    exit_code INTEGER, timeout_s REAL, memory_mib REAL, host TEXT, started_utc TEXT, finished_utc TEXT
);
CREATE INDEX IF NOT EXISTS tasks_problem ON tasks(problem_key, backend);
"""

TASK_COLUMNS = (
    "task_key", "run_id", "suite", "problem_name", "problem_key", "problem", "n_up", "n_down", "mass_up",
    "mass_down", "g", "backend", "backend_version", "params", "status", "error", "energies", "energy_errors",
    "scalars", "error_estimate", "result", "wall_time_s", "cpu_time_s", "solve_wall_s", "solve_cpu_s",
    "peak_rss_bytes", "exit_code", "timeout_s", "memory_mib", "host", "started_utc", "finished_utc",
)
_JSON_COLUMNS = ("problem", "params", "energies", "energy_errors", "scalars")


def default_store_path() -> Path:
    return Path(os.environ.get("TRAPBENCH_STORE") or DEFAULT_STORE)


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="milliseconds")


def params_text(params: dict | None) -> str:
    """A short readable form of a parameter set, e.g. ``chi=64, spacing=0.1`` (``defaults`` when empty)."""
    return ", ".join(f"{k}={v}" for k, v in sorted((params or {}).items())) or "defaults"


class Store:
    """An open results database (see the module docstring). Only one process should write it."""

    def __init__(self, connection: sqlite3.Connection, path: Path):
        self.connection = connection
        self.path = path

    # ------------------------------------------------------------------ opening
    @classmethod
    def open(cls, path: str | Path | None = None) -> Store:
        path = Path(path) if path is not None else default_store_path()
        path.parent.mkdir(parents=True, exist_ok=True)
        connection = sqlite3.connect(str(path), timeout=30, isolation_level=None)
        connection.row_factory = sqlite3.Row
        connection.execute("PRAGMA journal_mode=WAL")
        connection.execute("PRAGMA synchronous=NORMAL")
        connection.executescript(_SCHEMA)
        connection.execute("INSERT OR IGNORE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
        return cls(connection, path)

    def close(self) -> None:
        self.connection.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    # ------------------------------------------------------------------ runs
    def begin_run(self, suite: str, command: str, tasks_planned: int) -> int:
        from ..backends.provenance import CORE_LIBRARIES, library_version, machine, source_revision

        host, git = machine(), source_revision()
        names = ("trapbench",) + CORE_LIBRARIES + ("quspin", "tenpy", "dask", "distributed", "pandas")
        versions = {name: library_version(name) for name in names}
        with self.connection:
            cursor = self.connection.execute(
                "INSERT INTO runs (suite, command, started_utc, status, host, cpu, cores, git_commit, git_dirty,"
                " versions, tasks_planned, tasks_run, tasks_skipped) VALUES (?,?,?,?,?,?,?,?,?,?,?,0,0)",
                (suite, command, _now(), "running", host["host"], host["cpu"], host["cores"], git["commit"],
                 None if git["dirty"] is None else int(git["dirty"]), json.dumps(versions), tasks_planned),
            )
        return int(cursor.lastrowid)

    def end_run(self, run_id: int, status: str, tasks_run: int, tasks_skipped: int) -> None:
        with self.connection:
            self.connection.execute(
                "UPDATE runs SET finished_utc=?, status=?, tasks_run=?, tasks_skipped=? WHERE run_id=?",
                (_now(), status, tasks_run, tasks_skipped, run_id),
            )

    def runs_frame(self):
        import pandas as pd

        return pd.read_sql_query("SELECT * FROM runs ORDER BY run_id", self.connection)

    # ------------------------------------------------------------------ tasks
    def stored(self, key: str) -> sqlite3.Row | None:
        return self.connection.execute(
            "SELECT status, timeout_s, memory_mib, backend_version FROM tasks WHERE task_key=?", (key,)
        ).fetchone()

    def needs_run(self, task: Task, rerun: bool = False, backend_version: str | None = None) -> bool:
        """True unless ``task`` is already stored with an outcome that more of the same cannot change.

        A stored result of another version of the backend than ``backend_version`` is stale.
        """
        if rerun:
            return True
        row = self.stored(task.key)
        if row is None or row["status"] == MISSING_BACKEND:
            return True
        if backend_version is not None and row["backend_version"] not in (None, backend_version):
            return True
        if row["status"] == TIMEOUT:
            return task.timeout_s > (row["timeout_s"] or 0)
        if row["status"] == OUT_OF_MEMORY:
            return task.memory_mib > (row["memory_mib"] or 0)
        return False

    def record(self, run_id: int, suite: str, task: Task, outcome: Outcome, backend_version: str | None = None) -> None:
        """Store one task's outcome in its own transaction (replacing an earlier one)."""
        problem = task.problem
        result = outcome.result if outcome.status == OK else None
        row = {
            "task_key": task.key,
            "run_id": run_id,
            "suite": suite,
            "problem_name": task.problem_name,
            "problem_key": problem.key,
            "problem": json.dumps(problem.to_dict()),
            "n_up": problem.up.count,
            "n_down": problem.down.count,
            "mass_up": problem.up.mass,
            "mass_down": problem.down.mass,
            "g": problem.coupling,
            "backend": task.backend,
            "backend_version": result["backend_version"] if result else backend_version,
            "params": task.params_json,
            "status": outcome.status,
            "error": outcome.error,
            "energies": json.dumps(result["energies"]) if result else None,
            "energy_errors": json.dumps(result["energy_errors"]) if result else None,
            "scalars": json.dumps(result["scalars"]) if result else None,
            "error_estimate": result["error_estimate"] if result else None,
            "result": json.dumps(result) if result else None,
            "wall_time_s": outcome.wall_time_s,
            "cpu_time_s": outcome.cpu_time_s,
            "solve_wall_s": result["wall_time_s"] if result else None,
            "solve_cpu_s": result["cpu_time_s"] if result else None,
            "peak_rss_bytes": outcome.peak_rss_bytes,
            "exit_code": outcome.exit_code,
            "timeout_s": task.timeout_s,
            "memory_mib": task.memory_mib,
            "host": outcome.host,
            "started_utc": outcome.started_utc,
            "finished_utc": outcome.finished_utc or _now(),
        }
        placeholders = ",".join("?" for _ in TASK_COLUMNS)
        with self.connection:
            self.connection.execute(
                f"INSERT OR REPLACE INTO tasks ({','.join(TASK_COLUMNS)}) VALUES ({placeholders})",
                tuple(row[c] for c in TASK_COLUMNS),
            )

    def result(self, task_key: str):
        """The full ``Result`` of a finished task (None if it did not succeed)."""
        from ..backends.result import Result

        row = self.connection.execute("SELECT result FROM tasks WHERE task_key=?", (task_key,)).fetchone()
        if row is None or row["result"] is None:
            return None
        return Result.from_json_dict(json.loads(row["result"]))

    # ------------------------------------------------------------------ frames
    def tasks_frame(self, suite: str | None = None, keys: list[str] | None = None):
        """One row per task; JSON columns decoded (``params`` a dict, ``energies`` a list, ...)."""
        import pandas as pd

        columns = [c for c in TASK_COLUMNS if c != "result"]
        query = f"SELECT {','.join(columns)} FROM tasks"
        args: tuple = ()
        if suite is not None:
            query += " WHERE suite=?"
            args = (suite,)
        frame = pd.read_sql_query(query + " ORDER BY rowid", self.connection, params=args)
        if keys is not None:
            frame = frame[frame["task_key"].isin(set(keys))]
        for column in _JSON_COLUMNS:
            frame[column] = [json.loads(v) if isinstance(v, str) else None for v in frame[column]]
        return frame.reset_index(drop=True)

    def results_frame(self, suite: str | None = None, keys: list[str] | None = None):
        """Tidy rows: one per task and state, with ``energy``, ``energy_error`` and the task's columns.

        Tasks that did not succeed give one row with ``state`` = -1 and no energy, so that failures
        stay visible in every table built on this frame. Scalars become ``scalar.<name>`` columns
        (state 0).
        """
        import pandas as pd

        tasks = self.tasks_frame(suite, keys)
        rows = []
        for record in tasks.to_dict("records"):
            energies = record.pop("energies") or []
            errors = record.pop("energy_errors") or []
            scalars = record.pop("scalars") or {}
            record["params_text"] = params_text(record["params"])
            if not energies:
                rows.append({**record, "state": -1, "energy": None, "energy_error": None})
                continue
            for state, energy in enumerate(energies):
                row = {**record, "state": state, "energy": energy,
                       "energy_error": errors[state] if state < len(errors) else None}
                if state == 0:
                    row.update({f"scalar.{k}": v for k, v in scalars.items()})
                rows.append(row)
        return pd.DataFrame(rows)

    def export(self, path: str | Path, suite: str | None = None, keys: list[str] | None = None) -> Path:
        """Write ``results_frame`` to CSV or Parquet (chosen by the file suffix)."""
        path = Path(path)
        frame = self.results_frame(suite, keys)
        frame["params"] = [json.dumps(p, sort_keys=True) for p in frame["params"]]
        frame["problem"] = [json.dumps(p, sort_keys=True) for p in frame["problem"]]
        path.parent.mkdir(parents=True, exist_ok=True)
        if path.suffix == ".csv":
            frame.to_csv(path, index=False)
        elif path.suffix in (".parquet", ".pq"):
            frame.to_parquet(path, index=False)
        else:
            from ..problems.errors import SpecError

            raise SpecError("export path", f"got '{path.name}'; end it in .csv or .parquet")
        return path
