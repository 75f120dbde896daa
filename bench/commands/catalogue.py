"""``trapbench catalogue [NAME]``: the benchmark problems and their reference values with sources."""

from __future__ import annotations

import argparse
import json
from dataclasses import asdict

from ...problems.errors import SpecError
from ...problems.toml_io import format_problem

NAME = "catalogue"
HELP = "list the benchmark catalogue, or show one entry's problem and reference values with their sources"
ORDER = 45


def register(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("name", nargs="?", help="an entry name, e.g. 2+1/equal/strong-repulsive")
    parser.add_argument("--json", action="store_true",
                        help="print the entry (problem and references) as JSON; without a name, every entry as one array")
    parser.add_argument("--toml", action="store_true", help="print the entry's problem as a TOML spec file")


def run(args: argparse.Namespace) -> int:
    from ...problems.catalogue import entries, get

    if args.name is None:
        if args.toml:
            raise SpecError("--toml", "prints one entry's problem; name the entry (see 'trapbench catalogue')")
        if args.json:
            print(json.dumps([_entry_json(entry) for entry in entries()], indent=1))
            return 0
        for entry in entries():
            print(f"{entry.name:32s} {entry.problem.describe()}, {entry.problem.targets.states} state(s)")
        return 0
    entry = get(args.name)
    if args.toml:
        print(format_problem(entry.problem), end="")
        return 0
    if args.json:
        print(json.dumps(_entry_json(entry), indent=1))
        return 0
    print(f"{entry.name}: {entry.problem.describe()} (energies in hbar*omega, g in sqrt(hbar^3 omega/m0))")
    sources = []
    for r in entry.references:
        if r.source not in sources:
            sources.append(r.source)
        print(f"  {r.quantity:13s} state {r.state:2d}  {r.value:.12g}  +- {r.uncertainty:.2g}  {r.kind:8s}"
              f" [{sources.index(r.source) + 1}] {r.note}")
    for i, source in enumerate(sources, 1):
        print(f"  [{i}] {source}")
    return 0


def _entry_json(entry) -> dict:
    return {"name": entry.name, "regime": entry.regime, "problem": entry.problem.to_dict(),
            "references": [asdict(r) for r in entry.references]}
