"""``trapbench solve``: one problem, one or every capable backend, energies with errors and cost."""

from __future__ import annotations

import argparse
import json
import sys

from ...backends import registry
from ...backends.base import Unsupported, support_of
from ...problems.errors import SpecError
from ..executor import UNSUPPORTED, Limits, execute
from .problem_options import add_problem_options, parse_params, problem_from_args

NAME = "solve"
HELP = "solve a problem (spec file or inline) with one backend, or with every backend that can"
ORDER = 20


def register(parser: argparse.ArgumentParser) -> None:
    add_problem_options(parser)
    parser.add_argument(
        "--backend", "-b", action="append", metavar="NAME",
        help="backend to use (repeatable); default: every installed backend that supports the problem",
    )
    parser.add_argument(
        "--param", "-p", action="append", metavar="KEY=VALUE",
        help="numerical parameter of the backend (repeatable); with several backends write NAME:KEY=VALUE",
    )
    parser.add_argument("--json", action="store_true", help="print the result(s) as JSON instead of a table")
    parser.add_argument("--output", "-o", metavar="FILE", help="also write the results as JSON to FILE")
    parser.add_argument("--blas-threads", type=int, default=1, metavar="N", help="BLAS/OpenMP threads (default 1)")
    parser.add_argument("--verbose", "-v", action="store_true",
                        help="also print the messages libraries emitted during each solve (kept in diagnostics)")


def split_backend_params(pairs: list[str] | None, backends: list[str]) -> dict[str, dict[str, str]]:
    per_backend: dict[str, dict[str, str]] = {name: {} for name in backends}
    for pair in pairs or []:
        prefix, sep, rest = pair.partition(":")
        if sep and prefix in per_backend:
            per_backend[prefix].update(parse_params([rest]))
        elif sep and "=" not in prefix:
            raise SpecError("--param", f"'{prefix}' is not one of the selected backends ({', '.join(backends)})")
        elif len(backends) == 1:
            per_backend[backends[0]].update(parse_params([pair]))
        else:
            raise SpecError("--param", f"{pair!r} is ambiguous with several backends; write NAME:{pair}")
    return per_backend


def run(args: argparse.Namespace) -> int:
    problem = problem_from_args(args)
    if problem.physical is not None:
        for a, conversion in zip(problem.physical.scattering_length_bohr, problem.physical.conversions()):
            print(f"a_3D = {a:g} a_0 -> g = {conversion.g:.10g}", file=sys.stderr)
            for warning in conversion.warnings:
                print(f"  warning: {warning}", file=sys.stderr)
    if args.backend:
        names = [n for item in args.backend for n in item.split(",") if n]
        backends = [registry.get(n) for n in names]
    else:
        backends = [b for b in registry.all_backends() if all(support_of(b, p) for p in problem.points())]
        if not backends:
            raise Unsupported("no installed backend supports this problem; see 'trapbench backends' with it")
    params = split_backend_params(args.param, [b.name for b in backends])
    if args.blas_threads < 1:
        raise SpecError("--blas-threads", f"got {args.blas_threads}; give 1 or more")
    for backend in backends:  # bad parameters are the user's input: refused before anything runs
        if hasattr(backend, "resolve_params"):
            backend.resolve_params(params[backend.name])
    results, failures = [], []
    limits = Limits(blas_threads=args.blas_threads)
    for backend in backends:
        for point in problem.points():
            outcome = execute(backend, point, params[backend.name], limits=limits)
            if outcome.ok:
                results.append(outcome.solved())
            elif outcome.status == UNSUPPORTED and args.backend:
                raise Unsupported(outcome.error)
            else:
                failures.append((backend.name, point.coupling, outcome.error.splitlines()[0]))
    documents = [r.to_json_dict() for r in results]
    if args.output:
        with open(args.output, "w", encoding="utf-8") as handle:
            json.dump(documents[0] if len(documents) == 1 else {"results": documents}, handle, indent=1)
    if args.json:
        print(json.dumps(documents[0] if len(documents) == 1 else {"results": documents}))
    else:
        _print_table(problem, results, args.verbose)
    for name, g, message in failures:
        print(f"{name} at g = {g:g} failed: {message}", file=sys.stderr)
    return 1 if failures else 0


def _print_table(problem, results, verbose: bool = False) -> None:
    print(f"{problem.describe()}   energies in hbar*omega, g in sqrt(hbar^3 omega/m0)")
    header = f"{'backend':16s} {'g':>9s}  {'energies (ascending)':48s} {'error est.':>10s} {'wall s':>8s}"
    print(header)
    print("-" * len(header))
    for r in results:
        energies = "  ".join(f"{e:.10f}" for e in r.energies[:4]) + (" ..." if len(r.energies) > 4 else "")
        error = "-" if r.error_estimate is None else f"{r.error_estimate:.1e}"
        print(f"{r.backend:16s} {r.g:9.4g}  {energies:48s} {error:>10s} {r.wall_time_s:8.3f}")
        for name, observable in r.observables.items():
            grid = " x ".join(f"{len(values)} {axis}" for axis, values in observable.axes.items())
            bar = "not estimated" if observable.error is None else f"{observable.error:.1e} {observable.units}"
            print(f"{'':28s}{name}: {grid} points, error {bar} (values: --json or --output)")
        for warning in r.warnings:
            print(f"{'':28s}note: {warning}")
        if verbose:
            for message in r.diagnostics.get("library_messages", []):
                print(f"{'':28s}library: {message}")
