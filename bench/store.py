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
any moment loses only the tasks in flight. ``Store.why_run`` decides what the next sweep runs: a
task not stored yet; every task with ``rerun``; a stored result of another backend version; a task
that failed or crashed (a fault from outside -- a killed process, a lost worker -- is worth another
try; ``keep_failures`` makes failures final); a task that timed out / ran out of memory under a
smaller limit than the one now given. Ok and unsupported results are kept.

One sweep writes a store at a time: ``Store.writer_lock`` holds an exclusive ``flock`` on the file
``<store>.lock`` for the sweep's duration (the operating system releases it when the process dies,
however it dies), and a second sweep is refused with the first one's host and process id (after
waiting ``WRITER_PATIENCE_S``, since a reader takes the lock for a moment, see below). Runs left
"running" by a process killed without cleanup are marked ``interrupted`` whenever the store is opened
while no sweep holds the lock. (``flock`` is reliable on local file systems; on a network file
system keep one coordinator per store.)

A file that is not a readable store (truncated, garbled, another program's database) is refused
when it is opened with one line naming it and what to do (``DamagedStore``).

Default path: ``$TRAPBENCH_STORE`` or ``./trapbench-results/results.sqlite``.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import fcntl
import json
import os
import platform
import sqlite3
import time
from pathlib import Path
from typing import Any

from ..problems.errors import SpecError
from .executor import CRASHED, FAILED, OK, OUT_OF_MEMORY, TIMEOUT, Outcome
from .suite import Task

DEFAULT_STORE = Path("trapbench-results") / "results.sqlite"
SCHEMA_VERSION = 1
# Statuses retried by the next sweep unless failures are kept final; "missing-backend" is what
# stores written before suites refused unknown backends at load time hold for those tasks.
RETRIED_STATUSES = (FAILED, CRASHED, "missing-backend")
INTERRUPTED = "interrupted"

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


class DamagedStore(SpecError):
    """The store file cannot be read as a trapbench results store."""

    def __init__(self, path: Path, detail: str):
        super().__init__(str(path), f"not a readable trapbench results store ({detail}); restore it from a backup,"
                                    " delete it to start afresh, or give another --store")


WRITER_PATIENCE_S = 3.0
"""How long a sweep waits for the writer lock before it concludes another sweep holds it (seconds)."""


class StoreBusy(SpecError):
    """Another sweep holds the store's writer lock."""

    def __init__(self, path: Path, holder: str):
        super().__init__(str(path), f"another sweep is writing this store ({holder or 'holder unknown'}); wait for it"
                                    " to finish, or give another --store")


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
        """Open (or create) the store at ``path``; DamagedStore when the file is not a readable store."""
        path = Path(path) if path is not None else default_store_path()
        if path.is_dir():
            raise DamagedStore(path, "it is a folder; give a file name such as results.sqlite")
        path.parent.mkdir(parents=True, exist_ok=True)
        try:
            connection = sqlite3.connect(str(path), timeout=30, isolation_level=None)
            connection.row_factory = sqlite3.Row
            connection.execute("PRAGMA journal_mode=WAL")
            connection.execute("PRAGMA synchronous=NORMAL")
            # quick_check reads every page, so truncation or garbage is found here, not halfway through a sweep
            problems = [row[0] for row in connection.execute("PRAGMA quick_check")]
            if problems != ["ok"]:
                raise sqlite3.DatabaseError("integrity check: " + "; ".join(problems[:2]))
            columns = {row["name"] for row in connection.execute("PRAGMA table_info(tasks)")}
            if columns and not set(TASK_COLUMNS) <= columns:  # checked before writing into another program's file
                raise sqlite3.DatabaseError("its 'tasks' table lacks trapbench's columns")
            connection.executescript(_SCHEMA)
            connection.execute("INSERT OR IGNORE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
        except sqlite3.DatabaseError as exc:
            raise DamagedStore(path, f"sqlite: {exc}") from None
        store = cls(connection, path)
        with contextlib.suppress(StoreBusy, OSError), store.writer_lock():
            pass  # taking the lock marks runs orphaned by a killed sweep as interrupted (readers may lack write access)
        return store

    def close(self) -> None:
        self.connection.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    # ------------------------------------------------------------------ writer lock
    @contextlib.contextmanager
    def writer_lock(self, patience_s: float = 0.0):
        """Hold the store's exclusive writer lock; see the module docstring.

        Raises StoreBusy when another process still holds it after ``patience_s`` seconds. A reader
        opening the store holds the lock for one UPDATE (marking orphaned runs), so a sweep waits a
        moment (``WRITER_PATIENCE_S``) instead of mistaking such a reader for a second sweep.
        """
        lock_path = self.path.with_name(self.path.name + ".lock")
        handle = open(lock_path, "a+", encoding="utf-8")
        try:
            deadline = time.monotonic() + patience_s
            while True:
                try:
                    fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
                    break
                except BlockingIOError:
                    if time.monotonic() >= deadline:
                        handle.seek(0)
                        raise StoreBusy(self.path, handle.read().strip()) from None
                    time.sleep(0.05)
            handle.seek(0)
            handle.truncate()
            handle.write(f"pid {os.getpid()} on {platform.node()} since {_now()}")
            handle.flush()
            self._mark_orphaned_runs()
            yield
        finally:
            handle.close()  # closing the descriptor releases the lock

    def _mark_orphaned_runs(self) -> None:
        """Runs still "running" while nobody holds the lock belong to a process that died: say so."""
        with self.connection:
            self.connection.execute("UPDATE runs SET status=? WHERE status='running'", (INTERRUPTED,))

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

    def why_run(self, task: Task, rerun: bool = False, backend_version: str | None = None,
                keep_failures: bool = False) -> str | None:
        """Why ``task`` must run now (``"new"``, ``"rerun"``, ``"stale version"``, ``"retry after <status>"``,
        ``"larger limit after <status>"``), or None when its stored outcome stands; see the module docstring."""
        row = self.stored(task.key)
        if row is None:
            return "new"
        if rerun:
            return "rerun"
        if backend_version is not None and row["backend_version"] not in (None, backend_version):
            return "stale version"
        status = row["status"]
        if status in RETRIED_STATUSES and not keep_failures:
            return f"retry after {status}"
        if status == TIMEOUT and task.timeout_s > (row["timeout_s"] or 0):
            return f"larger limit after {status}"
        if status == OUT_OF_MEMORY and task.memory_mib > (row["memory_mib"] or 0):
            return f"larger limit after {status}"
        return None

    def statuses(self, keys: list[str]) -> dict[str, str]:
        """Stored status of each of ``keys`` that is in the store."""
        found = {}
        for start in range(0, len(keys), 500):  # SQLite caps the number of bound parameters
            chunk = keys[start:start + 500]
            query = f"SELECT task_key, status FROM tasks WHERE task_key IN ({','.join('?' for _ in chunk)})"
            found.update({row["task_key"]: row["status"] for row in self.connection.execute(query, chunk)})
        return found

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
        """Tidy rows: one per task and state, from ``Result.to_rows`` joined with the task's columns.

        Each row holds the level's ``energy``, ``energy_error`` and labels (``parity``, ``com``,
        ``degeneracy``), the solve's ``solve_wall_s``/``solve_cpu_s``, the task process's
        ``wall_time_s``/``cpu_time_s`` and every other task column, plus ``params_text``. Tasks that
        did not succeed give one row with ``state`` = -1 and no energy, so that failures stay
        visible in every table built on this frame. Scalars become ``scalar.<name>`` columns (state 0).
        Observables stay in the store (``result(task_key)``): the frame is read without them.
        """
        import pandas as pd

        from ..backends.result import Result

        tasks = self.tasks_frame(suite, keys)
        # json_remove drops the observable arrays inside SQLite: the rows need none of them
        light = dict(self.connection.execute(
            "SELECT task_key, json_remove(result, '$.observables', '$.diagnostics') FROM tasks WHERE result IS NOT NULL"
        ).fetchall())
        rows = []
        for record in tasks.to_dict("records"):
            scalars = record.pop("scalars") or {}
            record.pop("energies"), record.pop("energy_errors")
            record["params_text"] = params_text(record["params"])
            stored = light.get(record["task_key"]) if record["status"] == OK else None
            levels = Result.from_json_dict({**json.loads(stored), "observables": {}}).to_rows() if stored else []
            if not levels:
                rows.append({**record, "state": -1, "energy": None, "energy_error": None})
                continue
            for level in levels:
                # to_rows times the solve alone; the task's own columns keep the task process's times
                level["solve_wall_s"], level["solve_cpu_s"] = level.pop("wall_time_s"), level.pop("cpu_time_s")
                row = {**record, **level}
                if level["state"] == 0:
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
