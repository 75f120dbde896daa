"""Benchmark: regenerate the report of a suite from an empty store (sweep + figures + tables).

Target: the committed report of the quick suite regenerates in <= 10 minutes on 2 cores. Run by hand
(not part of the test run; minutes of work):

    python -m pytest bench/benchmarks/bench_report.py --benchmark-only -s
    TRAPBENCH_REPORT_SUITE=quick TRAPBENCH_REPORT_WORKERS=2 python -m pytest bench/benchmarks/bench_report.py --benchmark-only -s

``extra_info`` (and the printed line) holds the wall time of the whole regeneration, the summed CPU
time of the task processes (from the store; less distorted by other load than wall time), and the
wall and CPU time of writing the report alone.
"""

from __future__ import annotations

import os
import time

import matplotlib

matplotlib.use("Agg")

from trapbench.bench.report import write_report  # noqa: E402
from trapbench.bench.store import Store  # noqa: E402
from trapbench.bench.suite import load_suite  # noqa: E402
from trapbench.bench.sweep import SweepOptions, run_sweep  # noqa: E402


def test_regenerate_report_from_an_empty_store(benchmark, tmp_path):
    suite = load_suite(os.environ.get("TRAPBENCH_REPORT_SUITE", "figures"))
    workers = int(os.environ.get("TRAPBENCH_REPORT_WORKERS", "0"))
    store_path, output = tmp_path / "results.sqlite", tmp_path / "reports"
    timings = {}

    def regenerate():
        sweep = run_sweep(suite, SweepOptions(store_path=store_path, workers=workers, progress=False))
        wall, cpu = time.perf_counter(), time.process_time()
        with Store.open(store_path) as store:
            written = write_report(store, output, suite, set(sweep.task_keys))
            tasks = store.tasks_frame(keys=sweep.task_keys)
        timings.update(report_wall_s=time.perf_counter() - wall, report_cpu_s=time.process_time() - cpu,
                       tasks=len(tasks), tasks_ok=int((tasks["status"] == "ok").sum()),
                       task_cpu_s=float(tasks["cpu_time_s"].sum()), task_wall_s=float(tasks["wall_time_s"].sum()))
        return written

    start = time.perf_counter()
    written = benchmark.pedantic(regenerate, rounds=1, iterations=1)
    timings["total_wall_s"] = time.perf_counter() - start
    benchmark.extra_info.update(suite=suite.name, workers=workers, **timings)
    print(f"\nreport of suite '{suite.name}' regenerated: " + ", ".join(f"{k} = {v:.1f}" if isinstance(v, float) else
                                                                     f"{k} = {v}" for k, v in timings.items()))
    assert (output / "report.md").exists() and (output / "report.html").exists()
    assert all(path.exists() for path in written)
