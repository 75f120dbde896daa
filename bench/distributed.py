"""Running a sweep's tasks on Dask: a local cluster (``--workers N``) or an existing scheduler.

Each Dask task calls ``runner.run_on_worker``, which runs the trapbench task isolated on that worker
(same limits and measurements as a serial sweep, so the same numbers) and returns the outcome as
plain data. Results flow back to the coordinating process, which alone writes the store, as they
complete.

Workers need trapbench installed and nothing else: a worker in Dask's default configuration is a
daemonic process, which ``multiprocessing`` forbids to start children, so its tasks run in a fresh
interpreter (``subprocess``; it costs the interpreter start and imports per task, see
``bench/benchmarks/bench_harness_results.md``). ``--workers N`` starts a ``distributed.LocalCluster``
of N single-threaded non-daemonic workers, which use the cheaper forkserver.

The coordinator never waits without bound: it stops (``SweepStalled``) when no worker has been
connected for ``worker_wait_s`` seconds, or when no task has finished for ``stall_s`` seconds
(default: the largest task time limit plus ``STALL_MARGIN_S``; a task cannot legitimately take
longer, since its worker kills it at its limit). Everything finished before is in the store.
"""

from __future__ import annotations

import contextlib
import time
import warnings
from collections.abc import Callable

from .executor import FAILED, Limits, Outcome, payload_for
from .runner import backend_modules, run_on_worker
from .suite import Task

LOCAL_CLUSTER_OPTIONS = {"threads_per_worker": 1, "processes": True, "dashboard_address": None}
POLL_S = 1.0
QUERY_TIMEOUT_S = 10.0  # a scheduler that does not answer a worker count within this is counted as gone
STALL_MARGIN_S = 120.0


class SweepStalled(RuntimeError):
    """A Dask sweep cannot make progress (no workers, or nothing finishes); the message says which."""


def local_cluster(workers: int):
    """A LocalCluster of ``workers`` non-daemonic single-threaded processes (caller closes it).

    Its scheduler's HTTP server (no dashboard here) asks for port 8787 and moves to a free one when
    another cluster holds it, with a warning; two sweeps side by side are normal use, so that warning
    is not printed.
    """
    import dask
    from distributed import LocalCluster

    with dask.config.set({"distributed.worker.daemon": False}), warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Port 8787 is already in use", category=UserWarning)
        return LocalCluster(n_workers=workers, **LOCAL_CLUSTER_OPTIONS)


def _worker_count(client) -> int:
    try:
        return len(client.nthreads(callback_timeout=QUERY_TIMEOUT_S))
    except Exception:  # the scheduler itself is gone or silent: as good as no worker
        return 0


def run_on_dask(
    tasks: list[Task],
    limits_of: Callable[[Task], Limits],
    finished: Callable[[Task, Outcome], None],
    *,
    workers: int = 0,
    scheduler: str | None = None,
    worker_wait_s: float = 60.0,
    stall_s: float | None = None,
) -> None:
    """Submit ``tasks``; call ``finished(task, outcome)`` in this process as each one completes.

    Raises SweepStalled (after cancelling what is left) when the cluster stops making progress.
    """
    from distributed import Client, wait

    if not tasks:
        return
    if stall_s is None:
        stall_s = max(limits_of(t).timeout_s for t in tasks) + STALL_MARGIN_S
    cluster = None if scheduler else local_cluster(max(1, workers))
    client = Client(scheduler) if scheduler else Client(cluster)
    pending: dict = {}
    try:
        preload = backend_modules(sorted({t.backend for t in tasks}))
        for task in tasks:
            future = client.submit(run_on_worker, payload_for(task), limits_of(task), preload, pure=False,
                                   key=f"trapbench-{task.key}")
            pending[future] = task
        last_progress = time.monotonic()
        without_workers_since = None
        while pending:
            try:
                done = wait(list(pending), timeout=POLL_S, return_when="FIRST_COMPLETED").done
            except TimeoutError:
                done = set()
            progressed = False
            for future in done:
                outcome = _outcome_of(future)
                if outcome is None:  # its result went down with its worker; Dask runs it again
                    continue
                finished(pending.pop(future), outcome)
                progressed = True
            if progressed or not pending:
                last_progress = time.monotonic()
                continue
            now = time.monotonic()
            if _worker_count(client) == 0:
                without_workers_since = without_workers_since or now
                if now - without_workers_since > worker_wait_s:
                    raise SweepStalled(f"no Dask worker connected for {worker_wait_s:g} s ({len(pending)} task(s) not run);"
                                       " start workers (or check the scheduler) and resume")
            else:
                without_workers_since = None
            if now - last_progress > stall_s:
                raise SweepStalled(f"no task finished for {stall_s:g} s ({len(pending)} task(s) not run); check the"
                                   " workers, or raise the wait with --stall-timeout")
    except (KeyboardInterrupt, SweepStalled):
        with contextlib.suppress(Exception):  # a vanished scheduler must not hide why the sweep stopped
            client.cancel(list(pending), force=True)
        raise
    finally:
        client.close(timeout=10)
        if cluster is not None:
            cluster.close(timeout=30)


def _outcome_of(future) -> Outcome | None:
    """The task's outcome, a failure saying why Dask could not produce one, or None when it is gone.

    A future reported done can lose its result before it is fetched (the worker holding it dies):
    Dask then marks it lost and runs the task again, and an unbounded ``result()`` would wait for a
    worker that may never come. The fetch is bounded; None leaves the task pending.
    """
    try:
        data = future.result(timeout=QUERY_TIMEOUT_S)
        data.pop("worker_pid", None)
        return Outcome(**data)
    except TimeoutError:
        return None
    except Exception as exc:  # a killed worker or a serialization failure: recorded, retried next sweep
        return Outcome(status=FAILED, error=f"Dask could not run the task: {type(exc).__name__}: {exc}",
                       error_type=type(exc).__name__)
