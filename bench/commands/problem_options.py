"""Command-line options that state a problem: a TOML spec file or inline species, g and targets."""

from __future__ import annotations

import argparse

from ...problems.errors import SpecError
from ...problems.spec import Problem
from ...problems.toml_io import load_problem


def add_problem_options(parser: argparse.ArgumentParser, required: bool = True) -> None:
    parser.add_argument("spec", nargs="?", help="problem file (TOML); or give the problem inline")
    inline = parser.add_argument_group("inline problem (instead of a file)")
    inline.add_argument("--up", type=int, metavar="N", help="number of up fermions")
    inline.add_argument("--down", type=int, metavar="M", help="number of down fermions")
    inline.add_argument("--mass-up", type=float, default=1.0, metavar="A", help="mass of up, units of m0 (default 1)")
    inline.add_argument("--mass-down", type=float, default=1.0, metavar="B", help="mass of down, units of m0 (default 1)")
    inline.add_argument("--g", metavar="G[,G...]", help="contact coupling; a comma-separated list is a scan")
    inline.add_argument("--states", type=int, metavar="K", help="number of lowest states (default 1)")
    inline.add_argument("--parity", choices=("any", "even", "odd"), help="parity sector (default any)")
    inline.add_argument("--observables", metavar="NAME[,NAME...]", help="e.g. density,momentum,noise")
    parser.set_defaults(problem_required=required)


def _floats(text: str, field: str) -> list[float]:
    try:
        return [float(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise SpecError(field, f"got {text!r}; give a number or comma-separated numbers, e.g. --g -1,0.5,2") from None


def problem_from_args(args: argparse.Namespace) -> Problem | None:
    """The problem stated on the command line; None when none was given and none is required."""
    inline_given = args.up is not None or args.down is not None or args.g is not None
    if args.spec and inline_given:
        raise SpecError("--up/--down/--g", "given together with a spec file; use one or the other")
    if args.spec:
        problem = load_problem(args.spec)
        overrides = {
            key: value
            for key, value in (("states", args.states), ("parity", args.parity))
            if value is not None
        }
        if args.observables:
            overrides["observables"] = args.observables.split(",")
        return problem.with_targets(**overrides) if overrides else problem
    if not inline_given:
        if args.problem_required:
            raise SpecError("problem", "none given; pass a spec file or --up N --down M --g G")
        return None
    for name in ("up", "down", "g"):
        if getattr(args, name) is None:
            raise SpecError(f"--{name}", "missing; an inline problem needs --up, --down and --g")
    g = _floats(args.g, "--g")
    return Problem.from_dict(
        {
            "up": {"count": args.up, "mass": args.mass_up},
            "down": {"count": args.down, "mass": args.mass_down},
            "interaction": {"g": g if len(g) > 1 else g[0]},
            "targets": {
                "states": args.states if args.states is not None else 1,
                "parity": args.parity or "any",
                "observables": args.observables.split(",") if args.observables else [],
            },
        }
    )


def parse_params(pairs: list[str] | None) -> dict[str, str]:
    """--param key=value pairs into a dict of strings (the backend converts and checks them)."""
    params = {}
    for pair in pairs or []:
        key, sep, value = pair.partition("=")
        if not sep or not key.strip():
            raise SpecError("--param", f"got {pair!r}; write key=value, e.g. --param cutoff=12")
        params[key.strip()] = value.strip()
    return params
