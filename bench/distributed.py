"""Running a sweep's tasks on Dask: a local cluster (``--workers N``) or an existing scheduler.

Each Dask task calls ``runner.run_on_worker``, which runs the trapbench task in its own child
process on that worker (same limits and measurements as a serial sweep, so the same numbers), and
returns the outcome as plain data. Results flow back to the coordinating process, which alone
writes the store, as they complete.

Workers must be allowed to start child processes. ``--workers N`` starts a
``distributed.LocalCluster`` with N single-threaded, non-daemonic worker processes. Workers of an
existing cluster (``--scheduler tcp://host:8786``, e.g. started with ``dask scheduler`` and
``dask worker`` on an HPC allocation) need trapbench installed and the environment variable
``DASK_DISTRIBUTED__WORKER__DAEMON=False`` set when they start; a worker that cannot start a
child records its tasks as failed with that advice.
"""

from __future__ import annotations

from collections.abc import Callable

from .runner import FAILED, Limits, Outcome, backend_modules, payload_for, run_on_worker
from .suite import Task

LOCAL_CLUSTER_OPTIONS = {"threads_per_worker": 1, "processes": True, "dashboard_address": None}
DAEMON_ADVICE = ("the Dask worker may not start child processes; start workers with"
                 " DASK_DISTRIBUTED__WORKER__DAEMON=False")


def local_cluster(workers: int):
    """A LocalCluster of ``workers`` non-daemonic single-threaded processes (caller closes it)."""
    import dask
    from distributed import LocalCluster

    with dask.config.set({"distributed.worker.daemon": False}):
        return LocalCluster(n_workers=workers, **LOCAL_CLUSTER_OPTIONS)


def run_on_dask(
    tasks: list[Task],
    limits_of: Callable[[Task], Limits],
    finished: Callable[[Task, Outcome], None],
    *,
    workers: int = 0,
    scheduler: str | None = None,
) -> None:
    """Submit ``tasks``; call ``finished(task, outcome)`` in this process as each one completes."""
    from distributed import Client, as_completed

    if not tasks:
        return
    cluster = None if scheduler else local_cluster(max(1, workers))
    client = Client(scheduler) if scheduler else Client(cluster)
    try:
        futures = {}
        preload = backend_modules(sorted({t.backend for t in tasks}))
        for task in tasks:
            future = client.submit(run_on_worker, payload_for(task), limits_of(task), preload, pure=False,
                                   key=f"trapbench-{task.key}")
            futures[future.key] = (future, task)
        for future in as_completed([f for f, _ in futures.values()]):
            task = futures[future.key][1]
            try:
                data = future.result()
                data.pop("worker_pid", None)
                outcome = Outcome(**data)
            except AssertionError as exc:  # multiprocessing refuses children of daemonic processes
                outcome = Outcome(status=FAILED, error=f"{DAEMON_ADVICE} ({exc})")
            except Exception as exc:  # a lost worker or a serialization failure: record, go on
                outcome = Outcome(status=FAILED, error=f"Dask could not run the task: {type(exc).__name__}: {exc}")
            finished(task, outcome)
    except KeyboardInterrupt:
        client.cancel([f for f, _ in futures.values()], force=True)
        raise
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
