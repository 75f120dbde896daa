"""The harness under faults from outside, and its one executor.

Retries of failed and crashed tasks, a Dask scheduler with a worker in its default (daemonic)
configuration started here on 127.0.0.1 (tasks isolated there with time limit, memory cap and crash
containment; a sweep that loses every worker or stops making progress ends with a message instead of
waiting), one writer per store, damaged stores and baselines refused in one line, suites checked
completely at load time, the sweep's exit status, and the executor's single error handling in and
out of process, including the BLAS thread limit reaching the backend. The toy backends are those of
test_harness.py (registered through entry points as a third-party package would be).
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
import types
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))
from test_harness import FREE_PROBLEMS, GATE_SUITE, ladder_suite, stored_rows, suite_text, toy_path  # noqa: E402, F401

from trapbench.bench.cli import main  # noqa: E402
from trapbench.bench.executor import Limits, execute  # noqa: E402
from trapbench.bench.runner import FORKSERVER, SUBPROCESS, run_isolated  # noqa: E402
from trapbench.bench.store import Store  # noqa: E402
from trapbench.bench.suite import load_suite, parse_suite  # noqa: E402
from trapbench.bench.sweep import SweepOptions, run_sweep  # noqa: E402
from trapbench.problems.errors import SpecError  # noqa: E402
from trapbench.problems.spec import Problem  # noqa: E402


def toy_env(toy_path: Path) -> dict:
    return {**os.environ, "PYTHONPATH": os.pathsep.join([str(toy_path), os.environ.get("PYTHONPATH", "")])}


def one_line_error(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert "Traceback" not in err[0]
    return err[0]


# ----------------------------------------------------------------------------- retries (item 1)


def test_failed_and_crashed_tasks_are_retried_and_ok_results_kept(toy_path, tmp_path):
    marker = tmp_path / "first-attempt-happened"
    suite = parse_suite(suite_text(FREE_PROBLEMS + f"""
        [[backends]]
        name = "toy-exact"
        ladder = [{{ cutoff = 3 }}]

        [[backends]]
        name = "toy-flaky"
        problems = ["2+1 free"]
        params = {{ marker = "{marker}" }}
        """))
    store_path = tmp_path / "retry.sqlite"
    first = run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    assert first.statuses == {"ok": 2, "crashed": 1} and first.not_ok == 1 and not first.succeeded
    before = stored_rows(store_path)

    kept = run_sweep(suite, SweepOptions(store_path=store_path, progress=False, keep_failures=True))
    assert kept.ran == 0 and kept.not_ok == 1

    retried = run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    assert retried.ran == 1 and retried.statuses == {"ok": 1} and retried.succeeded
    assert retried.retried == {"retry after crashed": 1}
    assert "1 retry after crashed" in retried.summary()
    after = stored_rows(store_path)
    flaky = next(r for r in after.values() if r["backend"] == "toy-flaky")
    assert flaky["energies"] == [2.5]  # (2^2 + 1^2)/2
    for key, row in before.items():  # ok results are neither lost nor recomputed
        if row["status"] == "ok":
            assert after[key]["finished_utc"] == row["finished_utc"]


# ----------------------------------------------------------------------------- Dask (items 2, 3, 8)


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def start(command: list[str], env: dict, log: Path) -> subprocess.Popen:
    return subprocess.Popen(command, env=env, stdout=subprocess.DEVNULL, stderr=open(log, "wb"),
                            start_new_session=True)


def kill_tree(process: subprocess.Popen) -> None:
    """SIGKILL a process and every descendant, by process id."""
    import psutil

    try:
        root = psutil.Process(process.pid)
        family = root.children(recursive=True) + [root]
    except psutil.NoSuchProcess:
        family = []
    for member in family:
        try:
            member.send_signal(signal.SIGKILL)
        except psutil.NoSuchProcess:
            pass
    process.wait(timeout=30)


def start_worker(address: str, env: dict, log: Path) -> subprocess.Popen:
    """A `dask worker` in its default configuration (a nanny-supervised, daemonic worker process)."""
    return start([sys.executable, "-m", "distributed.cli.dask_worker", address, "--host", "127.0.0.1",
                  "--no-dashboard"], env, log)


def wait_for_workers(address: str, count: int, deadline_s: float = 60) -> None:
    from distributed import Client

    with Client(address, timeout=deadline_s) as client:
        client.wait_for_workers(count, timeout=deadline_s)


@pytest.mark.slow  # a scheduler and workers start in subprocesses; ~40 s
def test_default_dask_worker_isolates_tasks_and_a_lost_cluster_never_hangs(toy_path, tmp_path):
    pytest.importorskip("distributed")
    env = toy_env(toy_path)
    address = f"tcp://127.0.0.1:{free_port()}"
    scheduler = start([sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1", "--port",
                       address.rsplit(":", 1)[1], "--no-dashboard"], env, tmp_path / "scheduler.log")
    workers = [start_worker(address, env, tmp_path / "worker1.log")]
    try:
        wait_for_workers(address, 1)
        # 1. the same isolation guarantees as a local sweep, on an unmodified worker
        isolation = parse_suite(suite_text(FREE_PROBLEMS + """
            [[backends]]
            name = "toy-exact"
            problems = ["2+1 free"]

            [[backends]]
            name = "toy-sleep"
            problems = ["1+1 free"]
            params = { seconds = 60.0 }
            timeout = 4

            [[backends]]
            name = "toy-alloc"
            problems = ["1+1 free"]
            params = { mib = 3000 }
            memory = 300

            [[backends]]
            name = "toy-abort"
            problems = ["1+1 free"]
            """))
        report = run_sweep(isolation, SweepOptions(store_path=tmp_path / "iso.sqlite", progress=False, scheduler=address))
        rows = {r["backend"]: r for r in stored_rows(tmp_path / "iso.sqlite").values()}
        assert rows["toy-exact"]["status"] == "ok" and rows["toy-exact"]["energies"] == [2.5 + 1 / 10**2]
        assert rows["toy-sleep"]["status"] == "timeout" and rows["toy-sleep"]["wall_time_s"] < 30
        assert rows["toy-alloc"]["status"] == "out-of-memory"
        assert rows["toy-abort"]["status"] == "crashed" and "SIGABRT" in rows["toy-abort"]["error"]
        assert report.not_ok == 3

        # 2. every worker killed mid-sweep: the sweep stops within the wait, keeps what finished
        slow = load_suite(write_sleep_suite(tmp_path, count=6, seconds=2.0))
        store_path = tmp_path / "lost.sqlite"
        killer = threading.Thread(target=kill_when_stored, args=(store_path, workers[0]))
        killer.start()
        began = time.monotonic()
        lost = run_sweep(slow, SweepOptions(store_path=store_path, progress=False, scheduler=address, worker_wait_s=3))
        killer.join()
        assert time.monotonic() - began < 90
        assert "no Dask worker connected for 3 s" in lost.stalled and "resume" in lost.summary()
        finished = stored_rows(store_path)
        assert 1 <= len(finished) < 6 and all(r["status"] == "ok" for r in finished.values())
        with Store.open(store_path) as store:
            assert store.runs_frame()["status"].iloc[-1] == "stalled"

        # 3. a new worker: the same command resumes with the rest
        workers.append(start_worker(address, env, tmp_path / "worker2.log"))
        wait_for_workers(address, 1)
        resumed = run_sweep(slow, SweepOptions(store_path=store_path, progress=False, scheduler=address))
        assert resumed.skipped == len(finished) and resumed.succeeded
        assert len(stored_rows(store_path)) == 6

        # 4. workers alive but nothing finishes: stopped after the stall time
        stuck = parse_suite(suite_text(FREE_PROBLEMS + """
            [[backends]]
            name = "toy-sleep"
            problems = ["1+1 free"]
            params = { seconds = 20.0 }
            """))
        stalled = run_sweep(stuck, SweepOptions(store_path=tmp_path / "stuck.sqlite", progress=False,
                                                scheduler=address, stall_s=2))
        assert "no task finished for 2 s" in stalled.stalled and stalled.ran == 0
    finally:
        for process in workers + [scheduler]:
            kill_tree(process)


class _LostResultFuture:
    """A Dask future reported done whose result then went down with its worker (Dask marks it lost)."""

    def __init__(self):
        self.fetch_timeouts = []

    def result(self, timeout=None):
        self.fetch_timeouts.append(timeout)
        if timeout is None:  # what distributed does here: wait for a rerun on a worker that never comes
            raise AssertionError("an unbounded fetch of a lost result waits forever")
        raise TimeoutError


class _ClusterWithoutWorkers:
    """A Client whose only worker died after its task finished: no worker connected, results lost."""

    def __init__(self, address):
        self.futures = []

    def submit(self, *args, **kwargs):
        self.futures.append(_LostResultFuture())
        return self.futures[-1]

    def nthreads(self, callback_timeout=None):
        return {}

    def cancel(self, futures, force=False):
        pass

    def close(self, timeout=None):
        pass


def test_a_result_lost_with_its_worker_is_not_awaited_without_bound(toy_path, tmp_path, monkeypatch):
    """The race behind a hung CI run: ``wait`` reports a task done, its worker is killed before the result
    is fetched. The coordinator bounds the fetch, keeps the task pending and stops after the worker wait."""
    import distributed

    from trapbench.bench import distributed as on_dask

    clients = []

    def client(address):
        clients.append(_ClusterWithoutWorkers(address))
        return clients[-1]

    def wait_once_done(futures, timeout, return_when):  # the first poll sees them done, later ones nothing
        if not getattr(wait_once_done, "called", False):
            wait_once_done.called = True
            return types.SimpleNamespace(done=set(futures))
        raise TimeoutError

    monkeypatch.setattr(distributed, "Client", client)
    monkeypatch.setattr(distributed, "wait", wait_once_done)
    monkeypatch.setattr(on_dask, "QUERY_TIMEOUT_S", 0.1)
    suite = load_suite(write_sleep_suite(tmp_path, count=2, seconds=0.0))
    finished = []
    began = time.monotonic()
    with pytest.raises(on_dask.SweepStalled, match="no Dask worker connected for 0.5 s"):
        on_dask.run_on_dask(suite.tasks(), lambda task: Limits(timeout_s=10), lambda *a: finished.append(a),
                            scheduler="tcp://127.0.0.1:1", worker_wait_s=0.5)
    assert time.monotonic() - began < 10 and finished == []
    assert [f.fetch_timeouts for f in clients[0].futures] == [[0.1], [0.1]]


def write_sleep_suite(tmp_path: Path, count: int, seconds: float) -> Path:
    ladder = ", ".join(f"{{ seconds = {seconds + i / 1000} }}" for i in range(count))
    path = tmp_path / "sleepy.toml"
    path.write_text(suite_text(FREE_PROBLEMS + f"""
        [[backends]]
        name = "toy-sleep"
        problems = ["1+1 free"]
        ladder = [{ladder}]
        """, name="sleepy"))
    return path


def kill_when_stored(store_path: Path, worker: subprocess.Popen, deadline_s: float = 60) -> None:
    deadline = time.monotonic() + deadline_s
    while time.monotonic() < deadline:
        time.sleep(0.2)
        if store_path.exists() and stored_rows(store_path):
            break
    kill_tree(worker)


# ----------------------------------------------------------------------------- one writer (item 4)


def test_a_second_sweep_on_a_busy_store_is_refused_and_a_killed_run_is_marked(toy_path, tmp_path, capsys):
    suite_path = write_sleep_suite(tmp_path, count=20, seconds=0.5)
    store_path = tmp_path / "busy.sqlite"
    command = [sys.executable, "-m", "trapbench.bench.cli", "sweep", str(suite_path), "--store", str(store_path),
               "--no-progress", "--tables", "none"]
    first = subprocess.Popen(command, env=toy_env(toy_path), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and not (store_path.exists() and stored_rows(store_path)):
            time.sleep(0.1)
        with pytest.raises(SpecError, match="another sweep is writing this store") as refused:
            run_sweep(load_suite(suite_path), SweepOptions(store_path=store_path, progress=False))
        assert f"pid {first.pid}" in str(refused.value) and str(store_path) in str(refused.value)
        assert main(["sweep", str(suite_path), "--store", str(store_path), "--no-progress"]) == 2
        assert "another sweep" in one_line_error(capsys)
        with Store.open(store_path) as store:  # a reader is welcome, and the live run stays "running"
            assert list(store.runs_frame()["status"]) == ["running"]
    finally:
        first.send_signal(signal.SIGKILL)
        first.wait()
    with Store.open(store_path) as store:
        assert list(store.runs_frame()["status"]) == ["interrupted"]


def test_sigterm_stops_a_background_dask_sweep_like_ctrl_c(toy_path, tmp_path):
    """`kill PID` stops a sweep running in the background as Ctrl-C would: a non-interactive shell starts background
    jobs with SIGINT ignored (POSIX, Shell Command Language 2.11), so SIGTERM is the way in. The tasks in flight and
    the Dask workers end, the run is marked interrupted, and the finished tasks are kept."""
    import psutil

    suite_path = write_sleep_suite(tmp_path, count=12, seconds=1.0)
    store_path = tmp_path / "terminated.sqlite"
    command = [sys.executable, "-m", "trapbench.bench.cli", "sweep", str(suite_path), "--store", str(store_path),
               "--workers", "2", "--no-progress", "--tables", "none"]
    sweep = subprocess.Popen(command, env=toy_env(toy_path), stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                             preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_IGN))
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and not (store_path.exists() and len(stored_rows(store_path)) >= 2):
            time.sleep(0.1)
        family = psutil.Process(sweep.pid).children(recursive=True)
        assert sweep.poll() is None and family, "the signal must land mid-sweep, with workers running"
        sweep.send_signal(signal.SIGTERM)
        code = sweep.wait(timeout=90)
    finally:
        if sweep.poll() is None:
            sweep.kill()
            sweep.wait()
    assert code == 130, sweep.stderr.read().decode()
    _, alive = psutil.wait_procs(family, timeout=30)
    assert not alive, f"left behind: {[p.cmdline() for p in alive]}"
    with Store.open(store_path) as store:
        assert list(store.runs_frame()["status"]) == ["interrupted"]
    kept = stored_rows(store_path)
    assert 2 <= len(kept) < 12 and all(row["status"] == "ok" for row in kept.values())


def test_a_reader_holding_the_lock_for_a_moment_does_not_refuse_a_sweep(toy_path, tmp_path):
    """A reader opening the store takes the writer lock for one UPDATE; a sweep starting then must wait, not fail."""
    suite_path = ladder_suite(tmp_path, rungs=2, work=0)
    store_path = tmp_path / "reader.sqlite"
    Store.open(store_path).close()
    holding, released = threading.Event(), threading.Event()

    def brief_reader() -> None:
        with Store.open(store_path) as store, store.writer_lock():
            holding.set()
            time.sleep(0.5)
        released.set()

    reader = threading.Thread(target=brief_reader)
    reader.start()
    holding.wait(10)
    report = run_sweep(load_suite(suite_path), SweepOptions(store_path=store_path, progress=False))
    reader.join()
    assert released.is_set() and report.ran == 4 and len(stored_rows(store_path)) == 4


# ----------------------------------------------------------------------------- damaged inputs (items 5, 6)


def damaged_copies(tmp_path: Path, good: Path) -> dict[str, Path]:
    data = good.read_bytes()
    copies = {"truncated": data[: len(data) // 2], "garbage": os.urandom(len(data)), "empty-header": b"SQLite format 3\x00"}
    paths = {}
    for name, content in copies.items():
        paths[name] = tmp_path / f"{name}.sqlite"
        paths[name].write_bytes(content)
    other = tmp_path / "other-program.sqlite"
    import sqlite3

    with sqlite3.connect(other) as connection:
        connection.execute("CREATE TABLE tasks (name TEXT)")
    connection.close()
    paths["foreign"] = other
    return paths


def test_a_damaged_store_is_one_line_naming_the_file(toy_path, tmp_path, capsys):
    suite_path = ladder_suite(tmp_path, rungs=8, work=0)
    good = tmp_path / "good.sqlite"
    run_sweep(load_suite(suite_path), SweepOptions(store_path=good, progress=False))
    baseline = tmp_path / "b.json"
    assert main(["check", str(suite_path), "--baseline", str(baseline), "--update-baseline", "--no-run",
                 "--store", str(good)]) == 0
    capsys.readouterr()
    for kind, path in damaged_copies(tmp_path, good).items():
        for command in (["sweep", str(suite_path), "--no-progress"], ["export"],
                        ["check", str(suite_path), "--baseline", str(baseline), "--no-run"]):
            assert main([*command, "--store", str(path)]) == 2, (kind, command)
            line = one_line_error(capsys)
            assert str(path) in line and "not a readable trapbench results store" in line, line
            assert "delete it" in line and "--store" in line


def valid_baseline(tmp_path: Path, toy_path) -> tuple[Path, Path, Path, dict]:
    suite_path = tmp_path / "gate.toml"
    suite_path.write_text(suite_text(GATE_SUITE, name="gate"))
    store, baseline = tmp_path / "gate.sqlite", tmp_path / "baseline.json"
    assert main(["check", str(suite_path), "--baseline", str(baseline), "--update-baseline", "--store", str(store),
                 "--no-progress"]) == 0
    return suite_path, store, baseline, json.loads(baseline.read_text())


def first_task(document: dict) -> dict:
    return next(iter(document["tasks"].values()))


MALFORMED = [
    ("string energy", lambda d: first_task(d)["energies"].__setitem__(0, "4.2"), ".energies[0]: got '4.2'"),
    ("no status", lambda d: first_task(d).pop("status"), ".status: got None"),
    ("energies not a list", lambda d: first_task(d).__setitem__("energies", 4.2), ".energies: got 4.2"),
    ("entry not a table", lambda d: d["tasks"].__setitem__(next(iter(d["tasks"])), [1, 2]), "expected a table"),
    ("scalar string", lambda d: first_task(d).__setitem__("scalars", {"contact": "x"}), ".scalars.contact"),
    ("scalars a list", lambda d: first_task(d).__setitem__("scalars", [1.0]), ".scalars: got [1.0]"),
    ("params a string", lambda d: first_task(d).__setitem__("params", "cutoff=3"), ".params: got 'cutoff=3'"),
    ("g a string", lambda d: first_task(d).__setitem__("g", "zero"), ".g: got 'zero'"),
    ("tasks a list", lambda d: d.__setitem__("tasks", []), "tasks: got []"),
    ("tolerance negative", lambda d: d["tolerances"]["energy"].__setitem__("abs", -1), "tolerances.energy.abs"),
    ("tolerance unknown key", lambda d: d["tolerances"].__setitem__("energy", {"absolute": 1}), "tolerances.energy"),
    ("tolerances a number", lambda d: d.__setitem__("tolerances", 3), "tolerances: got 3"),
    ("wrong version", lambda d: d.__setitem__("version", "one"), "has version 'one'"),
    ("no format", lambda d: d.pop("format"), "is not a trapbench baseline"),
]


@pytest.mark.parametrize("label, spoil, message", MALFORMED, ids=[m[0] for m in MALFORMED])
def test_malformed_baselines_are_one_line_naming_file_and_field(toy_path, tmp_path, capsys, label, spoil, message):
    suite_path, store, baseline, document = valid_baseline(tmp_path, toy_path)
    spoil(document)
    baseline.write_text(json.dumps(document))
    capsys.readouterr()
    assert main(["check", str(suite_path), "--baseline", str(baseline), "--no-run", "--store", str(store)]) == 2
    line = one_line_error(capsys)
    assert str(baseline) in line and message in line and "--update-baseline" in line, line


def test_baseline_that_is_not_json_is_one_line(tmp_path, capsys):
    from trapbench.bench.gate import read_baseline

    path = tmp_path / "cut.json"
    path.write_text('{"format": "trapbench-baseline", "tasks": {"a": ')
    with pytest.raises(SpecError, match="cannot read .* as JSON") as info:
        read_baseline(path)
    assert str(path) in str(info.value) and "\n" not in str(info.value)


def test_the_gate_fails_on_a_baseline_that_covers_none_or_part_of_the_suite(toy_path, tmp_path, capsys):
    suite_path, store, baseline, document = valid_baseline(tmp_path, toy_path)
    check = ["check", str(suite_path), "--baseline", str(baseline), "--no-run", "--store", str(store)]
    capsys.readouterr()
    empty = {**document, "tasks": {}}
    baseline.write_text(json.dumps(empty))
    assert main(check) == 1
    out = capsys.readouterr().out
    assert "FAILED: the baseline covers none of the current tasks" in out and "4 new" in out
    assert main([*check, "--allow-new"]) == 1  # comparing nothing never passes

    dropped_key = next(iter(document["tasks"]))
    part = {**document, "tasks": {k: v for k, v in document["tasks"].items() if k != dropped_key}}
    baseline.write_text(json.dumps(part))
    assert main(check) == 1
    out = capsys.readouterr().out
    assert "1 task(s) not in the baseline" in out and "not in the baseline |" in out
    assert main([*check, "--allow-new"]) == 0
    assert "PASSED" in capsys.readouterr().out


# ----------------------------------------------------------------------------- suites at load time (item 7)


def test_unknown_backend_is_refused_at_load_time_with_a_suggestion():
    with pytest.raises(SpecError) as info:
        parse_suite(suite_text(FREE_PROBLEMS + '[[backends]]\nname = "perturbativ"\n'))
    assert info.value.field == "backends[0].name" and "did you mean 'perturbative'" in str(info.value)


def test_every_rung_is_checked_against_the_backends_range_at_load_time(toy_path):
    with pytest.raises(SpecError) as info:
        parse_suite(suite_text(FREE_PROBLEMS + """
            [[backends]]
            name = "toy-ranged"
            ladder = [{ cutoff = 8 }, { cutoff = 4 }, { cutoff = 2 }]
            """))
    assert info.value.field == "backends[0].ladder[2]"
    assert "'2+1 free'" in str(info.value) and "cutoff 2 is below the particle number 3" in str(info.value)
    # a problem the backend declines whatever the parameters stays, and is recorded as unsupported
    suite = parse_suite(suite_text(FREE_PROBLEMS + """
        [[problems]]
        name = "1+1 g=1"
        up = { count = 1 }
        down = { count = 1 }
        interaction = { g = 1.0 }

        [[backends]]
        name = "toy-ranged"
        ladder = [{ cutoff = 8 }, { cutoff = 4 }]
        """))
    assert len(suite.tasks()) == 6


def test_sweep_exits_non_zero_when_a_task_did_not_succeed_and_still_prints_tables(toy_path, tmp_path, capsys):
    suite_path = tmp_path / "mixed.toml"
    suite_path.write_text(suite_text(FREE_PROBLEMS + """
        [[backends]]
        name = "toy-exact"

        [[backends]]
        name = "toy-abort"
        problems = ["1+1 free"]
        """, name="mixed"))
    store = ["--store", str(tmp_path / "mixed.sqlite"), "--no-progress"]
    assert main(["sweep", str(suite_path), *store]) == 1
    captured = capsys.readouterr()
    assert "toy-abort" in captured.out and "1 task(s) without a result" in captured.err
    with Store.open(tmp_path / "mixed.sqlite") as store_handle:
        assert len(store_handle.tasks_frame()) == 3


# ----------------------------------------------------------------------------- the executor


@pytest.mark.parametrize("backend, g, params, status, error_type, text", [
    ("toy-exact", 0.0, {"cutoff": 4}, "ok", "", ""),
    ("toy-exact", 1.0, {}, "unsupported", "Unsupported", "g = 0"),
    ("toy-exact", 0.0, {"cutoff": 0}, "failed", "SpecError", "param.cutoff"),
    ("toy-raise", 0.0, {"kind": "SolverError"}, "failed", "SolverError", "did not converge"),
    ("toy-raise", 0.0, {"kind": "SpecError"}, "failed", "SpecError", "too large for this size"),
    ("toy-raise", 0.0, {"kind": "bug"}, "failed", "ZeroDivisionError", "division by zero"),
])
def test_executor_classifies_alike_in_process_and_isolated(toy_path, backend, g, params, status, error_type, text):
    problem = Problem.create(1, 1, g)
    outcomes = [execute(backend, problem, params), execute(backend, problem, params, isolated=True,
                                                           limits=Limits(timeout_s=60))]
    for outcome in outcomes:
        assert (outcome.status, outcome.error_type) == (status, error_type)
        assert text in outcome.error
    if status == "ok":
        assert outcomes[0].solved().energies == outcomes[1].solved().energies == [1.0 + 1 / 16]
    else:
        with pytest.raises(ValueError, match=status):
            outcomes[0].solved()


def test_a_fresh_interpreter_gives_the_forkserver_guarantees(toy_path):
    free = Problem.create(1, 1, 0.0).to_dict()
    for method in (FORKSERVER, SUBPROCESS):
        ok = run_isolated({"backend": "toy-exact", "problem": free, "params": {"cutoff": 2}}, Limits(), method=method)
        assert ok.status == "ok" and ok.result["energies"] == [1.25] and ok.peak_rss_bytes > 0
        late = run_isolated({"backend": "toy-sleep", "problem": free, "params": {"seconds": 60.0}},
                            Limits(timeout_s=3), method=method)
        assert late.status == "timeout" and 3 <= late.wall_time_s < 20
        dead = run_isolated({"backend": "toy-abort", "problem": free, "params": {}}, Limits(), method=method)
        assert dead.status == "crashed" and "SIGABRT" in dead.error, (method, dead)


def test_the_task_server_preloads_each_backends_module_and_its_declared_warm_up():
    """``backend_modules`` lists a backend's module, then the modules its ``preload`` declares (oscillator-ed: a
    warm-up whose import loads the ED engine's compiled kernels), each once; unknown names are skipped (their
    tasks fail with their own message)."""
    from trapbench.bench.runner import backend_modules

    modules = backend_modules(["oscillator-ed", "two-body", "oscillator-ed", "no-such-backend"])
    assert modules == ("trapbench.backends.oscillator_ed", "trapbench.backends.oscillator_warmup",
                       "trapbench.backends.two_body")
    # in a fresh interpreter (this one may have loaded the kernels already): the import alone loads them
    probe = ("import trapbench.backends.oscillator_warmup; from trapbench.backends import fock_assembly;"
             " print(len(fock_assembly._FILL.signatures) if fock_assembly._FILL else 0)")
    loaded = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, timeout=300, check=True)
    assert int(loaded.stdout.split()[-1]) >= 1


def test_a_backends_preload_reaches_the_task_server_in_a_fresh_interpreter(toy_path):
    """The task server imports each backend's declared ``preload`` before its first task: a task starting later
    (which asks for the context again, without modules) must not reset the list. Checked in a fresh interpreter,
    where the server starts for the first time."""
    code = "\n".join([
        "import sys",
        f"sys.path.insert(0, {str(toy_path)!r})",
        "from trapbench.bench.executor import Limits",
        "from trapbench.bench.runner import FORKSERVER, backend_modules, context, run_isolated",
        "from trapbench.problems.spec import Problem",
        "context(backend_modules(['toy-preload']))",
        "payload = {'backend': 'toy-preload', 'problem': Problem.create(1, 1, 0.0).to_dict(), 'params': {}}",
        "outcome = run_isolated(payload, Limits(), method=FORKSERVER)",
        "print(outcome.status, outcome.result['diagnostics']['preloaded'])",
    ])
    # the server is a new interpreter: it finds the toys through PYTHONPATH, as it would an installed backend
    paths = [str(toy_path), *filter(None, [os.environ.get("PYTHONPATH")])]
    env = os.environ | {"PYTHONPATH": os.pathsep.join(paths)}
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300, env=env)
    assert done.stdout.split()[-2:] == ["ok", "True"], done.stderr[-2000:]


def test_blas_thread_limit_reaches_the_backend_and_the_ed_engine(toy_path, tmp_path, monkeypatch):
    import numpy as np
    from threadpoolctl import threadpool_info, threadpool_limits

    from trapbench.backends import fock_ed

    if not any(pool["user_api"] == "blas" for pool in threadpool_info()):
        pytest.skip("no BLAS thread pool that threadpoolctl can control")
    problem = Problem.create(1, 1, 0.0)
    for threads in (1, 2):
        for isolated in (False, True):
            outcome = execute("toy-threads", problem, {}, isolated=isolated, limits=Limits(blas_threads=threads))
            assert outcome.solved().diagnostics["blas_threads"] == threads, (threads, isolated)

    suite = parse_suite(suite_text(FREE_PROBLEMS + '[[backends]]\nname = "toy-threads"\nproblems = ["1+1 free"]\n'))
    store_path = tmp_path / "threads.sqlite"
    report = run_sweep(suite, SweepOptions(store_path=store_path, progress=False, blas_threads=2))
    with Store.open(store_path) as store:
        assert store.result(report.task_keys[0]).diagnostics["blas_threads"] == 2  # --blas-threads of a sweep

    seen = []
    real_eigh = np.linalg.eigh

    def spying_eigh(matrix):
        seen.append(max(p["num_threads"] for p in threadpool_info() if p["user_api"] == "blas"))
        return real_eigh(matrix)

    monkeypatch.setattr(np.linalg, "eigh", spying_eigh)
    for threads in (2, 1):
        with threadpool_limits(limits=threads):
            values, _ = fock_ed.lowest_eigenpairs(np.diag([3.0, 1.0, 2.0]), 2)
        assert list(values) == [1.0, 2.0]
    assert seen == [2, 1]


def test_solve_and_odd_even_use_the_executor_and_keep_input_errors_one_line(capsys):
    assert main(["solve", "--up", "1", "--down", "1", "--g", "1", "-b", "two-body", "--blas-threads", "2", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["backend"] == "two-body"
    assert main(["odd-even", "-b", "perturbativ", "--g", "-1"]) == 2
    assert "did you mean 'perturbative'" in one_line_error(capsys)
    assert main(["odd-even", "-b", "perturbative", "--g", "-1", "-p", "order=9"]) == 2
    assert "param.order" in one_line_error(capsys)


@pytest.mark.parametrize("method", [FORKSERVER, SUBPROCESS])
def test_an_isolated_task_dies_with_its_watcher(toy_path, tmp_path, method):
    """kill -9 of the process watching a task (a coordinator, a Dask worker) must not leave the task running unwatched."""
    import psutil

    watcher_script = tmp_path / "watcher.py"
    watcher_script.write_text(
        "from trapbench.bench.executor import Limits\n"
        "from trapbench.bench.runner import run_isolated\n"
        "from trapbench.problems.spec import Problem\n"
        "if __name__ == '__main__':\n"
        "    run_isolated({'backend': 'toy-sleep', 'problem': Problem.create(1, 1, 0.0).to_dict(),\n"
        f"                  'params': {{'seconds': 120.0}}}}, Limits(timeout_s=300), method={method!r})\n")
    watcher = subprocess.Popen([sys.executable, str(watcher_script)], env=toy_env(toy_path))
    try:
        deadline = time.monotonic() + 60
        def is_task(process) -> bool:  # a fresh interpreter running the runner, or a forkserver's child
            if method == SUBPROCESS:
                return process.cmdline()[1:3] == ["-m", "trapbench.bench.runner"]
            return process.ppid() != watcher.pid

        family: list = []
        while time.monotonic() < deadline and not any(is_task(p) for p in family):
            time.sleep(0.2)
            family = psutil.Process(watcher.pid).children(recursive=True)
        assert any(is_task(p) for p in family), "the task never started"
        time.sleep(2.0)  # let the task reach its own setup (the death signal is armed at its start)
        family = psutil.Process(watcher.pid).children(recursive=True)
        watcher.send_signal(signal.SIGKILL)
        watcher.wait()
        gone, alive = psutil.wait_procs(family, timeout=10)
        assert not alive, alive  # the task would have slept 120 s
    finally:
        kill_tree(watcher)


def test_a_rung_below_the_oscillator_cutoff_floor_is_refused_at_load_time():
    from trapbench.bench.suite import parse_suite

    text = """
name = "floor"
[[problems]]
name = "pair"
up = { count = 1 }
down = { count = 1 }
interaction = { g = 1.0 }
[[backends]]
name = "oscillator-ed"
ladder = [{ cutoff = 16 }, { cutoff = 4, ladder = 4, ladder_step = 2 }]
"""
    with pytest.raises(SpecError, match=r"backends\[0\]\.ladder\[1\].*param\.cutoff"):
        parse_suite(text)
