"""``trapbench dataset --store STORE``: build the reference dataset from a sweep of the ``dataset`` suite.

Run the suite first (locally or on Dask through the usual options), then this step applies the agreement
rule of ``trapbench.problems.dataset`` and writes the versioned data file that the catalogue serves. By
default the store's grid points are merged into the existing file (a sweep of part of the grid adds to it);
``--replace`` writes the store's points alone:

    trapbench sweep dataset --store ground-truth.sqlite --workers 2
    trapbench dataset --store ground-truth.sqlite
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

NAME = "dataset"
HELP = "build the reference dataset (3 to 12 particles) from a store holding a sweep of the 'dataset' suite"
ORDER = 46


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--store", required=True, metavar="PATH", help="the results store of the dataset sweep")
    parser.add_argument("--suite", default="dataset", help="the suite whose results to use (default: dataset)")
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

    if not Path(args.store).is_file():
        raise SpecError("--store", f"no store at {args.store}; run 'trapbench sweep dataset --store {args.store}' first")
    with Store.open(args.store) as store:
        frame = store.results_frame(suite=args.suite)
    if frame.empty:
        raise SpecError("--suite", f"the store holds no results of suite '{args.suite}'")
    built = dataset.build(frame.to_dict("records"), version=args.dataset_version or dataset.DATASET_VERSION)
    target = Path(args.output) if args.output else dataset.dataset_path()
    if not args.replace and target.is_file():
        existing = dataset.Dataset.from_json_dict(json.loads(target.read_text(encoding="utf-8")))
        kept = len({e.key for e in existing.entries} - {e.key for e in built.entries})
        built = dataset.merge(existing, built)
        print(f"merged into {target}: {kept} grid point(s) not in this store kept as they were")
    summary = pd.DataFrame(dataset.summary_rows(built))
    if summary.empty:
        print("no grid point of the dataset has a measured level in this store")
        return 1
    table = summary.groupby(["config", "status"]).size().unstack(fill_value=0)
    print(f"reference dataset v{built.version}: {len(built.entries)} points, {len(summary)} levels")
    print(table.to_string())
    published = summary[summary["status"] != "open"]
    if not published.empty:
        worst = published.groupby("config").agg(worst_relative=("relative", "max"), goal=("goal", "first"))
        print("\nworst relative uncertainty against the goal of each particle number:")
        print(worst.to_string(float_format=lambda v: f"{v:.2g}"))
    if args.dry_run:
        return 0
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_text(json.dumps(built.to_json_dict(), indent=1) + "\n", encoding="utf-8")
    print(f"\nwrote {target}")
    return 0
