"""The benchmark harness: suites, isolated runner, store, resume, Dask, tables, gate, advisor.

(Its reliability under outside faults -- retries, lost workers, default Dask workers, concurrent
sweeps, damaged stores and baselines -- and the executor are tested in test_harness_reliability.py.)

Toy backends (written to a temporary folder and registered through the ``trapbench.backends``
entry-point group, exactly as a third-party package would be) stand in for real methods where a
test needs a task that sleeps, allocates, aborts or answers instantly. The toy that answers returns
the non-interacting ground-state energy E0 = (N_up^2 + N_down^2)/2 (equal trap frequencies omega = 1:
each species fills the lowest N_s oscillator levels n + 1/2, sum = N_s^2/2), plus a controlled
discretisation error c / cutoff^2 so that parameter ladders have a cost/accuracy trade-off.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from trapbench.bench import runner
from trapbench.bench.executor import Limits
from trapbench.bench.store import Store
from trapbench.bench.suite import Tolerance, load_suite, parse_suite
from trapbench.bench.sweep import SweepOptions, run_sweep
from trapbench.problems.errors import SpecError

TOY_SOURCE = '''
import os, time
import numpy as np
from trapbench.backends.base import Backend, Parameter, Support
from trapbench.backends.result import Solution


class ExactToy(Backend):
    """E0 = (N_up^2 + N_down^2)/2 + 1/cutoff^2 (an artificial, known discretisation error); g = 0 only."""
    name = "toy-exact"
    version = "1"
    parameters = (Parameter("cutoff", int, 10, "artificial cutoff", minimum=1),
                  Parameter("work", int, 0, "busy-loop iterations to make a run cost CPU time", minimum=0))

    def supports(self, problem, params=None):
        if problem.coupling != 0.0:
            return Support.no("only the non-interacting problem (g = 0)")
        return Support.yes()

    def compute(self, problem, params):
        total = 0
        for i in range(params["work"]):
            total += i
        c = params["cutoff"]
        exact = (problem.up.count ** 2 + problem.down.count ** 2) / 2
        return Solution(energies=[exact + 1.0 / c**2], error_estimate=1.0 / c**2)


class SleepToy(ExactToy):
    name = "toy-sleep"
    parameters = (Parameter("seconds", float, 5.0, "how long to sleep"),)

    def supports(self, problem, params=None):
        return Support.yes()

    def compute(self, problem, params):
        time.sleep(params["seconds"])
        return Solution(energies=[0.0])


class AllocToy(SleepToy):
    name = "toy-alloc"
    parameters = (Parameter("mib", int, 2000, "how much memory to touch, MiB"),)

    def compute(self, problem, params):
        blocks = []
        for _ in range(params["mib"] // 20):
            blocks.append(np.ones(20 * 1024 * 1024 // 8))
            time.sleep(0.01)  # slow enough that the 20 ms memory poll sees every step
        return Solution(energies=[float(len(blocks))])


class AbortToy(SleepToy):
    name = "toy-abort"
    parameters = ()

    def compute(self, problem, params):
        os.abort()


class FlakyToy(SleepToy):
    """Dies the first time (as if killed from outside), answers E0 afterwards: a marker file remembers."""
    name = "toy-flaky"
    parameters = (Parameter("marker", str, "", "file created by the first attempt"),)

    def compute(self, problem, params):
        if not os.path.exists(params["marker"]):
            open(params["marker"], "w").close()
            os._exit(3)
        return Solution(energies=[(problem.up.count ** 2 + problem.down.count ** 2) / 2])


class RangedToy(ExactToy):
    """E0 + 1/cutoff^2 like toy-exact, but a cutoff below the particle number is outside its range."""
    name = "toy-ranged"

    def supports(self, problem, params=None):
        if params is not None and params["cutoff"] < problem.n_particles:
            return Support.no(f"cutoff {params['cutoff']} is below the particle number {problem.n_particles}")
        return super().supports(problem, params)


class RaisingToy(SleepToy):
    """Raises the exception class named by its parameter (SolverError, SpecError, ZeroDivisionError)."""
    name = "toy-raise"
    parameters = (Parameter("kind", str, "SolverError", "exception to raise"),)

    def compute(self, problem, params):
        from trapbench.backends.base import SolverError
        from trapbench.problems.errors import SpecError
        if params["kind"] == "SolverError":
            raise SolverError("did not converge in 3 sweeps")
        if params["kind"] == "SpecError":
            raise SpecError("param.kind", "too large for this size")
        return 1 / 0


class PreloadToy(SleepToy):
    """Declares a module for the task server to preload; reports whether it was imported before its task began."""
    name = "toy-preload"
    parameters = ()
    preload = ("trapbench_toys_warm",)

    def compute(self, problem, params):
        import sys
        return Solution(energies=[0.0], diagnostics={"preloaded": "trapbench_toys_warm" in sys.modules})


class ThreadsToy(SleepToy):
    """Reports the BLAS thread limit in force while it computes (diagnostics["blas_threads"])."""
    name = "toy-threads"
    parameters = ()

    def compute(self, problem, params):
        from threadpoolctl import threadpool_info
        blas = [pool["num_threads"] for pool in threadpool_info() if pool["user_api"] == "blas"]
        return Solution(energies=[0.0], diagnostics={"blas_threads": max(blas) if blas else None})
'''

ENTRY_POINTS = """[trapbench.backends]
toy-exact = trapbench_toys:ExactToy
toy-sleep = trapbench_toys:SleepToy
toy-alloc = trapbench_toys:AllocToy
toy-abort = trapbench_toys:AbortToy
toy-flaky = trapbench_toys:FlakyToy
toy-ranged = trapbench_toys:RangedToy
toy-raise = trapbench_toys:RaisingToy
toy-threads = trapbench_toys:ThreadsToy
toy-preload = trapbench_toys:PreloadToy
"""


@pytest.fixture(scope="module")
def toy_path(tmp_path_factory) -> Path:
    """A folder holding the toy backends as an installed distribution, put on sys.path for this module."""
    folder = tmp_path_factory.mktemp("toys")
    (folder / "trapbench_toys.py").write_text(TOY_SOURCE)
    (folder / "trapbench_toys_warm.py").write_text('"""Preloaded by the task server for toy-preload."""\n')
    info = folder / "trapbench_toys-0.0.dist-info"
    info.mkdir()
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: trapbench-toys\nVersion: 0.0\n")
    (info / "entry_points.txt").write_text(ENTRY_POINTS)
    sys.path.insert(0, str(folder))
    yield folder
    sys.path.remove(str(folder))


def suite_text(body: str, name: str = "t") -> str:
    return f'name = "{name}"\n' + textwrap.dedent(body)


FREE_PROBLEMS = """
[[problems]]
name = "1+1 free"
up = { count = 1 }
down = { count = 1 }
interaction = { g = 0.0 }

[[problems]]
name = "2+1 free"
up = { count = 2 }
down = { count = 1 }
interaction = { g = 0.0 }
"""


# ----------------------------------------------------------------------------- suites


def test_suite_expands_problems_backends_and_ladders(toy_path):
    suite = parse_suite(suite_text(FREE_PROBLEMS + """
        [[problems]]
        name = "scan"
        up = { count = 1 }
        down = { count = 1 }
        interaction = { g = [0.0, 1.0, 2.0] }

        [tolerances]
        energy = { abs = 1e-8, rel = 1e-5 }

        [[backends]]
        name = "toy-exact"
        params = { work = 0 }
        ladder = [{ cutoff = 2 }, { cutoff = 4 }]
        grid = { work = [0, 10] }
        """))
    tasks = suite.tasks()
    # (1 + 1 + 3 problem points) x (2 rungs x 2 grid values), but the scan's g = 0 point is the
    # same physics as "1+1 free" and runs once
    assert len(tasks) == 4 * 4
    assert len({t.key for t in tasks}) == 16
    assert {t.params["cutoff"] for t in tasks} == {2, 4}
    assert sorted({t.problem.coupling for t in tasks if t.problem_name == "scan"}) == [1.0, 2.0]
    assert suite.tolerance("energy") == Tolerance(abs=1e-8, rel=1e-5)


@pytest.mark.parametrize(
    "body, field",
    [
        ('[[backends]]\nname = "toy-exact"\n', "problems"),
        (FREE_PROBLEMS, "backends"),
        (FREE_PROBLEMS + '[[backends]]\nname = "toy-exact"\nladder = [{ cutoff = "many" }]\n', "backends[0].ladder[0].cutoff"),
        (FREE_PROBLEMS + '[[backends]]\nname = "toy-exact"\nparams = { cutof = 3 }\n', "backends[0].params.cutof"),
        (FREE_PROBLEMS + '[[backends]]\nname = "toy-exact"\nproblems = ["nope"]\n', "backends[0].problems[0]"),
        (FREE_PROBLEMS + '[[backends]]\nname = "toy-exact"\ntimeout = -1\n', "backends[0].timeout"),
        (FREE_PROBLEMS + '[[backends]]\nname = "toy-exact"\ngrid = { cutoff = 3 }\n', "backends[0].grid.cutoff"),
        (FREE_PROBLEMS + '[[backends]]\nname = "toy-exact"\nbogus = 1\n', "backends[0].bogus"),
        (FREE_PROBLEMS + '[tolerances]\nenergy = { abs = -1 }\n[[backends]]\nname = "toy-exact"\n', "tolerances.energy.abs"),
        (FREE_PROBLEMS + '[tolerances]\nenergy = { absolute = 1 }\n[[backends]]\nname = "toy-exact"\n',
         "tolerances.energy.absolute"),
        ('[[problems]]\nname = "a"\nup = { count = 1, mass = -2 }\ndown = { count = 1 }\ninteraction = { g = 1 }\n'
         '[[backends]]\nname = "toy-exact"\n', "problems[0].up.mass"),
        ('[[problems]]\nup = { count = 1 }\ndown = { count = 1 }\ninteraction = { g = 1 }\n'
         '[[backends]]\nname = "toy-exact"\n', "problems[0].name"),
        (FREE_PROBLEMS + FREE_PROBLEMS + '[[backends]]\nname = "toy-exact"\n', "problems[2].name"),
        ("problems = [", "<string>"),
    ],
)
def test_malformed_suites_name_the_field(toy_path, body, field):
    with pytest.raises(SpecError) as info:
        parse_suite(suite_text(body) if not body.startswith("problems = [") else body)
    assert info.value.field == field, str(info.value)


def test_a_suite_restricted_to_some_backends_keeps_their_tasks_and_keys(toy_path):
    """`trapbench sweep SUITE --backend NAME`: only that backend's plans run, under the task keys the whole suite
    gives them (so their results pool with the rest in a store); an unknown name is refused with a suggestion."""
    suite = parse_suite(suite_text(FREE_PROBLEMS + """
        [[backends]]
        name = "toy-exact"
        ladder = [{ cutoff = 2 }, { cutoff = 4 }]
        [[backends]]
        name = "toy-sleep"
        """))
    whole = {t.key: t for t in suite.tasks()}
    only = suite.restricted_to(["toy-exact"]).tasks()
    assert len(only) == 4 and {t.backend for t in only} == {"toy-exact"}
    assert all(whole[t.key] == t for t in only)
    assert len(whole) > len(only)
    with pytest.raises(SpecError, match="runs no backend 'toy-exac'.*did you mean 'toy-exact'") as info:
        suite.restricted_to(["toy-exac"])
    assert info.value.field == "--backend"


def test_unknown_builtin_suite_lists_the_builtin_ones():
    with pytest.raises(SpecError, match="built-in"):
        load_suite("no-such-suite")


# ----------------------------------------------------------------------------- runner


def test_runner_records_timeout_memory_and_abort_and_keeps_the_rest(toy_path, tmp_path):
    suite = parse_suite(suite_text(FREE_PROBLEMS + """
        [[backends]]
        name = "toy-exact"
        ladder = [{ cutoff = 10 }, { cutoff = 100 }]

        [[backends]]
        name = "toy-sleep"
        problems = ["1+1 free"]
        params = { seconds = 30.0 }
        timeout = 1.5

        [[backends]]
        name = "toy-alloc"
        problems = ["1+1 free"]
        params = { mib = 3000 }
        memory = 300

        [[backends]]
        name = "toy-abort"
        problems = ["1+1 free"]
        """))
    store_path = tmp_path / "r.sqlite"
    report = run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    assert report.ran == 7 and not report.interrupted
    assert report.not_ok == 3 and not report.succeeded
    with Store.open(store_path) as store:
        tasks = store.tasks_frame()
    by_backend = {b: g for b, g in tasks.groupby("backend")}
    sleep = by_backend["toy-sleep"].iloc[0]
    assert sleep["status"] == "timeout" and "1.5 s" in sleep["error"]
    assert 1.5 <= sleep["wall_time_s"] < 30  # cut at its limit, before the 30 s sleep ended
    alloc = by_backend["toy-alloc"].iloc[0]
    assert alloc["status"] == "out-of-memory" and "300 MiB" in alloc["error"]
    assert alloc["peak_rss_bytes"] > 300 * runner.MIB
    abort = by_backend["toy-abort"].iloc[0]
    assert abort["status"] == "crashed" and "SIGABRT" in abort["error"]
    exact = by_backend["toy-exact"]
    assert list(exact["status"]) == ["ok"] * 4
    for row in exact.itertuples():
        expected = (row.n_up**2 + row.n_down**2) / 2 + 1 / row.params["cutoff"] ** 2
        assert row.energies[0] == pytest.approx(expected, rel=1e-14)
        assert 0 < row.peak_rss_bytes < 2 * 1024 * runner.MIB
        assert row.cpu_time_s >= 0 and row.wall_time_s > 0


def test_runner_reports_unsupported_and_backend_errors(toy_path):
    from trapbench.problems.spec import Problem

    interacting = Problem.create(1, 1, 1.0).to_dict()
    outcome = runner.run_isolated({"backend": "toy-exact", "problem": interacting, "params": {}}, Limits(timeout_s=30))
    assert outcome.status == "unsupported" and "g = 0" in outcome.error
    free = Problem.create(1, 1, 0.0).to_dict()
    bad = runner.run_isolated({"backend": "toy-exact", "problem": free, "params": {"cutoff": 0}}, Limits(timeout_s=30))
    assert bad.status == "failed" and "param.cutoff" in bad.error


def test_peak_memory_is_the_tasks_own(toy_path):
    """Two tasks touching 100 and 400 MiB report peaks that differ by about 300 MiB (not cumulative)."""
    from trapbench.problems.spec import Problem

    free = Problem.create(1, 1, 0.0).to_dict()
    small = runner.run_isolated({"backend": "toy-alloc", "problem": free, "params": {"mib": 100}}, Limits(timeout_s=60))
    large = runner.run_isolated({"backend": "toy-alloc", "problem": free, "params": {"mib": 400}}, Limits(timeout_s=60))
    again = runner.run_isolated({"backend": "toy-alloc", "problem": free, "params": {"mib": 100}}, Limits(timeout_s=60))
    assert small.status == large.status == again.status == "ok"
    difference = (large.peak_rss_bytes - small.peak_rss_bytes) / runner.MIB
    assert 250 < difference < 350
    assert abs(again.peak_rss_bytes - small.peak_rss_bytes) < 50 * runner.MIB


# ----------------------------------------------------------------------------- resume


def ladder_suite(tmp_path: Path, rungs: int, work: int) -> Path:
    ladder = ", ".join(f"{{ cutoff = {c} }}" for c in range(1, rungs + 1))
    path = tmp_path / "ladder.toml"
    path.write_text(suite_text(FREE_PROBLEMS + f"""
        [[backends]]
        name = "toy-exact"
        params = {{ work = {work} }}
        ladder = [{ladder}]
        """, name="ladder"))
    return path


def stored_rows(store_path: Path) -> dict:
    with Store.open(store_path) as store:
        frame = store.tasks_frame()
    return {r["task_key"]: r for r in frame.to_dict("records")}


def test_killed_coordinator_resumes_without_recomputing(toy_path, tmp_path):
    suite_path = ladder_suite(tmp_path, rungs=8, work=1_500_000)  # 16 tasks of ~0.1-0.3 s each
    store_path = tmp_path / "resume.sqlite"
    command = [sys.executable, "-m", "trapbench.bench.cli", "sweep", str(suite_path), "--store", str(store_path),
               "--no-progress", "--tables", "none"]
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(toy_path), os.environ.get("PYTHONPATH", "")])}
    coordinator = subprocess.Popen(command, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and coordinator.poll() is None:
        time.sleep(0.1)
        if store_path.exists() and len(stored_rows(store_path)) >= 4:
            break
    assert coordinator.poll() is None, coordinator.stderr.read().decode()
    coordinator.send_signal(signal.SIGKILL)
    coordinator.wait()
    before = stored_rows(store_path)
    assert 4 <= len(before) < 16, "the kill must land mid-sweep"
    assert all(r["status"] == "ok" for r in before.values())

    rerun = subprocess.run(command, env=env, capture_output=True, text=True, timeout=120)
    assert rerun.returncode == 0, rerun.stderr
    after = stored_rows(store_path)
    assert len(after) == 16 and all(r["status"] == "ok" for r in after.values())
    for key, row in before.items():  # finished work is neither lost nor recomputed
        assert after[key]["run_id"] == row["run_id"] and after[key]["finished_utc"] == row["finished_utc"]
    with Store.open(store_path) as store:
        runs = store.runs_frame()
    # the killed run never got to close itself; the next sweep found it orphaned and said so
    assert list(runs["status"]) == ["interrupted", "finished"]
    assert runs["tasks_skipped"].iloc[-1] == len(before)
    assert runs["tasks_run"].iloc[-1] == 16 - len(before)


def test_ctrl_c_keeps_finished_tasks(toy_path, tmp_path, monkeypatch):
    from trapbench.bench import sweep as sweep_module

    calls = []
    real = sweep_module.execute

    def interrupted_on_third(backend, problem, params, **options):
        calls.append(params)
        if len(calls) == 3:
            raise KeyboardInterrupt
        return real(backend, problem, params, **options)

    monkeypatch.setattr(sweep_module, "execute", interrupted_on_third)
    suite = load_suite(ladder_suite(tmp_path, rungs=3, work=0))
    store_path = tmp_path / "ctrl-c.sqlite"
    report = run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    assert report.interrupted and report.ran == 2 and "resume" in report.summary()
    assert len(stored_rows(store_path)) == 2
    monkeypatch.setattr(sweep_module, "execute", real)
    second = run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    assert second.skipped == 2 and second.ran == 4 and not second.interrupted


def test_rerun_and_larger_limits_recompute(toy_path, tmp_path):
    suite = parse_suite(suite_text(FREE_PROBLEMS + """
        [[backends]]
        name = "toy-sleep"
        problems = ["1+1 free"]
        params = { seconds = 1.0 }
        timeout = 0.3
        """))
    store_path = tmp_path / "limits.sqlite"
    first = run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    assert first.statuses["timeout"] == 1
    same = run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    assert same.skipped == 1 and same.ran == 0
    larger = run_sweep(suite, SweepOptions(store_path=store_path, progress=False, timeout_s=20))
    assert larger.statuses["ok"] == 1
    forced = run_sweep(suite, SweepOptions(store_path=store_path, progress=False, timeout_s=20, rerun=True))
    assert forced.ran == 1 and forced.skipped == 0


def test_results_of_another_backend_version_are_recomputed(toy_path, tmp_path):
    suite = load_suite(ladder_suite(tmp_path, rungs=2, work=0))
    store_path = tmp_path / "versions.sqlite"
    assert run_sweep(suite, SweepOptions(store_path=store_path, progress=False)).ran == 4
    with Store.open(store_path) as store, store.connection:
        store.connection.execute("UPDATE tasks SET backend_version='0-old' WHERE rowid=1")
    again = run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    assert again.ran == 1 and again.skipped == 3
    assert {r["backend_version"] for r in stored_rows(store_path).values()} == {"1"}


# ----------------------------------------------------------------------------- Dask


@pytest.mark.slow  # a LocalCluster starts and stops
def test_a_second_local_cluster_starts_without_a_port_warning():
    """Two sweeps side by side: the second cluster's HTTP server moves off the taken port 8787 silently."""
    import socket
    import warnings

    from trapbench.bench.distributed import local_cluster

    with socket.socket() as holder:
        with contextlib.suppress(OSError):  # already held by another process: the same situation
            holder.bind(("", 8787))
            holder.listen()
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            local_cluster(1).close()
    assert not [w for w in caught if "already in use" in str(w.message)]


@pytest.mark.slow  # a LocalCluster starts and stops, ~10 s
def test_dask_local_cluster_gives_the_serial_numbers(tmp_path):
    """The exact two-body backend over a g scan: serial and a 2-worker LocalCluster store identical numbers."""
    pytest.importorskip("trapbench.backends.two_body")
    suite = parse_suite(suite_text("""
        [[problems]]
        name = "1+1 scan"
        up = { count = 1 }
        down = { count = 1, mass = 2.0 }
        interaction = { g = [-3.0, -0.5, 0.7, 4.0, 20.0] }
        targets = { states = 3 }

        [[backends]]
        name = "two-body"
        """))
    serial_path, dask_path = tmp_path / "serial.sqlite", tmp_path / "dask.sqlite"
    serial = run_sweep(suite, SweepOptions(store_path=serial_path, progress=False))
    parallel = run_sweep(suite, SweepOptions(store_path=dask_path, progress=False, workers=2))
    assert serial.statuses["ok"] == parallel.statuses["ok"] == 5
    a, b = stored_rows(serial_path), stored_rows(dask_path)
    assert a.keys() == b.keys()
    for key in a:
        assert a[key]["energies"] == b[key]["energies"]  # bit for bit
        assert a[key]["scalars"] == b[key]["scalars"]
        assert b[key]["peak_rss_bytes"] > 0 and b[key]["cpu_time_s"] > 0


# ----------------------------------------------------------------------------- gate


GATE_SUITE = FREE_PROBLEMS + """
[tolerances]
energy = { abs = 1e-12, rel = 1e-10 }

[[backends]]
name = "toy-exact"
ladder = [{ cutoff = 3 }, { cutoff = 7 }]
"""


def test_check_passes_on_the_true_baseline_and_fails_on_a_perturbed_one(toy_path, tmp_path, capsys):
    from trapbench.bench.cli import main

    suite_path = tmp_path / "gate.toml"
    suite_path.write_text(suite_text(GATE_SUITE, name="gate"))
    baseline = tmp_path / "baseline.json"
    store = ["--store", str(tmp_path / "gate.sqlite"), "--no-progress"]
    assert main(["check", str(suite_path), "--baseline", str(baseline), "--update-baseline", *store]) == 0
    document = json.loads(baseline.read_text())
    assert len(document["tasks"]) == 4
    for entry in document["tasks"].values():  # the baseline holds the true numbers: E0 + 1/cutoff^2
        n_up, n_down = (1, 1) if entry["problem_name"] == "1+1 free" else (2, 1)
        assert entry["energies"][0] == pytest.approx((n_up**2 + n_down**2) / 2 + 1 / entry["params"]["cutoff"] ** 2)
    capsys.readouterr()
    assert main(["check", str(suite_path), "--baseline", str(baseline), *store]) == 0
    assert "PASSED" in capsys.readouterr().out

    perturbed = json.loads(baseline.read_text())
    key = next(iter(perturbed["tasks"]))
    perturbed["tasks"][key]["energies"][0] += 1e-8  # beyond 1e-12 + 1e-10 |E|
    baseline.write_text(json.dumps(perturbed))
    assert main(["check", str(suite_path), "--baseline", str(baseline), *store]) == 1
    out = capsys.readouterr().out
    assert "FAILED: 1 regression" in out and "changed" in out

    within = json.loads(baseline.read_text())
    within["tasks"][key]["energies"][0] -= 1e-8 - 1e-11  # back to within tolerance
    baseline.write_text(json.dumps(within))
    assert main(["check", str(suite_path), "--baseline", str(baseline), "--no-run", *store]) == 0


def test_gate_flags_new_failures_and_missing_results(toy_path, tmp_path):
    from trapbench.bench.gate import REGRESSIONS, baseline_from_tasks, compare

    suite = parse_suite(suite_text(GATE_SUITE))
    store_path = tmp_path / "g.sqlite"
    run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    with Store.open(store_path) as store:
        tasks = store.tasks_frame()
    baseline = baseline_from_tasks(tasks, "t", suite.tolerance_table)
    assert set(compare(tasks, baseline)["verdict"]) == {"ok"}

    broken = tasks.copy()
    broken.loc[0, "status"] = "crashed"
    broken = broken.drop(index=1)
    diff = compare(broken, baseline, suite.tolerance)
    verdicts = diff.set_index("task_key")["verdict"]
    assert verdicts[tasks.loc[0, "task_key"]] == "new failure"
    assert verdicts[tasks.loc[1, "task_key"]] == "missing"
    assert diff["verdict"].isin(REGRESSIONS).sum() == 2

    fewer_levels = tasks.copy()
    fewer_levels.at[2, "energies"] = []
    assert "missing" in set(compare(fewer_levels, baseline)["verdict"])


def test_malformed_baseline_is_an_input_error(tmp_path):
    from trapbench.bench.gate import read_baseline

    path = tmp_path / "b.json"
    path.write_text('{"tasks": {}}')
    with pytest.raises(SpecError, match="not a trapbench baseline"):
        read_baseline(path)
    with pytest.raises(SpecError, match="--update-baseline"):
        read_baseline(tmp_path / "absent.json")


# ----------------------------------------------------------------------------- tables


class InlineReference:
    """Reference values for the toy suite: E0 = (N_up^2 + N_down^2)/2 exactly (closed form, g = 0)."""

    def __init__(self, quantity, state, value, uncertainty, source, kind):
        self.quantity, self.state, self.value = quantity, state, value
        self.uncertainty, self.source, self.kind = uncertainty, source, kind


def free_references(problem):
    if problem.coupling != 0.0:
        return []
    value = (problem.up.count**2 + problem.down.count**2) / 2
    return [InlineReference("energy", 0, value, 0.0, "filled oscillator levels (closed form)", "exact")]


def test_agreement_and_accuracy_vs_cost_tables(toy_path, tmp_path):
    from trapbench.bench.report.figures import error_vs_cost
    from trapbench.bench.tables import (accuracy_vs_cost_table, agreement_table, attach_references,
                                        cost_vs_particle_number_table, suite_tables_markdown, write_tables)

    suite = parse_suite(suite_text(FREE_PROBLEMS + """
        [tolerances]
        energy = { abs = 0.0, rel = 1e-3 }

        [[backends]]
        name = "toy-exact"
        # costs ten times apart, so that CPU-time noise on a busy machine cannot reorder the rungs (with 1e6
        # against 2e6 iterations a CI run once measured cutoff 900 as the cheaper)
        ladder = [{ cutoff = 3, work = 0 }, { cutoff = 30, work = 100000 }, { cutoff = 300, work = 1000000 },
                  { cutoff = 900, work = 10000000 }]

        [[backends]]
        name = "toy-abort"
        problems = ["1+1 free"]
        """))
    store_path = tmp_path / "t.sqlite"
    run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    with Store.open(store_path) as store:
        frame = attach_references(store.results_frame(), free_references, suite.tolerance)

    agreement = agreement_table(frame)
    assert len(agreement) == 8
    for row in agreement.itertuples():
        cutoff = int(row.params.split("cutoff=")[1].split(",")[0])
        exact = 1.0 if row.problem_name == "1+1 free" else 2.5
        assert row.ref_value == exact
        assert row.abs_error == pytest.approx(1 / cutoff**2, rel=1e-9)
        assert row.within_tolerance == (1 / cutoff**2 <= 1e-3 * exact)
        assert row.within_error_bar  # the toy's error estimate is exactly its error

    cost = accuracy_vs_cost_table(frame)
    pick = cost[(cost["problem_name"] == "1+1 free")].set_index("target")
    # relative errors of the rungs for E0 = 1: 1/9, 1/900, 1/90000, 1/810000
    assert pick.loc[1e-2, "params"].startswith("cutoff=30,")
    assert pick.loc[1e-3, "params"].startswith("cutoff=300,")
    assert pick.loc[1e-4, "params"].startswith("cutoff=300,")
    assert pick.loc[1e-6, "params"] == "not reached"
    assert pick.loc[1e-6, "accuracy"] == pytest.approx(1 / 810000)
    assert pick.loc[1e-4, "peak_mib"] > 0 and pick.loc[1e-4, "cpu_s"] > 0

    by_n = cost_vs_particle_number_table(frame, accuracy=1e-4).set_index("n")
    assert list(by_n.index) == [2, 3] and list(by_n["problems_reached"]) == ["1/1", "1/1"]

    text = suite_tables_markdown(frame, suite, free_references)
    assert "| problem_name |" in text and "SIGABRT" in text
    figure = error_vs_cost.draw(error_vs_cost.select(frame, problem_name="1+1 free"), "1+1 free")
    assert len(figure.axes) == 2 and len(figure.axes[0].lines) == 1
    written = write_tables(frame, tmp_path / "tables", suite, free_references)
    names = {p.name for p in written}
    assert {"agreement.md", "accuracy_vs_cost.csv", "cost_vs_n.html", "error_vs_cost_1_1_free.png"} <= names


# ----------------------------------------------------------------------------- advisor


def synthetic_row(backend, n_up, n_down, g, params, accuracy, cpu, peak_mib, within=True, basis="reference"):
    return {"backend": backend, "n_up": n_up, "n_down": n_down, "mass_up": 1.0, "mass_down": 1.0, "g": g,
            "params_text": params, "status": "ok", "state": 0, "solve_cpu_s": cpu, "cpu_time_s": cpu,
            "solve_wall_s": cpu, "peak_rss_bytes": peak_mib * runner.MIB, "accuracy": accuracy,
            "error_basis": basis, "within_error_bar": within, "problem_name": f"{n_up}+{n_down}",
            # the verdict and calibration columns of attach_references: an exact reference; bars 10x too narrow if not within
            "rel_error": accuracy, "ref_rel_uncertainty": 0.0 if basis == "reference" else None, "own_rel_error": accuracy,
            "abs_error": accuracy, "ref_effective_uncertainty": 0.0, "error_bar": accuracy if within else accuracy / 10}


def test_advisor_prefers_measured_cheap_reliable_and_stays_within_neighbours():
    import pandas as pd

    from trapbench.bench.advisor import Query, advise

    rows = [
        synthetic_row("grid", 2, 2, 1.0, "a=0.2", 3e-3, 1.0, 100),
        synthetic_row("grid", 2, 2, 1.0, "a=0.1", 5e-5, 4.0, 200),
        synthetic_row("grid", 2, 2, 1.0, "a=0.05", 1e-6, 16.0, 400),
        synthetic_row("overconfident", 2, 2, 1.0, "fast", 1e-5, 0.5, 50, within=False),
        synthetic_row("basis", 2, 2, 1.0, "cut=10", 1e-3, 0.1, 60),
    ]
    # cost doubling with each particle: 2^N seconds and 10 * 2^N MiB at N = 2, 3, 4
    rows += [synthetic_row("scaling", n_up, n_down, 0.0, f"cut={n_up + n_down}", 1e-5, 2.0 ** (n_up + n_down),
                           10 * 2.0 ** (n_up + n_down)) for n_up, n_down in ((1, 1), (2, 1), (2, 2))]
    frame = pd.DataFrame(rows)

    advice = advise(frame, Query(2, 2, g=1.0, accuracy=1e-4))
    assert advice.best.backend == "grid" and advice.best.params == "a=0.1"
    assert advice.best.confidence == "high" and advice.best.cpu_s == 4.0
    # cheapest, but its error bars missed the reference: never recommended
    assert "overconfident" not in [r.backend for r in advice.recommendations]
    assert "outside twice the backend's own error bar" in advice.rejected["overconfident"]
    assert "best stored relative error 0.001" in advice.rejected["basis"]

    nearby = advise(frame, Query(2, 2, g=1.3, accuracy=1e-4)).best
    assert nearby.evidence == "nearby g" and nearby.confidence == "medium"

    far = advise(frame, Query(3, 3, g=0.0, accuracy=1e-4))  # other particle numbers are not neighbours
    assert far.best is None and "only at other particle numbers" in far.rejected["scaling"]
    # the built-in map measures no g = 0 point (a regime of its own): the advice names a suite to write
    assert "No evidence" in far.explain() and "trapbench sweep SUITE.toml" in far.explain()


def test_advisor_drops_backends_that_do_not_support_the_problem():
    import pandas as pd

    pytest.importorskip("trapbench.backends.two_body")
    from trapbench.bench.advisor import Query, advise

    frame = pd.DataFrame([synthetic_row("two-body", 1, 1, 1.0, "", 1e-14, 0.01, 80)])
    assert advise(frame, Query(1, 1, g=1.0, accuracy=1e-10)).best.backend == "two-body"
    advice = advise(frame, Query(2, 1, g=1.0, accuracy=1e-4))
    assert advice.best is None and "does not support" in advice.rejected["two-body"]


# ----------------------------------------------------------------------------- command line


def test_sweep_export_and_advise_commands(toy_path, tmp_path, capsys):
    import pandas as pd

    from trapbench.bench.cli import main

    suite_path = ladder_suite(tmp_path, rungs=3, work=0)
    store = ["--store", str(tmp_path / "cli.sqlite")]
    assert main(["sweep", str(suite_path), *store, "--no-progress"]) == 0
    out = capsys.readouterr().out
    assert "## Accuracy against cost" in out and "| 2+1 free | 0 | toy-exact |" in out

    assert main(["export", *store, "--suite", str(suite_path), "--results", str(tmp_path / "r.csv")]) == 0
    assert main(["export", *store, "--results", str(tmp_path / "r.parquet"), "--tables", str(tmp_path / "t"),
                 "--no-plots"]) == 0
    csv, parquet = pd.read_csv(tmp_path / "r.csv"), pd.read_parquet(tmp_path / "r.parquet")
    assert len(csv) == len(parquet) == 6
    expected = sorted((n_up**2 + n_down**2) / 2 + 1 / c**2 for n_up, n_down in ((1, 1), (2, 1)) for c in (1, 2, 3))
    assert sorted(parquet["energy"]) == pytest.approx(expected, rel=1e-14)
    assert (tmp_path / "t" / "accuracy_vs_cost.html").exists()

    capsys.readouterr()
    # the cheapest rung within 5%: cutoff 3, relative error (1/9) / 2.5 = 0.0444 (against the g = 0
    # reference E0 = 2.5 or, equally, the toy's own error bar 1/cutoff^2)
    # the user's store alone (--no-shipped): the shipped method map holds real measurements of 2+1 at g = 0
    assert main(["advise", *store, "--no-shipped", "--up", "2", "--down", "1", "--g", "0", "--accuracy", "0.05"]) == 0
    out = capsys.readouterr().out
    assert "Recommended: toy-exact with cutoff=3, work=0" in out and "| 0.04444 |" in out
    assert main(["advise", *store, "--no-shipped", "--up", "2", "--down", "1", "--g", "0", "--accuracy", "1e-9"]) == 1
    assert main(["sweep", str(tmp_path / "absent.toml"), *store]) == 2
    capsys.readouterr()
    assert main(["sweep", str(suite_path), *store, "--no-progress", "--backend", "toy-exact", "--tables", "none"]) == 0
    assert main(["sweep", str(suite_path), *store, "--backend", "toy-exac"]) == 2
    assert "--backend: suite" in capsys.readouterr().err


@pytest.mark.slow  # three pytest sessions in subprocesses, ~13 s
def test_pytest_fixture_gates_a_users_ci(toy_path, tmp_path):
    suite_path = tmp_path / "gate.toml"
    suite_path.write_text(suite_text(GATE_SUITE, name="gate"))
    baseline = tmp_path / "baseline.json"
    user_test = tmp_path / "test_user_ci.py"
    user_test.write_text(f"def test_no_regression(trapbench_gate):\n"
                         f"    trapbench_gate({str(suite_path)!r}, {str(baseline)!r})\n")
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(toy_path), os.environ.get("PYTHONPATH", "")])}

    def user_pytest(*extra):
        return subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "trapbench.bench.pytest_plugin",
                               "-p", "no:cacheprovider", "--rootdir", str(tmp_path), str(user_test), *extra],
                              env=env, capture_output=True, text=True, timeout=120, cwd=tmp_path)

    assert user_pytest("--trapbench-update-baseline").returncode == 0
    assert len(json.loads(baseline.read_text())["tasks"]) == 4
    assert user_pytest().returncode == 0
    perturbed = json.loads(baseline.read_text())
    next(iter(perturbed["tasks"].values()))["energies"][0] *= 1 + 1e-7
    baseline.write_text(json.dumps(perturbed))
    failed = user_pytest()
    assert failed.returncode == 1 and "regression gate FAILED: 1 regression" in failed.stdout
