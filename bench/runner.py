"""Run one task in its own child process, with a wall-time limit and a memory cap, and measure it.

``run_isolated(payload, limits)`` starts a child from a forkserver (numpy, scipy, trapbench and the
suite's backend modules are imported once in the server, so each task starts in milliseconds and its
memory is its own), then watches it every ``POLL_S`` seconds:

- wall time beyond ``limits.timeout_s``  -> SIGKILL, status ``timeout``;
- resident memory beyond ``limits.memory_mib`` -> SIGKILL, status ``out-of-memory`` (a
  ``MemoryError`` raised inside the task is recorded the same way). The cap is enforced by polling
  the child's RSS, not by an address-space limit (which numerical libraries' large virtual
  reservations would trip), so an allocation faster than ``POLL_S`` can overshoot it briefly, and
  processes the task itself starts are not counted;
- the child dies without answering (segfault, ``os.abort``, ``sys.exit``) -> status ``crashed``
  with the signal or exit code;
- the backend raises -> ``failed`` (``unsupported`` for ``Unsupported``) with the message.

Measured for every task: wall time (parent clock, child start to end), CPU time of the child
(user + system, from the child's own ``getrusage``; the last ``/proc`` sample when it was killed)
and the peak resident set size of that process: the child resets its high-water mark by writing
"5" to ``/proc/self/clear_refs`` (Linux >= 4.0) and reports ``VmHWM`` at the end; the parent's own
polled maximum is the fallback. The forked child shares the server's already-imported libraries,
which count towards its RSS (tens of MiB), the same for every task.

BLAS/OpenMP thread pools are limited to ``limits.blas_threads`` (default 1, common practice when
several tasks share a machine) with threadpoolctl.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import multiprocessing
import os
import platform
import resource
import signal
import sys
import time
import traceback
from dataclasses import asdict, dataclass, field

OK = "ok"
FAILED = "failed"
UNSUPPORTED = "unsupported"
CRASHED = "crashed"
TIMEOUT = "timeout"
OUT_OF_MEMORY = "out-of-memory"
MISSING_BACKEND = "missing-backend"
STATUSES = (OK, FAILED, UNSUPPORTED, CRASHED, TIMEOUT, OUT_OF_MEMORY, MISSING_BACKEND)

POLL_S = 0.02
MIB = 1024 * 1024
BASE_PRELOAD = ("numpy", "scipy", "scipy.sparse", "scipy.sparse.linalg", "threadpoolctl", "trapbench.backends",
                "trapbench.bench.runner", "trapbench.bench.warm")


@dataclass(frozen=True)
class Limits:
    """Per-task limits: wall time in seconds, resident memory in MiB, BLAS threads."""

    timeout_s: float = 600.0
    memory_mib: float = 4096.0
    blas_threads: int = 1


@dataclass
class Outcome:
    """What happened to one task. ``result`` is ``Result.to_json_dict()`` when status is ``ok``."""

    status: str
    error: str = ""
    result: dict | None = None
    wall_time_s: float = 0.0
    cpu_time_s: float = 0.0
    peak_rss_bytes: int = 0
    exit_code: int | None = None
    started_utc: str = ""
    finished_utc: str = ""
    host: str = field(default_factory=platform.node)

    def to_dict(self) -> dict:
        return asdict(self)


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="milliseconds")


# ----------------------------------------------------------------------------- the child


def _reset_peak_rss() -> None:
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")
    except OSError:
        pass


def _status_kib(key: str) -> int:
    try:
        with open("/proc/self/status") as handle:
            for line in handle:
                if line.startswith(key + ":"):
                    return int(line.split()[1])
    except OSError:
        pass
    return 0


def _child_main(conn, payload: dict, sys_path: list[str] | None) -> None:
    """Entry point of the child: solve one task and send (status, error, result, cpu, peak)."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the coordinator decides what Ctrl-C stops
    if sys_path is not None:
        sys.path[:] = sys_path
    _reset_peak_rss()
    before = resource.getrusage(resource.RUSAGE_SELF)
    status, error, result = FAILED, "", None
    try:
        from threadpoolctl import threadpool_limits

        from ..backends import registry
        from ..backends.base import SolverError, Unsupported
        from ..problems.spec import Problem

        try:
            with threadpool_limits(limits=payload["blas_threads"]):
                backend = registry.get(payload["backend"])
                problem = Problem.from_dict(payload["problem"])
                result = backend.solve(problem, **payload["params"]).to_json_dict()
            status = OK
        except MemoryError as exc:
            status, error = OUT_OF_MEMORY, f"MemoryError inside the task: {exc}"
        except Unsupported as exc:
            status, error = UNSUPPORTED, str(exc)
        except SolverError as exc:
            status, error = FAILED, f"SolverError: {exc}"
        except Exception as exc:  # any backend bug is recorded, never fatal to the sweep
            tail = "".join(traceback.format_exception(exc)[-3:]).strip()
            status, error = FAILED, f"{type(exc).__name__}: {exc}\n{tail}"
    finally:
        after = resource.getrusage(resource.RUSAGE_SELF)
        cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
        peak = _status_kib("VmHWM") * 1024
        conn.send((status, error, result, cpu, peak))
        conn.close()


# ----------------------------------------------------------------------------- the parent

_CONTEXT = None


def context(preload: tuple[str, ...] = ()) -> multiprocessing.context.BaseContext:
    """The forkserver context; ``preload`` (module names) is honoured until the server first starts."""
    global _CONTEXT
    if _CONTEXT is None:
        _CONTEXT = multiprocessing.get_context("forkserver")
    _CONTEXT.set_forkserver_preload(list(dict.fromkeys(BASE_PRELOAD + tuple(preload))))
    return _CONTEXT


def backend_modules(names: list[str]) -> tuple[str, ...]:
    """Module names of the installed backends among ``names`` (for the forkserver preload)."""
    from ..backends import registry

    targets = registry._targets()
    return tuple(targets[n].split(":")[0] for n in names if n in targets)


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
    main = sys.modules.get("__main__")
    if main is None:
        yield
        return
    saved = {k: main.__dict__[k] for k in ("__spec__", "__file__") if k in main.__dict__}
    main.__dict__["__spec__"] = None
    main.__dict__.pop("__file__", None)
    try:
        yield
    finally:
        main.__dict__.update(saved)


def run_isolated(payload: dict, limits: Limits, sys_path: list[str] | None = None) -> Outcome:
    """Solve ``payload`` (``backend``, ``problem`` as a dict, ``params``) in a child; never raises for the task's faults.

    ``sys_path`` (default: this process's ``sys.path``) is installed in the child so that backends
    found through entry points on the coordinator's path are found there too.
    """
    import psutil

    payload = {**payload, "blas_threads": limits.blas_threads}
    ctx = context()
    receiver, sender = ctx.Pipe(duplex=False)
    process = ctx.Process(target=_child_main, args=(sender, payload, list(sys.path) if sys_path is None else sys_path))
    started = _now()
    start = time.perf_counter()
    with _main_module_hidden():
        process.start()
    sender.close()
    cap = limits.memory_mib * MIB
    polled_peak, polled_cpu = 0, 0.0
    message, killed_for = None, None
    try:
        watched = psutil.Process(process.pid)
    except psutil.Error:
        watched = None
    try:
        while True:
            if receiver.poll(POLL_S):
                try:
                    message = receiver.recv()
                except EOFError:
                    message = None
                break
            elapsed = time.perf_counter() - start
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
            if elapsed > limits.timeout_s:
                killed_for = TIMEOUT
            if killed_for is not None:
                process.kill()
                break
            if not process.is_alive() and not receiver.poll(0):
                break
    finally:
        if message is None and process.is_alive():
            process.kill()
        process.join(timeout=10)
        receiver.close()
    wall = time.perf_counter() - start
    outcome = Outcome(status=CRASHED, wall_time_s=wall, cpu_time_s=polled_cpu, peak_rss_bytes=polled_peak,
                      exit_code=process.exitcode, started_utc=started, finished_utc=_now())
    if killed_for == TIMEOUT:
        outcome.status = TIMEOUT
        outcome.error = f"killed after {wall:.1f} s: the wall-time limit is {limits.timeout_s:g} s (raise it with --timeout)"
    elif killed_for == OUT_OF_MEMORY:
        outcome.status = OUT_OF_MEMORY
        outcome.error = (f"killed at {polled_peak / MIB:.0f} MiB resident: the memory cap is {limits.memory_mib:g} MiB"
                         " (raise it with --memory)")
    elif message is None:
        code = process.exitcode
        how = f"killed by {_signal_name(code)}" if code is not None and code < 0 else f"exited with status {code}"
        outcome.error = f"the task process {how} without a result"
    else:
        status, error, result, cpu, peak = message
        outcome.status, outcome.error, outcome.result = status, error, result
        outcome.cpu_time_s = cpu
        outcome.peak_rss_bytes = max(peak, polled_peak)
    return outcome


def payload_for(task) -> dict:
    """The picklable description of a ``suite.Task`` that a child (or a Dask worker) needs."""
    return {"backend": task.backend, "problem": task.problem.to_dict(), "params": dict(task.params)}


def run_on_worker(payload: dict, limits: Limits, preload: tuple[str, ...] = ()) -> dict:
    """Dask entry point: run the task isolated on this worker and return the outcome as a dict.

    ``preload`` names the backend modules the worker's task server should import once (honoured
    when the worker runs its first task).
    """
    context(preload)
    return run_isolated(payload, limits, sys_path=None).to_dict() | {"worker_pid": os.getpid()}
