"""``trapbench backends``: the installed backends, their parameters, and what each supports."""

from __future__ import annotations

import argparse

from ...backends import registry
from ...backends.base import support_of
from .problem_options import add_problem_options, problem_from_args

NAME = "backends"
HELP = "list installed backends and their parameters; with a problem, say which can solve it and why not"
ORDER = 10


def register(parser: argparse.ArgumentParser) -> None:
    add_problem_options(parser, required=False)
    parser.add_argument("--verbose", "-v", action="store_true", help="also list every parameter")


def run(args: argparse.Namespace) -> int:
    problem = problem_from_args(args)
    if problem is not None:
        print(f"problem: {problem.describe()}  [{problem.key}]")
    for name in registry.names():
        try:
            backend = registry.get(name)
        except Exception as exc:  # a broken plug-in must not hide the others
            print(f"{name:16s} unavailable: {exc.__class__.__name__}: {exc}")
            continue
        line = f"{name:16s} {getattr(backend, 'summary', '')}"
        if problem is not None:
            support = support_of(backend, problem)
            line += "\n" + " " * 17 + ("-> can solve it" if support else f"-> cannot: {support.reason}")
        print(line)
        if args.verbose:
            for p in getattr(backend, "parameters", ()):
                print(f"{'':17s}--param {p.name}=<{p.kind.__name__}> (default {p.default!r}): {p.doc}")
    return 0
