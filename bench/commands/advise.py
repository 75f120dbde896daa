"""``trapbench advise``: the cheapest reliable backend and parameters for a problem, from stored measurements."""

from __future__ import annotations

import argparse

from .sweep import add_store_argument

NAME = "advise"
HELP = "recommend the cheapest reliable backend and parameters for a problem and accuracy, from the results store"
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
    add_store_argument(parser)


def run(args: argparse.Namespace) -> int:
    from ...problems.errors import SpecError
    from ..advisor import Query, advise
    from ..store import Store

    if args.accuracy <= 0:
        raise SpecError("--accuracy", f"got {args.accuracy:g}; give a positive relative error such as 1e-4")
    query = Query(args.up, args.down, args.mass_up, args.mass_down, args.g, args.accuracy)
    query.problem()  # validates counts and masses with the problem's own messages
    with Store.open(args.store) as store:
        frame = store.results_frame()
    if frame.empty:
        raise SpecError("--store", f"'{store.path}' holds no results yet; run `trapbench sweep quick` first")
    advice = advise(frame, query)
    print(advice.explain())
    return 0 if advice.best is not None else 1
