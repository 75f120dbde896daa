"""A sweep: expand a suite into tasks, skip the ones already stored, run the rest, store each result.

``run_sweep(suite, options)`` is what ``trapbench sweep`` calls. Tasks run one after another in
isolated child processes (``runner.run_isolated``), or on a Dask cluster (``distributed``) when
``options.workers`` or ``options.scheduler`` is given; in both cases only this coordinating process
writes the store, one transaction per finished task. A progress bar with an ETA is shown on stderr.
Ctrl-C (KeyboardInterrupt) kills the tasks in flight, marks the run ``interrupted`` and keeps every
finished task; running the same suite again resumes where it stopped. A stored result is reused
only while its backend reports the same ``version``.
"""

from __future__ import annotations

import sys
from collections import Counter
from dataclasses import dataclass, field, replace
from pathlib import Path

from .runner import MISSING_BACKEND, OK, Limits, Outcome, backend_modules, context, payload_for, run_isolated
from .store import Store
from .suite import Suite, Task


@dataclass
class SweepOptions:
    """Command-line choices of a sweep; ``None`` limits mean the suite's own."""

    store_path: Path | None = None
    workers: int = 0
    scheduler: str | None = None
    timeout_s: float | None = None
    memory_mib: float | None = None
    rerun: bool = False
    progress: bool = True
    blas_threads: int = 1
    command: str = ""


@dataclass
class SweepReport:
    """What a sweep did: its run id, the keys of all its tasks, and counts by status."""

    run_id: int
    suite: str
    task_keys: list[str]
    ran: int = 0
    skipped: int = 0
    statuses: Counter = field(default_factory=Counter)
    interrupted: bool = False

    def summary(self) -> str:
        counts = ", ".join(f"{n} {s}" for s, n in sorted(self.statuses.items())) or "nothing new"
        text = f"suite '{self.suite}': {len(self.task_keys)} tasks, {self.ran} run ({counts}), {self.skipped} already stored"
        if self.interrupted:
            text += "; INTERRUPTED: finished tasks are kept, run the same command again to resume"
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
    """Run every task of ``suite`` not yet in the store; see the module docstring."""
    from ..backends import registry

    tasks = limited_tasks(suite, options)
    installed = set(registry.names())
    versions = {name: _version(name) for name in {t.backend for t in tasks} & installed}
    with Store.open(options.store_path) as store:
        pending = [t for t in tasks if store.needs_run(t, options.rerun, versions.get(t.backend))]
        run_id = store.begin_run(suite.name, options.command, len(tasks))
        report = SweepReport(run_id, suite.name, [t.key for t in tasks], skipped=len(tasks) - len(pending))
        missing = [t for t in pending if t.backend not in installed]
        runnable = [t for t in pending if t.backend in installed]
        for task in missing:
            outcome = Outcome(status=MISSING_BACKEND, error=f"backend '{task.backend}' is not installed here;"
                              " installed: " + ", ".join(sorted(installed)))
            store.record(run_id, suite.name, task, outcome)
            report.statuses[MISSING_BACKEND] += 1
        report.ran = len(missing)
        bar = _progress(len(runnable), suite.name, options.progress)

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

                run_on_dask(runnable, lambda t: _limits(t, options), finished,
                            workers=options.workers, scheduler=options.scheduler)
            else:
                context(backend_modules(sorted({t.backend for t in runnable})))
                for task in runnable:
                    finished(task, run_isolated(payload_for(task), _limits(task, options)))
            completed = True
        except KeyboardInterrupt:
            report.interrupted = True
        finally:
            bar.close()
            status = "interrupted" if report.interrupted else ("finished" if completed else "aborted")
            store.end_run(run_id, status, report.ran, report.skipped)
    return report
