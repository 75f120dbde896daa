"""Run one backend on one problem with one parameter set, and say what happened: the harness's one executor.

API (used by ``trapbench solve``, ``odd-even``, ``sweep`` and the validation runner)::

    from trapbench.bench.executor import Limits, execute
    outcome = execute("oscillator-ed", problem, {"cutoff": 16}, isolated=True, limits=Limits(timeout_s=60))
    if outcome.ok:
        result = outcome.solved()          # the backend's ``Result``
    else:
        print(outcome.status, outcome.error)

``execute(backend, problem, params, *, isolated=False, limits=None) -> Outcome`` never raises for a
fault of the task. ``backend`` is a registered name or a backend object; ``problem`` a single-g
``Problem``; ``params`` the backend's parameters (values or command-line strings).

- ``isolated=False`` solves in this process. Only ``limits.blas_threads`` applies; a time limit or
  memory cap cannot be enforced on the caller's own process, and memory is not measured.
- ``isolated=True`` solves in a child process (``runner.run_isolated``: a forkserver child, or a
  fresh interpreter inside a daemonic process such as a default Dask worker) under
  ``limits.timeout_s`` and ``limits.memory_mib``, and measures its wall time, CPU time and peak
  memory. A backend object must then be registered under its ``name`` (the child looks it up).

Both ways go through ``solve_payload``, the one place where a task's faults become a status:

==================  =============================================================
``ok``              the backend returned a result (``Outcome.result``, JSON form)
``unsupported``     ``Unsupported``: the backend declined the problem, with its reason
``failed``          ``SpecError`` (parameters), ``SolverError`` or any other exception
``out-of-memory``   ``MemoryError`` inside the task, or killed at the memory cap
``timeout``         killed at the wall-time limit (isolated only)
``crashed``         the task process died without answering (isolated only)
==================  =============================================================

BLAS/OpenMP thread pools are limited to ``limits.blas_threads`` (threadpoolctl) around the solve,
isolated or not; backends respect the limit their caller set (``--blas-threads``).
"""

from __future__ import annotations

import datetime as _dt
import platform
import time
import traceback
from dataclasses import asdict, dataclass, field
from typing import Any

OK = "ok"
FAILED = "failed"
UNSUPPORTED = "unsupported"
CRASHED = "crashed"
TIMEOUT = "timeout"
OUT_OF_MEMORY = "out-of-memory"


@dataclass(frozen=True)
class Limits:
    """Per-task limits: wall time in seconds, resident memory in MiB (both isolated only), BLAS threads."""

    timeout_s: float = 600.0
    memory_mib: float = 4096.0
    blas_threads: int = 1


@dataclass
class Outcome:
    """What happened to one task. ``result`` is ``Result.to_json_dict()`` when status is ``ok``.

    ``error_type`` names the exception class behind a failure (e.g. ``SpecError``), empty otherwise.
    Times are of the task (the child process when isolated); ``peak_rss_bytes`` is 0 when not measured.
    """

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
    error_type: str = ""

    @property
    def ok(self) -> bool:
        return self.status == OK

    def solved(self):
        """The backend's ``Result``; raises ValueError when the task did not succeed."""
        from ..backends.result import Result

        if not self.ok or self.result is None:
            raise ValueError(f"the task did not succeed ({self.status}): {self.error}")
        return Result.from_json_dict(self.result)

    def to_dict(self) -> dict:
        return asdict(self)


def now_utc() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="milliseconds")


def payload_for(task) -> dict:
    """The picklable, JSON-safe description of a ``suite.Task`` that a child (or a Dask worker) needs."""
    return {"backend": task.backend, "problem": task.problem.to_dict(), "params": dict(task.params)}


def _refusal(backend: Any, problem) -> str | None:
    """Why a plain-protocol backend (no ``admits``) declines ``problem``; a ``Backend`` checks inside ``solve``."""
    if hasattr(backend, "admits"):
        return None
    support = backend.supports(problem)
    return None if support else getattr(support, "reason", "") or "the backend declines this problem"


def solve_payload(backend: Any, problem: Any, params: dict, blas_threads: int = 1) -> tuple[str, str, str, dict | None]:
    """Solve and classify: (status, error, error_type, result as JSON dict). The one error handling.

    ``backend`` is a name or an object, ``problem`` a ``Problem`` or its dict. Never raises for the
    task's faults (KeyboardInterrupt and SystemExit pass through).
    """
    from threadpoolctl import threadpool_limits

    from ..backends import registry
    from ..backends.base import SolverError, Unsupported
    from ..problems.errors import SpecError
    from ..problems.spec import Problem

    try:
        with threadpool_limits(limits=blas_threads):
            if isinstance(backend, str):
                backend = registry.get(backend)
            if isinstance(problem, dict):
                problem = Problem.from_dict(problem)
            reason = _refusal(backend, problem)
            if reason is not None:
                raise Unsupported(f"{backend.name}: {reason}")
            result = backend.solve(problem, **params).to_json_dict()
        return OK, "", "", result
    except MemoryError as exc:
        return OUT_OF_MEMORY, f"MemoryError inside the task: {exc}", "MemoryError", None
    except Unsupported as exc:
        return UNSUPPORTED, str(exc), "Unsupported", None
    except (SpecError, SolverError) as exc:  # messages written for a person: no traceback
        return FAILED, f"{type(exc).__name__}: {exc}", type(exc).__name__, None
    except Exception as exc:  # any backend bug is recorded, never fatal to the caller
        tail = "".join(traceback.format_exception(exc)[-3:]).strip()
        return FAILED, f"{type(exc).__name__}: {exc}\n{tail}", type(exc).__name__, None


def execute(backend: Any, problem: Any, params: dict | None = None, *, isolated: bool = False,
            limits: Limits | None = None) -> Outcome:
    """Run ``backend`` on ``problem`` with ``params``; see the module docstring."""
    limits = limits or Limits()
    params = dict(params or {})
    if isolated:
        from .runner import run_isolated

        name = backend if isinstance(backend, str) else backend.name
        problem_dict = problem if isinstance(problem, dict) else problem.to_dict()
        return run_isolated({"backend": name, "problem": problem_dict, "params": params}, limits)
    started = now_utc()
    wall, cpu = time.perf_counter(), time.process_time()
    status, error, error_type, result = solve_payload(backend, problem, params, limits.blas_threads)
    return Outcome(status=status, error=error, result=result, wall_time_s=time.perf_counter() - wall,
                   cpu_time_s=time.process_time() - cpu, started_utc=started, finished_utc=now_utc(),
                   error_type=error_type)
