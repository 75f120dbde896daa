"""A pytest plugin for using the regression gate in a user's own CI.

Enable it in a ``conftest.py`` with ``pytest_plugins = ["trapbench.bench.pytest_plugin"]``, then::

    def test_no_numerical_regression(trapbench_gate):
        trapbench_gate("quick", "baselines/quick.json")        # built-in suite name or suite file

The fixture runs the suite afresh into a temporary store and fails the test with the diff table
when any value moved beyond its tolerance, a task newly fails, a baseline result is missing, or a
task of the suite is not in the baseline (``trapbench_gate(..., allow_new=True)`` accepts those).
``pytest --trapbench-update-baseline`` writes the current results as the new baseline instead.
"""

from __future__ import annotations

from pathlib import Path

import pytest


def pytest_addoption(parser) -> None:
    parser.addoption("--trapbench-update-baseline", action="store_true", default=False,
                     help="write the current trapbench results as the baseline instead of comparing")


@pytest.fixture
def trapbench_gate(request, tmp_path):
    """Callable ``(suite, baseline_path, allow_new=False, **sweep_options) -> GateResult``; fails the test on a regression."""
    from .gate import assert_no_regression, baseline_from_tasks, write_baseline
    from .store import Store
    from .suite import load_suite
    from .sweep import SweepOptions, run_sweep

    def gate(suite, baseline_path: str | Path, allow_new: bool = False, **options):
        if not hasattr(suite, "tasks"):
            suite = load_suite(suite)
        store_path = tmp_path / "trapbench-gate.sqlite"
        if request.config.getoption("--trapbench-update-baseline"):
            report = run_sweep(suite, SweepOptions(store_path=store_path, progress=False, rerun=True, **options))
            with Store.open(store_path) as store:
                tasks = store.tasks_frame(keys=report.task_keys)
            write_baseline(baseline_path, baseline_from_tasks(tasks, suite.name, suite.tolerance_table))
            return None
        try:
            return assert_no_regression(suite, baseline_path, store_path, allow_new, **options)
        except AssertionError as exc:
            pytest.fail(str(exc), pytrace=False)

    return gate
