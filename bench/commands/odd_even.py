"""``trapbench odd-even``: ground energies E(N) for N = 2..max across backends, and the three-point pairing gap.

The definition and its sources are in ``trapbench.bench.pairing``.
"""

from __future__ import annotations

import argparse

from ...backends import registry
from ...problems.errors import SpecError
from .solve import split_backend_params

NAME = "odd-even"
HELP = "ground energies E(N), N = 2..8 (balanced spins), and the odd-even pairing gap Delta(N+1), for backends"
ORDER = 25


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--backend", "-b", action="append", required=True, metavar="NAME",
                        help="backend name (repeatable, or comma-separated)")
    parser.add_argument("--g", type=float, required=True, help="coupling (attractive: negative)")
    parser.add_argument("--max-particles", type=int, default=8, metavar="N", help="largest N (default 8)")
    parser.add_argument("--param", "-p", action="append", metavar="KEY=VALUE",
                        help="numerical parameter of the backend (repeatable); with several backends write NAME:KEY=VALUE")
    parser.add_argument("--timeout", type=float, default=None, metavar="SECONDS",
                        help="run each size in its own process under this wall-time limit (default: in this process)")
    parser.add_argument("--blas-threads", type=int, default=1, metavar="N", help="BLAS/OpenMP threads (default 1)")


def run(args: argparse.Namespace) -> int:
    from ..executor import Limits
    from ..pairing import DEFINITION, odd_even_analysis

    if args.max_particles < 2:
        raise SpecError("--max-particles", f"got {args.max_particles}; give 2 or more")
    if args.timeout is not None and args.timeout <= 0:
        raise SpecError("--timeout", f"got {args.timeout:g}; give a positive number of seconds")
    if args.blas_threads < 1:
        raise SpecError("--blas-threads", f"got {args.blas_threads}; give 1 or more")
    names = [n for item in args.backend for n in item.split(",") if n]
    backends = [registry.get(n) for n in names]  # an unknown name is an input error, with a suggestion
    params = split_backend_params(args.param, names)
    for backend in backends:
        if hasattr(backend, "resolve_params"):
            backend.resolve_params(params[backend.name])
    limits = Limits(blas_threads=args.blas_threads, **({"timeout_s": args.timeout} if args.timeout else {}))
    energies, gaps = odd_even_analysis(names, args.g, range(2, args.max_particles + 1), params,
                                       isolated=args.timeout is not None, limits=limits)
    print(f"ground energies at g = {args.g:g} (hbar*omega)")
    print(energies.pivot(index="N", columns="backend", values="energy").to_string())
    for row in energies[energies["status"] != "ok"].itertuples():
        print(f"  {row.backend} N = {row.N}: {row.status}: {row.reason}")
    print(f"\npairing gap, {DEFINITION}")
    if not gaps.empty:
        print(gaps.pivot(index="N", columns="backend", values="gap").to_string())
    return 0
