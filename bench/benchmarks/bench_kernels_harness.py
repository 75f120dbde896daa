"""Micro-benchmarks of the harness's own hot paths (pytest-benchmark; not part of the test run).

Run by hand:  python -m pytest bench/benchmarks/bench_kernels_harness.py --benchmark-only

- ``run_isolated`` overhead: forking one task from the forkserver, watching it, collecting the
  answer (a trivial backend), i.e. the fixed cost the harness adds to every measured task;
- one transactional ``Store.record`` (one SQLite transaction, WAL, synchronous=NORMAL);
- the tables on a 2000-row results frame.
"""

from __future__ import annotations

import pandas as pd
import pytest

from trapbench.bench.executor import OK, Limits, Outcome
from trapbench.bench.runner import run_isolated
from trapbench.bench.store import Store
from trapbench.bench.suite import Task
from trapbench.bench.tables import accuracy_vs_cost_table, attach_references
from trapbench.problems.spec import Problem


def test_isolated_task_overhead(benchmark):
    pytest.importorskip("trapbench.backends.perturbative")
    payload = {"backend": "perturbative", "problem": Problem.create(1, 1, 0.1).to_dict(), "params": {}}
    outcome = benchmark(run_isolated, payload, Limits(timeout_s=60))
    assert outcome.status == OK


def test_store_record_one_transaction(benchmark, tmp_path):
    problem = Problem.create(2, 2, 1.0)
    outcome = Outcome(status=OK, result={"backend_version": "1", "energies": [4.1, 4.2], "energy_errors": None,
                                         "scalars": {}, "error_estimate": 1e-6, "wall_time_s": 1.0,
                                         "cpu_time_s": 1.0})
    counter = iter(range(10**9))
    with Store.open(tmp_path / "bench.sqlite") as store:
        run_id = store.begin_run("bench", "", 0)

        def record():
            task = Task("p", problem, "b", {"i": next(counter)}, 60.0, 1024.0)
            store.record(run_id, "bench", task, outcome)

        benchmark(record)


def test_tables_on_2000_rows(benchmark):
    rows = [{"task_key": str(i), "problem_key": str(i % 20), "problem_name": f"p{i % 20}", "problem": {}, "g": 1.0,
             "backend": f"b{i % 3}", "params_text": f"cut={i}", "status": "ok", "state": 0, "energy": 1.0 + 1.0 / (i + 1),
             "energy_error": 1.0 / (i + 1), "error_estimate": None, "solve_cpu_s": float(i), "cpu_time_s": float(i),
             "solve_wall_s": float(i), "peak_rss_bytes": 1 << 20, "n_up": 1, "n_down": 1}
            for i in range(2000)]
    frame = pd.DataFrame(rows)

    def tables():
        with_refs = attach_references(frame, references=lambda problem: [])
        return accuracy_vs_cost_table(with_refs)

    table = benchmark(tables)
    assert len(table) == 60 * 4  # (problem, backend) pairs x thresholds
