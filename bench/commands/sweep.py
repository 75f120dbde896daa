"""``trapbench sweep SUITE``: run a benchmark suite into the results store and print its tables.

Exit status: 0 when every task of the suite has an ok result, 1 when any does not (failed, crashed,
timed out, out of memory, unsupported, or not run because the Dask cluster stalled) -- the tables are
printed and the results stored all the same -- 2 for bad input, 130 when interrupted (Ctrl-C or SIGTERM).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

NAME = "sweep"
HELP = "run a benchmark suite (built-in name or TOML file) into the results store and print its tables"
ORDER = 60


def add_store_argument(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--store", type=Path, default=None,
                        help="results database (default: $TRAPBENCH_STORE or ./trapbench-results/results.sqlite)")


def add_execution_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--workers", type=int, default=0, metavar="N",
                        help="run on a local Dask cluster of N worker processes (default: serial)")
    parser.add_argument("--scheduler", default=None, metavar="ADDRESS",
                        help="submit to an existing Dask scheduler, e.g. tcp://host:8786")
    parser.add_argument("--timeout", type=float, default=None, metavar="SECONDS",
                        help="wall-time limit per task (default: the suite's, else 600 s)")
    parser.add_argument("--memory", type=float, default=None, metavar="MIB",
                        help="resident-memory cap per task in MiB (default: the suite's, else 4096)")
    parser.add_argument("--rerun", action="store_true", help="recompute tasks already in the store")
    parser.add_argument("--keep-failures", action="store_true",
                        help="keep stored failed/crashed tasks as final (default: run them again)")
    parser.add_argument("--worker-wait", type=float, default=60.0, metavar="SECONDS",
                        help="Dask: stop when no worker has been connected for this long (default 60)")
    parser.add_argument("--stall-timeout", type=float, default=None, metavar="SECONDS",
                        help="Dask: stop when no task has finished for this long (default: the largest task"
                             " time limit plus 120 s)")
    parser.add_argument("--blas-threads", type=int, default=1, metavar="N",
                        help="BLAS/OpenMP threads per task (default 1)")
    parser.add_argument("--no-progress", action="store_true", help="no progress bar")


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("suite", help="a built-in suite name (quick, full) or a suite TOML file")
    add_store_argument(parser)
    add_execution_arguments(parser)
    parser.add_argument("--backend", action="append", metavar="NAME",
                        help="run only this backend's tasks of the suite (repeatable; default: every backend)")
    parser.add_argument("--tables", choices=("markdown", "none"), default="markdown",
                        help="print the agreement and accuracy-vs-cost tables after the sweep (default markdown)")


def options_from(args: argparse.Namespace):
    from ...problems.errors import SpecError
    from ..sweep import SweepOptions

    if args.workers < 0:
        raise SpecError("--workers", f"got {args.workers}; give 0 (serial) or a positive count")
    for flag, value in (("--timeout", args.timeout), ("--memory", args.memory), ("--worker-wait", args.worker_wait),
                        ("--stall-timeout", args.stall_timeout)):
        if value is not None and value <= 0:
            raise SpecError(flag, f"got {value:g}; give a positive number")
    if args.blas_threads < 1:
        raise SpecError("--blas-threads", f"got {args.blas_threads}; give 1 or more")
    return SweepOptions(
        store_path=args.store, workers=args.workers, scheduler=args.scheduler, timeout_s=args.timeout,
        memory_mib=args.memory, rerun=args.rerun, keep_failures=args.keep_failures, progress=not args.no_progress,
        blas_threads=args.blas_threads, worker_wait_s=args.worker_wait, stall_s=args.stall_timeout,
        command=" ".join(["trapbench"] + sys.argv[1:]),
    )


def run(args: argparse.Namespace) -> int:
    from ..store import Store
    from ..suite import load_suite
    from ..sweep import run_sweep
    from ..tables import suite_tables_markdown

    suite = load_suite(args.suite)
    if args.backend:
        suite = suite.restricted_to(args.backend)
    report = run_sweep(suite, options_from(args))
    print(report.summary(), file=sys.stderr)
    if args.tables == "markdown":
        with Store.open(args.store) as store:
            print(suite_tables_markdown(store.results_frame(keys=report.task_keys), suite))
    if report.interrupted:
        return 130
    return 0 if report.succeeded else 1
