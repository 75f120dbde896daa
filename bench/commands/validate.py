"""``trapbench validate --backend NAME [PROBLEM]``: the common check suite (contract and physics) of one backend.

Without a problem (spec file or --up/--down/--g) the checks run on the small built-in problems the backend
admits (``bench.check_suite``); with one, on each of its values of g. ``--tier quick`` (default) keeps the
physics checks to the smallest problem and the smallest with three or more particles; ``--tier thorough`` runs them all and the catalogue's references.
"""

from __future__ import annotations

import argparse
import json
from dataclasses import asdict

from ...backends import registry
from ...problems.errors import SpecError
from .problem_options import add_problem_options, parse_params, problem_from_args

NAME = "validate"
HELP = "check a backend against exact physics (virial, Hellmann-Feynman, towers, symmetries) and the references"
ORDER = 40


def register(parser: argparse.ArgumentParser) -> None:
    from ..check_suite import CONTRACT_CHECKS, QUICK_BUDGET_S, TIERS
    from ..validation import CHECKS, CheckTolerance

    default = CheckTolerance()
    add_problem_options(parser, required=False)
    parser.add_argument("--backend", "-b", required=True, metavar="NAME", help="the backend to validate")
    parser.add_argument("--param", "-p", action="append", metavar="KEY=VALUE",
                        help="numerical parameter of the backend (repeatable)")
    names = ["declaration", *CONTRACT_CHECKS, *CHECKS]
    parser.add_argument("--check", action="append", metavar="NAME", choices=names,
                        help="run only this check (repeatable); default: all of " + ", ".join(names))
    parser.add_argument("--tier", choices=TIERS, default="quick",
                        help="quick (default): the contract and the physics checks on the smallest problem and the smallest"
                             " with three or more particles;"
                             " thorough: every physics check on every problem, and the catalogue's references")
    parser.add_argument("--budget", type=float, default=None, metavar="SECONDS",
                        help=f"start no check after this much wall time; the rest are reported as skipped"
                             f" (default: {QUICK_BUDGET_S:g} s with --tier quick, none with thorough)")
    parser.add_argument("--catalogue", type=int, default=None, metavar="N",
                        help="compare with the references of every catalogue entry with at most N particles"
                             " (default: 3 with --tier thorough, 0 with quick)")
    parser.add_argument("--absolute", type=float, default=default.absolute, metavar="TOL",
                        help=f"absolute tolerance in hbar*omega (default {default.absolute:g})")
    parser.add_argument("--relative", type=float, default=default.relative, metavar="TOL",
                        help=f"relative tolerance (default {default.relative:g})")
    parser.add_argument("--error-factor", type=float, default=default.error_factor, metavar="K",
                        help=f"multiple of the backend's own error estimate added to the tolerance (default {default.error_factor:g})")
    parser.add_argument("--json", action="store_true", help="print the verdicts as JSON")


def run(args: argparse.Namespace) -> int:
    from ..check_suite import QUICK_BUDGET_S, validate
    from ..validation import CheckTolerance, verdict_table

    for field in ("absolute", "relative", "error_factor"):
        if getattr(args, field) < 0:
            raise SpecError(f"--{field.replace('_', '-')}", f"got {getattr(args, field)}; must be >= 0")
    if args.budget is not None and args.budget <= 0:
        raise SpecError("--budget", f"got {args.budget}; give a positive number of seconds")
    budget = args.budget if args.budget is not None else (QUICK_BUDGET_S if args.tier == "quick" else None)
    backend = registry.get(args.backend)
    tolerance = CheckTolerance(args.absolute, args.relative, args.error_factor)
    problem = problem_from_args(args)  # None: the built-in small problems
    verdicts = validate(backend, problems=None if problem is None else problem.points(), params=parse_params(args.param),
                        tolerance=tolerance, checks=args.check, catalogue_max_particles=args.catalogue, tier=args.tier,
                        progress=not args.json, budget_s=budget)
    if args.json:
        print(json.dumps([asdict(v) for v in verdicts], indent=1))
    else:
        print(f"validation of backend '{backend.name}' (energies in hbar*omega)")
        print(verdict_table(verdicts))
    return 1 if any(v.failed for v in verdicts) else 0
