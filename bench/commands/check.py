"""``trapbench check SUITE --baseline FILE``: the regression gate (exit 1 on any regression)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from .sweep import add_execution_arguments, add_store_argument, options_from

NAME = "check"
HELP = "run (or read) a suite and compare it with a baseline under per-quantity tolerances; exit 1 on a regression"
ORDER = 62


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("suite", help="a built-in suite name or a suite TOML file")
    parser.add_argument("--baseline", type=Path, required=True, help="baseline JSON file")
    parser.add_argument("--update-baseline", action="store_true",
                        help="accept the current results: write them to the baseline file and exit 0")
    parser.add_argument("--no-run", action="store_true",
                        help="compare what the store already holds instead of recomputing the suite")
    parser.add_argument("--all", action="store_true", help="show every compared value, not only the differences")
    parser.add_argument("--allow-new", action="store_true",
                        help="tasks of the suite that the baseline does not cover are expected (default: they fail the gate)")
    add_store_argument(parser)
    add_execution_arguments(parser)


def run(args: argparse.Namespace) -> int:
    from ..gate import baseline_from_tasks, check_against, write_baseline
    from ..store import Store
    from ..suite import load_suite
    from ..sweep import limited_tasks, run_sweep

    suite = load_suite(args.suite)
    options = options_from(args)
    if args.no_run:
        keys = [t.key for t in limited_tasks(suite, options)]
    else:
        options.rerun = True
        report = run_sweep(suite, options)
        print(report.summary(), file=sys.stderr)
        if report.interrupted:
            return 130
        if report.stalled:
            return 1
        keys = report.task_keys
    with Store.open(args.store) as store:
        tasks = store.tasks_frame(keys=keys)
    if args.update_baseline:
        path = write_baseline(args.baseline, baseline_from_tasks(tasks, suite.name, suite.tolerance_table))
        print(f"baseline written: {path} ({len(tasks)} tasks)")
        return 0
    result = check_against(tasks, args.baseline, suite, args.allow_new)
    print(result.report(everything=args.all))
    return 0 if result.passed else 1
