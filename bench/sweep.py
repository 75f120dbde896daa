"""A sweep: expand a suite into tasks, skip the ones already stored, run the rest, store each result.

``run_sweep(suite, options)`` is what ``trapbench sweep`` calls. Tasks run one after another
isolated (``executor.execute(..., isolated=True)``), or on a Dask cluster (``distributed``) when
``options.workers`` or ``options.scheduler`` is given; in both cases only this coordinating process
writes the store, one transaction per finished task, and it holds the store's writer lock for the
whole sweep (a second sweep on the same store is refused). A progress bar with an ETA is shown on
stderr.

What runs again (``Store.why_run``): tasks not stored, tasks that failed or crashed before (unless
``keep_failures``), timeouts and out-of-memory kills when the limit was raised, stale backend
versions, everything with ``rerun``. The summary says how many were retried and what they were before.

Ctrl-C (KeyboardInterrupt; the command turns SIGTERM into one too) kills the tasks in flight, marks
the run ``interrupted`` and keeps every finished task; a Dask sweep that lost its workers or stopped
making progress stops the same way (``stalled``). Running the same suite again resumes where it stopped.
"""

from __future__ import annotations

import sys
from collections import Counter
from dataclasses import dataclass, field, replace
from pathlib import Path

from .executor import OK, Limits, Outcome, execute
from .runner import backend_modules, context
from .store import WRITER_PATIENCE_S, Store
from .suite import Suite, Task


@dataclass
class SweepOptions:
    """Command-line choices of a sweep; ``None`` limits mean the suite's own.

    ``worker_wait_s``: how long a Dask sweep waits with no worker connected; ``stall_s``: how long it
    waits for any task to finish (default: the largest task time limit plus two minutes).
    """

    store_path: Path | None = None
    workers: int = 0
    scheduler: str | None = None
    timeout_s: float | None = None
    memory_mib: float | None = None
    rerun: bool = False
    keep_failures: bool = False
    progress: bool = True
    blas_threads: int = 1
    worker_wait_s: float = 60.0
    stall_s: float | None = None
    command: str = ""


@dataclass
class SweepReport:
    """What a sweep did: its run id, the keys of all its tasks, counts by status, and why tasks ran again."""

    run_id: int
    suite: str
    task_keys: list[str]
    ran: int = 0
    skipped: int = 0
    statuses: Counter = field(default_factory=Counter)
    retried: Counter = field(default_factory=Counter)  # reason ("retry after crashed", ...) -> count
    interrupted: bool = False
    stalled: str = ""
    not_ok: int = 0  # tasks of the suite without an ok result in the store after the sweep

    @property
    def succeeded(self) -> bool:
        """Every task of the suite has an ok result and the sweep was neither interrupted nor stalled."""
        return self.not_ok == 0 and not self.interrupted and not self.stalled

    def summary(self) -> str:
        counts = ", ".join(f"{n} {s}" for s, n in sorted(self.statuses.items())) or "nothing new"
        text = f"suite '{self.suite}': {len(self.task_keys)} tasks, {self.ran} run ({counts}), {self.skipped} already stored"
        if self.retried:
            text += "; ran again: " + ", ".join(f"{n} {why}" for why, n in sorted(self.retried.items()))
        if self.not_ok:
            text += f"; {self.not_ok} task(s) without a result"
        if self.interrupted:
            text += "; INTERRUPTED: finished tasks are kept, run the same command again to resume"
        if self.stalled:
            text += f"; STOPPED: {self.stalled}; finished tasks are kept, run the same command again to resume"
        return text


def limited_tasks(suite: Suite, options: SweepOptions) -> list[Task]:
    """The suite's tasks with the command line's limits (if any) in place of the suite's."""
    tasks = suite.tasks()
    changes = {}
    if options.timeout_s is not None:
        changes["timeout_s"] = options.timeout_s
    if options.memory_mib is not None:
        changes["memory_mib"] = options.memory_mib
    return [replace(t, **changes) for t in tasks] if changes else tasks


def _limits(task: Task, options: SweepOptions) -> Limits:
    return Limits(timeout_s=task.timeout_s, memory_mib=task.memory_mib, blas_threads=options.blas_threads)


def _progress(total: int, suite: str, enabled: bool):
    from tqdm import tqdm

    return tqdm(total=total, desc=f"sweep {suite}", unit="task", disable=not enabled or total == 0,
                file=sys.stderr, dynamic_ncols=True)


def _version(name: str) -> str | None:
    from ..backends import registry

    try:
        return str(getattr(registry.get(name), "version", None))
    except Exception:  # a backend that fails to import is recorded by its tasks, not here
        return None


def run_sweep(suite: Suite, options: SweepOptions) -> SweepReport:
    """Run every task of ``suite`` whose stored outcome does not stand; see the module docstring."""
    from .distributed import SweepStalled

    tasks = limited_tasks(suite, options)
    versions = {name: _version(name) for name in {t.backend for t in tasks}}
    with Store.open(options.store_path) as store, store.writer_lock(WRITER_PATIENCE_S):
        reasons = {t.key: store.why_run(t, options.rerun, versions[t.backend], options.keep_failures) for t in tasks}
        pending = [t for t in tasks if reasons[t.key] is not None]
        run_id = store.begin_run(suite.name, options.command, len(tasks))
        report = SweepReport(run_id, suite.name, [t.key for t in tasks], skipped=len(tasks) - len(pending))
        report.retried.update(reasons[t.key] for t in pending if reasons[t.key] != "new")
        bar = _progress(len(pending), suite.name, options.progress)

        def finished(task: Task, outcome: Outcome) -> None:
            store.record(run_id, suite.name, task, outcome, versions.get(task.backend))
            report.ran += 1
            report.statuses[outcome.status] += 1
            bar.update(1)
            failures = sum(n for s, n in report.statuses.items() if s != OK)
            bar.set_postfix_str(f"{failures} not ok", refresh=False)

        completed = False
        try:
            if options.workers or options.scheduler:
                from .distributed import run_on_dask

                run_on_dask(pending, lambda t: _limits(t, options), finished, workers=options.workers,
                            scheduler=options.scheduler, worker_wait_s=options.worker_wait_s, stall_s=options.stall_s)
            else:
                context(backend_modules(sorted({t.backend for t in pending})))
                for task in pending:
                    finished(task, execute(task.backend, task.problem, task.params, isolated=True,
                                           limits=_limits(task, options)))
            completed = True
        except KeyboardInterrupt:
            report.interrupted = True
        except SweepStalled as exc:
            report.stalled = str(exc)
        finally:
            bar.close()
            status = "interrupted" if report.interrupted else "stalled" if report.stalled else (
                "finished" if completed else "aborted")
            store.end_run(run_id, status, report.ran, report.skipped)
        stored = store.statuses(report.task_keys)
        report.not_ok = sum(1 for key in report.task_keys if stored.get(key) != OK)
    return report
