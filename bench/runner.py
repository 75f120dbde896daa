"""Isolation for the executor: run one task in its own child process, with a wall-time limit and a memory cap, and measure it.

``run_isolated(payload, limits)`` starts the child in one of two ways:

- ``forkserver`` (default): a child forked from a server that imported numpy, scipy, trapbench and
  the suite's backend modules once, so each task starts in milliseconds and its memory is its own;
- ``subprocess``: a fresh interpreter (``python -m trapbench.bench.runner``), chosen automatically
  inside a daemonic process -- a Dask worker in its default configuration -- where
  ``multiprocessing`` may not start children. It pays the interpreter start and the imports per
  task (measured in ``bench/benchmarks/bench_harness_results.md``).

Either way the parent watches the child every ``POLL_S`` seconds:

- wall time beyond ``limits.timeout_s``  -> SIGKILL, status ``timeout``;
- resident memory beyond ``limits.memory_mib`` -> SIGKILL, status ``out-of-memory`` (a
  ``MemoryError`` raised inside the task is recorded the same way). The cap is enforced by polling
  the child's RSS, not by an address-space limit (which numerical libraries' large virtual
  reservations would trip), so an allocation faster than ``POLL_S`` can overshoot it briefly, and
  processes the task itself starts are not counted;
- the child dies without answering (segfault, ``os.abort``, ``sys.exit``) -> status ``crashed``
  with the signal or exit code;
- the watcher itself dies (a coordinator or Dask worker under ``kill -9``) -> the child ends too
  (``_end_with``), so no task outlives its limits unwatched;
- otherwise the child's own answer, classified by ``executor.solve_payload``.

Measured for every task: wall time (parent clock, child start to end; with ``subprocess`` it
includes the interpreter start), CPU time of the solve in the child (user + system from its own
``getrusage``; the last ``/proc`` sample when it was killed) and its peak resident set size: the
child resets its high-water mark by writing "5" to ``/proc/self/clear_refs`` (Linux >= 4.0) once
its libraries are imported and reports ``VmHWM`` at the end; the parent's polled maximum is the
fallback. The already-imported libraries count towards that peak (tens of MiB), the same for every task.
"""

from __future__ import annotations

import contextlib
import json
import multiprocessing
import os
import resource
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

from .executor import CRASHED, OUT_OF_MEMORY, TIMEOUT, Limits, Outcome, now_utc, solve_payload

POLL_S = 0.02
WATCHDOG_S = 1.0
MIB = 1024 * 1024
FORKSERVER = "forkserver"
SUBPROCESS = "subprocess"
BASE_PRELOAD = ("numpy", "scipy", "scipy.sparse", "scipy.sparse.linalg", "threadpoolctl", "psutil", "trapbench.backends",
                "trapbench.bench.executor", "trapbench.bench.runner", "trapbench.bench.warm")


# ----------------------------------------------------------------------------- the child


def _reset_peak_rss() -> None:
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")
    except OSError:
        pass


def peak_rss_bytes() -> int:
    """This process's peak resident set size (``VmHWM`` of /proc/self/status, Linux); 0 where unreadable."""
    return _status_kib("VmHWM") * 1024


def _status_kib(key: str) -> int:
    try:
        with open("/proc/self/status") as handle:
            for line in handle:
                if line.startswith(key + ":"):
                    return int(line.split()[1])
    except OSError:
        pass
    return 0


def _measured_solve(payload: dict) -> tuple:
    """(status, error, error_type, result, cpu seconds, peak bytes) of the solve in this process; the backend is
    imported before measuring (a no-op where the task server preloaded it), so no task is charged for its import."""
    with contextlib.suppress(Exception):  # a backend that fails to load fails in the measured solve, with its message
        from ..backends import registry

        registry.get(payload["backend"])
    _reset_peak_rss()
    before = resource.getrusage(resource.RUSAGE_SELF)
    status, error, error_type, result = solve_payload(payload["backend"], payload["problem"], payload["params"],
                                                      payload["blas_threads"])
    after = resource.getrusage(resource.RUSAGE_SELF)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return status, error, error_type, result, cpu, peak_rss_bytes()


def _end_with(watcher_pid: int) -> None:
    """End this task when the process watching it dies (a coordinator or Dask worker under ``kill -9``).

    Unwatched, a task would run on past every limit. A direct child of its watcher (``subprocess``)
    asks the kernel to SIGKILL it then (Linux ``PR_SET_PDEATHSIG``); a forkserver child, whose parent
    is the server, checks every ``WATCHDOG_S`` seconds from a daemon thread.
    """
    if os.getppid() == watcher_pid and _killed_by_kernel_with_parent():
        if os.getppid() != watcher_pid:  # the watcher died before the request took effect
            os._exit(1)
        return
    threading.Thread(target=_watchdog, args=(watcher_pid,), daemon=True, name="trapbench-watchdog").start()


def _killed_by_kernel_with_parent() -> bool:
    import ctypes

    try:
        return ctypes.CDLL(None, use_errno=True).prctl(1, signal.SIGKILL) == 0  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # not Linux
        return False


def _watchdog(watcher_pid: int) -> None:
    import psutil

    while True:
        time.sleep(WATCHDOG_S)
        try:
            alive = psutil.Process(watcher_pid).status() != psutil.STATUS_ZOMBIE
        except psutil.NoSuchProcess:
            alive = False
        if not alive:
            os._exit(1)


def _forked_main(conn, payload: dict, sys_path: list[str] | None) -> None:
    """Entry point of a forkserver child: solve one task and send the measured answer."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the coordinator decides what Ctrl-C stops
    _end_with(payload["watcher_pid"])
    if sys_path is not None:
        sys.path[:] = sys_path
    answer = _measured_solve(payload)  # a task that exits or dies here closes the pipe unanswered: "crashed"
    conn.send(answer)
    conn.close()


def main(argv: list[str] | None = None) -> int:
    """Entry point of a ``subprocess`` child: ``python -m trapbench.bench.runner PAYLOAD.json ANSWER.json``."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    payload_path, answer_path = argv if argv is not None else sys.argv[1:3]
    payload = json.loads(Path(payload_path).read_text(encoding="utf-8"))
    _end_with(payload["watcher_pid"])
    answer = _measured_solve(payload)
    partial = Path(answer_path + ".part")
    partial.write_text(json.dumps(answer), encoding="utf-8")
    partial.rename(answer_path)  # the parent never reads half an answer
    return 0


# ----------------------------------------------------------------------------- the parent

_CONTEXT = None
_PRELOAD: list[str] = list(BASE_PRELOAD)


def context(preload: tuple[str, ...] = ()) -> multiprocessing.context.BaseContext:
    """The forkserver context; ``preload`` (module names) is added to what earlier calls asked for (a later call
    without it, e.g. a task starting, keeps them), honoured until the server first starts."""
    global _CONTEXT
    if _CONTEXT is None:
        _CONTEXT = multiprocessing.get_context("forkserver")
    _PRELOAD.extend(name for name in preload if name not in _PRELOAD)
    _CONTEXT.set_forkserver_preload(list(_PRELOAD))
    return _CONTEXT


def backend_modules(names: list[str]) -> tuple[str, ...]:
    """Module names of the installed backends among ``names`` and the modules each declares in its ``preload``
    (for the forkserver preload)."""
    from ..backends import registry

    targets = registry._targets()
    modules = []
    for name in names:
        if name in targets:
            modules.append(targets[name].split(":")[0])
            with contextlib.suppress(Exception):  # a backend that fails to load fails in its task, with its message
                modules += list(getattr(registry.get(name), "preload", ()))
    return tuple(dict.fromkeys(modules))


def default_method() -> str:
    """``subprocess`` inside a daemonic process (multiprocessing refuses its children), else ``forkserver``."""
    return SUBPROCESS if multiprocessing.current_process().daemon else FORKSERVER


def _signal_name(code: int) -> str:
    try:
        return signal.Signals(-code).name
    except ValueError:
        return f"signal {-code}"


@contextlib.contextmanager
def _main_module_hidden():
    """Keep multiprocessing from re-running the caller's main script in the child.

    The child's entry point lives in trapbench, so it needs nothing from ``__main__``; without this,
    a script without an ``if __name__ == "__main__"`` guard (or code read from stdin) would be
    re-executed, or fail, in every task process.
    """
    main_module = sys.modules.get("__main__")
    if main_module is None:
        yield
        return
    saved = {k: main_module.__dict__[k] for k in ("__spec__", "__file__") if k in main_module.__dict__}
    main_module.__dict__["__spec__"] = None
    main_module.__dict__.pop("__file__", None)
    try:
        yield
    finally:
        main_module.__dict__.update(saved)


class _ForkedChild:
    """A forkserver child answering through a pipe."""

    def __init__(self, payload: dict, sys_path: list[str]):
        ctx = context()
        self._receiver, sender = ctx.Pipe(duplex=False)
        self._process = ctx.Process(target=_forked_main, args=(sender, payload, sys_path))
        with _main_module_hidden():
            self._process.start()
        sender.close()
        self.pid = self._process.pid

    def answer(self, wait_s: float) -> tuple[bool, tuple | None]:
        """(finished, answer): finished when the child answered or its end of the pipe closed."""
        if not self._receiver.poll(wait_s):
            return (not self._process.is_alive() and not self._receiver.poll(0)), None
        try:
            return True, self._receiver.recv()
        except EOFError:
            return True, None

    def kill(self) -> None:
        self._process.kill()

    def close(self) -> int | None:
        self._process.join(timeout=10)
        self._receiver.close()
        return self._process.exitcode


class _SubprocessChild:
    """A fresh interpreter answering through a file (no ``multiprocessing``: allowed in daemonic processes)."""

    def __init__(self, payload: dict, sys_path: list[str]):
        self._folder = tempfile.TemporaryDirectory(prefix="trapbench-task-")
        payload_path = Path(self._folder.name) / "payload.json"
        payload_path.write_text(json.dumps(payload), encoding="utf-8")
        self._answer_path = Path(self._folder.name) / "answer.json"
        env = {**os.environ, "PYTHONPATH": os.pathsep.join(p for p in sys_path if p)}
        self._process = subprocess.Popen([sys.executable, "-m", "trapbench.bench.runner", str(payload_path),
                                          str(self._answer_path)], env=env, stdin=subprocess.DEVNULL)
        self.pid = self._process.pid

    def answer(self, wait_s: float) -> tuple[bool, tuple | None]:
        try:
            self._process.wait(timeout=wait_s)
        except subprocess.TimeoutExpired:
            return False, None
        if self._process.returncode == 0 and self._answer_path.exists():
            return True, tuple(json.loads(self._answer_path.read_text(encoding="utf-8")))
        return True, None

    def kill(self) -> None:
        self._process.kill()

    def close(self) -> int | None:
        with contextlib.suppress(subprocess.TimeoutExpired):
            self._process.wait(timeout=10)
        self._folder.cleanup()
        return self._process.returncode


def run_isolated(payload: dict, limits: Limits, sys_path: list[str] | None = None, method: str | None = None) -> Outcome:
    """Solve ``payload`` (``backend`` name, ``problem`` as a dict, ``params``) in a child; never raises for the task's faults.

    ``sys_path`` (default: this process's ``sys.path``) is installed in the child so that backends
    found through entry points on the caller's path are found there too. ``method`` is ``forkserver``
    or ``subprocess`` (default: ``default_method()``).
    """
    import psutil

    payload = {**payload, "blas_threads": limits.blas_threads, "watcher_pid": os.getpid()}
    sys_path = list(sys.path) if sys_path is None else sys_path
    method = method or default_method()
    started = now_utc()
    start = time.perf_counter()
    child = _SubprocessChild(payload, sys_path) if method == SUBPROCESS else _ForkedChild(payload, sys_path)
    cap = limits.memory_mib * MIB
    polled_peak, polled_cpu = 0, 0.0
    answer, killed_for = None, None
    try:
        watched = psutil.Process(child.pid)
    except psutil.Error:
        watched = None
    try:
        while True:
            finished, answer = child.answer(POLL_S)
            if finished:
                break
            if watched is not None:
                try:
                    rss = watched.memory_info().rss
                    cpu_times = watched.cpu_times()
                    polled_peak = max(polled_peak, rss)
                    polled_cpu = cpu_times.user + cpu_times.system
                except psutil.Error:
                    rss = 0
                if rss > cap:
                    killed_for = OUT_OF_MEMORY
            if time.perf_counter() - start > limits.timeout_s:
                killed_for = TIMEOUT
            if killed_for is not None:
                child.kill()
                break
    finally:
        if answer is None:
            child.kill()
        exit_code = child.close()
    wall = time.perf_counter() - start
    outcome = Outcome(status=CRASHED, wall_time_s=wall, cpu_time_s=polled_cpu, peak_rss_bytes=polled_peak,
                      exit_code=exit_code, started_utc=started, finished_utc=now_utc())
    if killed_for == TIMEOUT:
        outcome.status = TIMEOUT
        outcome.error = f"killed after {wall:.1f} s: the wall-time limit is {limits.timeout_s:g} s (raise it with --timeout)"
    elif killed_for == OUT_OF_MEMORY:
        outcome.status = OUT_OF_MEMORY
        outcome.error = (f"killed at {polled_peak / MIB:.0f} MiB resident: the memory cap is {limits.memory_mib:g} MiB"
                         " (raise it with --memory)")
    elif answer is None:
        how = f"killed by {_signal_name(exit_code)}" if exit_code is not None and exit_code < 0 else f"exited with status {exit_code}"
        outcome.error = f"the task process {how} without a result"
    else:
        status, error, error_type, result, cpu, peak = answer
        outcome.status, outcome.error, outcome.error_type, outcome.result = status, error, error_type, result
        outcome.cpu_time_s = cpu
        outcome.peak_rss_bytes = max(peak, polled_peak)
    return outcome


def run_on_worker(payload: dict, limits: Limits, preload: tuple[str, ...] = ()) -> dict:
    """Dask entry point: run the task isolated on this worker and return the outcome as a dict.

    A default (daemonic) worker runs it in a fresh interpreter; a non-daemonic one (``--workers N``
    starts those) through a forkserver whose ``preload`` (backend modules) is honoured at its first task.
    """
    if default_method() == FORKSERVER:
        context(preload)
    return run_isolated(payload, limits, sys_path=None).to_dict() | {"worker_pid": os.getpid()}


if __name__ == "__main__":
    sys.exit(main())
