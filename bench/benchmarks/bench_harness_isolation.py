"""Cost of the executor's ways to run a task, and of opening (integrity-checking) a results store.

Run by hand:  python bench/benchmarks/bench_harness_isolation.py [repeats]

For a trivial task (perturbative, 1+1 at g = 0.1: microseconds of physics) it times ``execute``
in-process, isolated through the forkserver, and isolated in a fresh interpreter (``subprocess``,
what a default daemonic Dask worker uses), and reports per method the median wall time the caller
waits, the median solve time inside (``Result.wall_time_s``) and their difference: the harness's
fixed cost per task. Then it builds stores of increasing size and times ``Store.open`` (which runs
SQLite's ``quick_check`` over every page). Results go in bench_harness_results.md.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

from trapbench.bench.executor import Limits, Outcome, execute
from trapbench.bench.runner import FORKSERVER, SUBPROCESS, context, run_isolated
from trapbench.bench.store import Store
from trapbench.bench.suite import Task
from trapbench.problems.spec import Problem


def time_methods(repeats: int) -> None:
    problem = Problem.create(1, 1, 0.1)
    payload = {"backend": "perturbative", "problem": problem.to_dict(), "params": {}}
    context(("trapbench.backends.perturbative",))
    runs = {
        "in-process": lambda: execute("perturbative", problem, {}),
        FORKSERVER: lambda: run_isolated(payload, Limits(), method=FORKSERVER),
        SUBPROCESS: lambda: run_isolated(payload, Limits(), method=SUBPROCESS),
    }
    print(f"{'method':12s} {'caller wall s':>14s} {'solve wall s':>13s} {'overhead s':>11s} {'peak MiB':>9s}")
    for name, run in runs.items():
        run()  # warm-up: the forkserver starts, caches fill
        walls, solves, peaks = [], [], []
        for _ in range(repeats):
            start = time.perf_counter()
            outcome = run()
            walls.append(time.perf_counter() - start)
            solves.append(outcome.solved().wall_time_s)
            peaks.append(outcome.peak_rss_bytes / 2**20)
        wall, solve = statistics.median(walls), statistics.median(solves)
        print(f"{name:12s} {wall:14.3f} {solve:13.4f} {wall - solve:11.3f} {statistics.median(peaks):9.0f}")


def time_store_open(task_counts: tuple[int, ...] = (100, 1000, 5000)) -> None:
    filler = {"backend_version": "1", "energies": [1.0] * 8, "energy_errors": None, "scalars": {},
              "error_estimate": None, "wall_time_s": 1.0, "cpu_time_s": 1.0, "observables": "x" * 20000}
    problem = Problem.create(2, 2, 1.0)
    with tempfile.TemporaryDirectory() as folder:
        for count in task_counts:
            path = Path(folder) / f"s{count}.sqlite"
            with Store.open(path) as store:
                run_id = store.begin_run("bench", "", count)
                for i in range(count):
                    store.record(run_id, "bench", Task("p", problem, "b", {"i": i}, 60.0, 1024.0),
                                 Outcome(status="ok", result=filler))
            start = time.perf_counter()
            Store.open(path).close()
            print(f"store of {count} tasks, {path.stat().st_size / 2**20:.0f} MiB: open {time.perf_counter() - start:.3f} s")


if __name__ == "__main__":
    time_methods(int(sys.argv[1]) if len(sys.argv) > 1 else 10)
    time_store_open()
