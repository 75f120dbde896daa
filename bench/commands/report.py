"""``trapbench report``: run (or only read) a suite and write the Markdown/HTML report with its figures."""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from .sweep import add_execution_arguments, add_store_argument, options_from

NAME = "report"
HELP = ("run a suite (skipping results already stored) and write reports/: Markdown and HTML with the method map,"
        " agreement tables, accuracy-vs-cost and physics figures")
ORDER = 66


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--suite", default="quick", help="a built-in suite name or a suite TOML file (default quick)")
    add_store_argument(parser)
    parser.add_argument("--output", type=Path, default=Path("reports"), metavar="FOLDER",
                        help="where report.md, report.html, figures/ and tables/ go (default reports/)")
    parser.add_argument("--from-store", action="store_true",
                        help="do not run anything: report the suite's results already in the store")
    add_execution_arguments(parser)


def run(args: argparse.Namespace) -> int:
    import matplotlib

    matplotlib.use("Agg")
    from ..report import write_report
    from ..store import Store
    from ..suite import load_suite
    from ..sweep import limited_tasks, run_sweep

    suite = load_suite(args.suite)
    options = options_from(args)
    start = time.perf_counter()
    if args.from_store:
        keys = {t.key for t in limited_tasks(suite, options)}
        interrupted = False
    else:
        sweep = run_sweep(suite, options)
        print(sweep.summary(), file=sys.stderr)
        keys, interrupted = set(sweep.task_keys), sweep.interrupted
    with Store.open(args.store) as store:
        written = write_report(store, args.output, suite, keys)
    print(f"report written to {args.output}/ ({len(written)} files) in {time.perf_counter() - start:.0f} s:"
          f" {written[0]} and {written[1]}", file=sys.stderr)
    return 130 if interrupted else 0
