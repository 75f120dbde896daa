"""``trapbench export``: results to CSV/Parquet, and the tables (Markdown, CSV, HTML) with plots."""

from __future__ import annotations

import argparse
from pathlib import Path

from .sweep import add_store_argument

NAME = "export"
HELP = "export stored results (CSV or Parquet) and write the agreement / accuracy-vs-cost / cost-vs-N tables and plots"
ORDER = 64


def register(parser: argparse.ArgumentParser) -> None:
    add_store_argument(parser)
    parser.add_argument("--suite", default=None,
                        help="only the tasks of this suite (built-in name or file); its tolerances are used")
    parser.add_argument("--results", type=Path, default=None, metavar="FILE",
                        help="write the tidy results (one row per task and level) to FILE.csv or FILE.parquet")
    parser.add_argument("--tables", type=Path, default=None, metavar="FOLDER",
                        help="write every table as .md, .csv and .html, and error-vs-cost plots as .png")
    parser.add_argument("--no-plots", action="store_true", help="tables only")


def run(args: argparse.Namespace) -> int:
    from ..store import Store
    from ..suite import load_suite
    from ..sweep import SweepOptions, limited_tasks
    from ..tables import suite_tables_markdown, write_tables

    suite = load_suite(args.suite) if args.suite else None
    keys = [t.key for t in limited_tasks(suite, SweepOptions())] if suite else None
    with Store.open(args.store) as store:
        if args.results is not None:
            path = store.export(args.results, keys=keys)
            print(f"results written: {path}")
        frame = store.results_frame(keys=keys)
    if args.tables is not None:
        for path in write_tables(frame, args.tables, suite, plots=not args.no_plots):
            print(f"written: {path}")
    if args.results is None and args.tables is None:
        print(suite_tables_markdown(frame, suite))
    return 0
