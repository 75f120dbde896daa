"""``trapbench convert``: laboratory parameters -> dimensionless masses and g (Olshanii, PRL 81, 938)."""

from __future__ import annotations

import argparse
import json

from ...problems.spec import PhysicalUnits
from ...problems.toml_io import load_problem

NAME = "convert"
HELP = "convert atomic masses, trap frequencies and a 3D scattering length to trapbench's g"
ORDER = 30


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("spec", nargs="?", help="a problem file with a [physical] block (or give the values below)")
    parser.add_argument("--mass-up-u", type=float, metavar="U", help="mass of the up atom in u")
    parser.add_argument("--mass-down-u", type=float, metavar="U", help="mass of the down atom in u")
    parser.add_argument("--axial-hz", type=float, metavar="F", help="axial trap frequency in Hz (not angular)")
    parser.add_argument("--transverse-hz", type=float, metavar="F", help="transverse trap frequency in Hz")
    parser.add_argument("--a-bohr", metavar="A[,A...]", help="3D s-wave scattering length(s) in Bohr radii")
    parser.add_argument("--reference-mass-u", type=float, metavar="U", help="reference mass m0 in u (default: up)")
    parser.add_argument("--json", action="store_true", help="print the conversion(s) as JSON")


def run(args: argparse.Namespace) -> int:
    if args.spec:
        problem = load_problem(args.spec)
        if problem.physical is None:
            from ...problems.errors import SpecError

            raise SpecError("physical", f"{args.spec} has no [physical] block to convert")
        physical = problem.physical
    else:
        physical = PhysicalUnits.from_dict(
            {
                key: value
                for key, value in {
                    "mass_up_u": args.mass_up_u,
                    "mass_down_u": args.mass_down_u,
                    "axial_frequency_hz": args.axial_hz,
                    "transverse_frequency_hz": args.transverse_hz,
                    "scattering_length_bohr": _floats(args.a_bohr),
                    "reference_mass_u": args.reference_mass_u,
                }.items()
                if value is not None
            }
        )
    conversions = physical.conversions()
    if args.json:
        print(json.dumps([c.as_dict() for c in conversions], indent=1))
        return 0
    for a, conversion in zip(physical.scattering_length_bohr, conversions):
        print(f"a_3D = {a:g} a_0")
        print("  " + conversion.explain().replace("\n", "\n  "))
    return 0


def _floats(text: str | None) -> list[float] | None:
    if text is None:
        return None
    from ...problems.errors import SpecError

    try:
        return [float(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise SpecError("--a-bohr", f"got {text!r}; give a number or comma-separated numbers") from None
