"""``trapbench report``: run (or only read) suites and write the Markdown/HTML report with its figures."""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from .sweep import add_execution_arguments, add_store_argument, options_from

NAME = "report"
HELP = ("run suites (skipping results already stored) and write reports/: Markdown and HTML with the method map,"
        " error-bar calibration, agreement tables, accuracy-vs-cost and physics figures")
ORDER = 66

# The benchmark tables come from quick; the physics figures need the problems of figures.
DEFAULT_SUITES = ("quick", "figures")


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--suite", action="append", default=None, metavar="SUITE",
                        help="a built-in suite name or a suite TOML file (default: quick and figures); repeat to report several"
                             " together (the first one's tolerances apply), e.g. --suite quick --suite figures")
    add_store_argument(parser)
    parser.add_argument("--output", type=Path, default=Path("reports"), metavar="FOLDER",
                        help="where report.md, report.html, figures/ and tables/ go (default reports/)")
    parser.add_argument("--from-store", action="store_true",
                        help="do not run anything: report the suites' results already in the store")
    add_execution_arguments(parser)


def run(args: argparse.Namespace) -> int:
    import matplotlib

    matplotlib.use("Agg")
    from ..report import write_report
    from ..store import Store
    from ..suite import load_suite
    from ..sweep import limited_tasks, run_sweep

    suites = [load_suite(name) for name in (args.suite or list(DEFAULT_SUITES))]
    options = options_from(args)
    start = time.perf_counter()
    keys: dict[str, str] = {}  # task key -> backend, so that a partial report can say whose tasks are missing
    interrupted = False
    for suite in suites:
        keys.update({t.key: t.backend for t in limited_tasks(suite, options)})  # the tasks a sweep runs, too
        if args.from_store:
            continue
        sweep = run_sweep(suite, options)
        print(sweep.summary(), file=sys.stderr)
        if sweep.interrupted:
            interrupted = True
            break
    with Store.open(args.store) as store:
        written = write_report(store, args.output, suites[0], keys, title=" + ".join(s.name for s in suites),
                               command="trapbench report " + " ".join(f"--suite {name}" for name in args.suite or list(DEFAULT_SUITES)))
    print(f"report written to {args.output}/ ({len(written)} files) in {time.perf_counter() - start:.0f} s:"
          f" {written[0]} and {written[1]}", file=sys.stderr)
    return 130 if interrupted else 0
