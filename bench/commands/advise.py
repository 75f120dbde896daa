"""``trapbench advise``: the cheapest reliable backend and parameters for a problem, from measurements on neighbouring problems.

The measurements are the method map shipped with the package plus the user's store (when it exists);
``bench.advisor`` states what "neighbouring" means and when a measurement counts.
"""

from __future__ import annotations

import argparse
import json

from .sweep import add_store_argument

NAME = "advise"
HELP = ("recommend the cheapest reliable backend and parameters for a problem and accuracy, from the shipped method"
        " map and the results store (measurements on neighbouring problems only)")
ORDER = 66


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--up", type=int, required=True, metavar="N", help="number of up fermions")
    parser.add_argument("--down", type=int, required=True, metavar="M", help="number of down fermions")
    parser.add_argument("--mass-up", type=float, default=1.0, metavar="A", help="mass of up fermions (m0)")
    parser.add_argument("--mass-down", type=float, default=1.0, metavar="B", help="mass of down fermions (m0)")
    parser.add_argument("--g", type=float, required=True, help="contact coupling g")
    parser.add_argument("--accuracy", type=float, default=1e-4,
                        help="wanted relative error of the ground-state energy (default 1e-4); a stored result counts"
                             " only where a reference at least ten times tighter confirms it")
    parser.add_argument("--no-shipped", action="store_true",
                        help="use the results store alone, not the method map shipped with the package")
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object: backend, params (for --param), expected CPU time and memory,"
                             " evidence")
    add_store_argument(parser)


def run(args: argparse.Namespace) -> int:
    from ...problems.errors import SpecError
    from ..advisor import Query, advise, measurements
    from ..store import Store, default_store_path

    if not args.accuracy > 0:
        raise SpecError("--accuracy", f"got {args.accuracy:g}; give a positive relative error such as 1e-4")
    query = Query(args.up, args.down, args.mass_up, args.mass_down, args.g, args.accuracy)
    query.problem()  # validates counts and masses with the problem's own messages
    path = args.store if args.store is not None else default_store_path()
    store_frame = None
    if path.is_file():  # never create a store just to read it: a fresh install answers from the shipped map
        with Store.open(path) as store:
            store_frame = store.results_frame()
    frame = measurements(store_frame, str(path), shipped=not args.no_shipped)
    if frame.empty:
        raise SpecError("--store", f"no measurements: '{path}' holds no results"
                        + (" and --no-shipped leaves out the shipped method map" if args.no_shipped else
                           " and this installation ships no method map") + "; run `trapbench sweep quick` first")
    advice = advise(frame, query)
    if args.json:
        print(json.dumps(advice.to_json_dict(), indent=2, default=str))
    else:
        print(advice.explain())
    return 0 if advice.best is not None else 1
