"""``trapbench map --store STORE``: build the method map that ``trapbench advise`` ships with, from sweeps of the map suite.

    trapbench sweep map --store map.sqlite --workers 2
    trapbench map --store map.sqlite [--store more.sqlite ...]   # writes problems/data/method_map.json
    trapbench map --regrade                                       # grade the shipped rows again (dataset grew)
    trapbench map --store osc.sqlite --keep-shipped               # one backend rerun, the other rows kept

Every successful ground-state result of the stores is graded (``advisor.graded_frame``: exact references,
the shipped reference dataset, and the dataset's agreement rule applied to the stores' own results, never
grading a method by its own family) and written as one compact JSON table with its version, the neighbour
rule and the stores it came from. ``--regrade`` grades the rows of the shipped table again against today's
references (``advisor.regraded_table``), e.g. after the reference dataset gained points, without the stores.
``--keep-shipped`` pools the stores with the shipped rows they do not measure anew (``advisor.updated_table``:
a shipped row goes where the stores hold the same task or its backend at another version), e.g. after one
backend changed version and only its tasks of the map suite ran again; everything is graded again together,
and the file names the kept rows' origin among its sources.
"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

NAME = "map"
HELP = "build the method map shipped for `trapbench advise` from stores holding sweeps of the 'map' suite"
ORDER = 47


def register(parser: argparse.ArgumentParser) -> None:
    source = parser.add_mutually_exclusive_group(required=True)
    source.add_argument("--store", action="append", metavar="PATH",
                        help="a results store of the map sweep (repeatable: every store's results are pooled)")
    source.add_argument("--regrade", action="store_true",
                        help="grade the shipped table's measurements again against today's references (no store needed)")
    parser.add_argument("--keep-shipped", action="store_true",
                        help="with --store: keep the shipped rows the stores do not measure anew (same task, same"
                             " backend version), e.g. after rerunning one backend's tasks of the map suite")
    parser.add_argument("--suite", default=None,
                        help="use only the results of this suite (default: every stored result)")
    parser.add_argument("--output", metavar="PATH",
                        help="where to write the table (default: the file shipped in this installation)")
    parser.add_argument("--dry-run", action="store_true", help="print the summary, write nothing")


def default_output() -> Path:
    from importlib import resources

    from ..advisor import MAP_RESOURCE

    return Path(str(resources.files("trapbench.problems").joinpath(*MAP_RESOURCE)))


def run(args: argparse.Namespace) -> int:
    import pandas as pd

    from ...problems.errors import SpecError
    from ..advisor import graded_frame, measurement_table, regraded_table, updated_table
    from ..store import Store

    if args.regrade:
        if args.suite:
            raise SpecError("--suite", "selects results of a store; --regrade grades every row of the shipped table,"
                                       " drop --suite")
        if args.keep_shipped:
            raise SpecError("--keep-shipped", "pools stores with the shipped table; --regrade already grades every"
                                              " shipped row, drop --keep-shipped")
        data, shipped = _shipped("--regrade")
        before = (shipped["error_basis"] == "reference").sum()
        table = regraded_table(shipped)
        print(f"regraded {len(table)} rows: {(table['error_basis'] == 'reference').sum()} judged against a reference"
              f" (were {before})")
        return _write(table, list(data.get("built_from", [])), args)
    frames = []
    for path in args.store:
        if not Path(path).is_file():
            raise SpecError("--store", f"no store at {path}; run 'trapbench sweep map --store {path}' first")
        with Store.open(path) as store:
            frames.append(store.results_frame(suite=args.suite))
    frame = pd.concat([f for f in frames if not f.empty], ignore_index=True) if any(not f.empty for f in frames) else None
    if frame is None:
        raise SpecError("--suite" if args.suite else "--store", "the stores hold no results"
                        + (f" of suite '{args.suite}'" if args.suite else ""))
    sources = [Path(p).name for p in args.store]
    if args.keep_shipped:
        data, shipped = _shipped("--keep-shipped")
        table, kept = updated_table(frame, shipped)
        if kept:
            sources.append(f"rows of {', '.join(kept)} from the method map of {data.get('created', '?')}, built from "
                           + ", ".join(data.get("built_from", [])))
        print(f"kept shipped rows of {', '.join(kept) or 'no backend'}; from the stores: "
              f"{', '.join(sorted(set(frame['backend'])))}")
    else:
        table = measurement_table(graded_frame(frame))
    if table.empty:
        print("no successful ground-state result in these stores")
        return 1
    return _write(table, sources, args)


def _shipped(option: str):
    """The shipped method map's file contents and rows; a clear error where this installation ships none."""
    from ...problems.errors import SpecError
    from ..advisor import table_from_json

    path = default_output()
    if not path.is_file():
        raise SpecError(option, "this installation ships no method map; build one with --store")
    data = json.loads(path.read_text(encoding="utf-8"))
    return data, table_from_json(data)


def _write(table, sources: list[str], args: argparse.Namespace) -> int:
    from ..advisor import table_to_json
    from ..verdicts import REACHED, judge_frame

    reached = judge_frame(table, 1e-4) == REACHED
    summary = table.assign(reached=reached).groupby("backend").agg(results=("state", "size"),
                                                                  reached_1e_4=("reached", "sum"))
    print(f"method map: {len(table)} ground-state results from {len(sources)} store(s)")
    print(summary.to_string())
    if args.dry_run:
        return 0
    target = Path(args.output) if args.output else default_output()
    target.parent.mkdir(parents=True, exist_ok=True)
    data = table_to_json(table, sources)
    target.write_text(json.dumps(data, separators=(",", ":"), default=str) + "\n", encoding="utf-8")
    print(f"wrote {target}")
    return 0
