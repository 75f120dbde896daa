"""``trapbench dataset --store STORE``: build the reference dataset from a sweep of the ``dataset`` suite.

Run the suite first (locally or on Dask through the usual options), then this step applies the agreement
rule of ``trapbench.problems.dataset`` and writes the versioned data file that the catalogue serves. By
default the store's grid points are merged into the existing file level by level (the methods of a level in both
are pooled and judged again; a sweep of part of the grid, or of fewer levels, adds to it);
``--replace`` writes the store's points alone. ``--store`` and ``--suite`` repeat: the rule then sees the
results of every named suite in every store together (e.g. the method map's runs at the dataset's g = 2). The
default suites are ``dataset`` and ``dataset-order6`` (lattice-dmrg's sixth-order fit on the N = 4, 5 and 6 ground states):

    trapbench sweep dataset --store ground-truth.sqlite --workers 2
    trapbench sweep dataset-order6 --store ground-truth.sqlite --workers 2
    trapbench dataset --store ground-truth.sqlite
    trapbench dataset --store ground-truth.sqlite --store map.sqlite --suite dataset --suite map
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

NAME = "dataset"
HELP = "build the reference dataset (3 to 12 particles) from a store holding a sweep of the 'dataset' suite"
ORDER = 46


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--store", required=True, action="append", metavar="PATH",
                        help="a results store of the dataset sweep (repeat to pool several stores)")
    parser.add_argument("--suite", action="append", metavar="SUITE",
                        help="a suite whose results to use (repeat for several; default: dataset and"
                             " dataset-order6)")
    parser.add_argument("--output", metavar="PATH",
                        help="where to write the data file (default: the file shipped in this installation)")
    parser.add_argument("--version", dest="dataset_version", metavar="TEXT",
                        help="version written into the file (default: the current dataset version)")
    parser.add_argument("--replace", action="store_true",
                        help="write only what the store holds (default: merge into the existing file, keeping the grid"
                             " points the store does not measure)")
    parser.add_argument("--dry-run", action="store_true", help="print the summary, write nothing")


def run(args: argparse.Namespace) -> int:
    import pandas as pd

    from ...problems import dataset
    from ...problems.errors import SpecError
    from ..store import Store

    suites = args.suite or list(dataset.SUITES)
    frames = []
    for path in args.store:
        if not Path(path).is_file():
            raise SpecError("--store", f"no store at {path}; run 'trapbench sweep dataset --store {path}' first")
        with Store.open(path) as store:
            frames += [store.results_frame(suite=suite) for suite in suites]
    frames = [frame for frame in frames if not frame.empty]
    if not frames:
        raise SpecError("--suite", f"the store(s) hold no results of suite(s) {', '.join(repr(s) for s in suites)}")
    rows = pd.concat(frames, ignore_index=True).to_dict("records")
    built = dataset.build(rows, version=args.dataset_version or dataset.DATASET_VERSION)
    target = Path(args.output) if args.output else dataset.dataset_path()
    if not args.replace and target.is_file():
        existing = dataset.Dataset.from_json_dict(json.loads(target.read_text(encoding="utf-8")))
        kept = len({e.key for e in existing.entries} - {e.key for e in built.entries})
        built = dataset.merge(existing, built)
        merged = (f"merged into {target}: {kept} grid point(s) not in this store kept as they were;"
                  " levels of the others pooled with the file's methods and judged again")
    else:
        merged = None
    summary = pd.DataFrame(dataset.summary_rows(built))
    if summary.empty:
        print("no grid point of the dataset has a measured level in this store")
        return 1
    if not args.dry_run:  # written before anything is printed, so that a closed pipe (`| head`) cannot lose it
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_text(json.dumps(built.to_json_dict(), indent=1) + "\n", encoding="utf-8")
    if merged:
        print(merged)
    table = summary.groupby(["config", "status"]).size().unstack(fill_value=0)
    grid = sum(len(problem.points()) for problem in dataset.dataset_problems())
    print(f"reference dataset v{built.version}: {len(built.entries)} of {grid} grid points measured, {len(summary)} levels")
    print(table.to_string())
    published = summary[summary["status"] != "open"]
    if not published.empty:
        worst = published.groupby("config").agg(worst_relative=("relative", "max"), goal=("goal", "first"))
        print("\nworst relative uncertainty against the goal of each particle number:")
        print(worst.to_string(float_format=lambda v: f"{v:.2g}"))
    if not args.dry_run:
        print(f"\nwrote {target}")
    return 0
