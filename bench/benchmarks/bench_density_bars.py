"""Benchmark of oscillator-ed's density error bars beyond three particles, against lattice-dmrg's densities.

Run by hand (not part of the test suite):

    python bench/benchmarks/bench_density_bars.py [--problem 2+2:1:1:2 ...] [--spacing-factor F] [--out lines.jsonl]

No exact density exists beyond three particles, so each problem (N_up+N_down:mass_up:mass_down:g; default the
list below) is solved with the default parameters of both backends: lattice-dmrg's densities are extrapolated to
the continuum with a bar of their own (``backends/lattice.py``, measured against ``three-body`` and ``two-body``
in ``bench_lattice_results.md``), and they grade oscillator-ed's grids where that bar is at most a tenth of
oscillator-ed's (the project's rule). Reported per density: both bars, the largest deviation over oscillator-ed's
grid (lattice-dmrg carried onto it by a quintic spline), deviation / oscillator-ed bar, and CPU seconds. Each
problem runs in a fresh process with one BLAS thread; lines are appended to ``--out`` as they finish.
``--spacing-factor`` scales lattice-dmrg's default spacings (e.g. 0.75: a tighter reference, its bar ~ a^4, at
about twice the cost).
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
from pathlib import Path

DEFAULT_PROBLEMS = (
    "2+2:1:1:2", "2+2:1:1:-2", "3+1:1:1:2", "2+2:6.666666666666667:1:2",
    "3+2:1:1:2", "3+3:1:1:2", "3+1:1:1:5", "2+2:2:1:-1",
)


def grade_one(spec: str, spacing_factor: float = 1.0) -> list[dict]:
    """In a fresh process: both backends with defaults (lattice-dmrg's spacings scaled by ``spacing_factor``); one
    row per species' density."""
    import time

    import numpy as np
    from scipy.interpolate import make_interp_spline
    from threadpoolctl import threadpool_limits

    from trapbench.backends import registry
    from trapbench.problems.spec import Problem

    counts, mass_up, mass_down, g = spec.split(":")
    n_up, n_down = (int(n) for n in counts.split("+"))
    problem = Problem.create(n_up, n_down, float(g), mass_up=float(mass_up), mass_down=float(mass_down),
                             observables=["density"])
    lattice_backend = registry.get("lattice-dmrg")
    defaults = lattice_backend.resolve_params({})
    spacings = [spacing_factor * a for a in lattice_backend.ladder(problem, defaults).spacings]
    scaled = {"spacings": spacings, "max_sites": int(defaults["max_sites"] / spacing_factor) + 1}  # the budget scaled alike
    params = {"oscillator-ed": {}, "lattice-dmrg": {} if spacing_factor == 1.0 else scaled}
    solved, cpu = {}, {}
    with threadpool_limits(1):
        for name in ("oscillator-ed", "lattice-dmrg"):
            start = time.process_time()
            solved[name] = registry.get(name).solve(problem, **params[name])
            cpu[name] = time.process_time() - start
    rows = []
    for species in ("up", "down"):
        oscillator = solved["oscillator-ed"].observables[f"density_{species}"]
        lattice = solved["lattice-dmrg"].observables[f"density_{species}"]
        on_grid = make_interp_spline(lattice.axes["x"], lattice.values, k=5)(oscillator.axes["x"])
        deviation = float(np.max(np.abs(oscillator.values - on_grid)))
        rows.append({
            "problem": spec, "spacing_factor": spacing_factor, "species": species, "oscillator_bar": oscillator.error, "lattice_bar": lattice.error,
            "deviation": deviation, "graded": lattice.error <= oscillator.error / 10,
            "cpu_oscillator": cpu["oscillator-ed"], "cpu_lattice": cpu["lattice-dmrg"],
        })
    return rows


def table(rows: list[dict]) -> str:
    out = ["| problem (N, masses, g) | density | oscillator-ed bar | lattice-dmrg bar | deviation | deviation / bar |"
           " graded | CPU s (oscillator / lattice) |", "|---|---|---|---|---|---|---|---|"]
    for row in rows:
        out.append(f"| {row['problem']} | {row['species']} | {row['oscillator_bar']:.1e} | {row['lattice_bar']:.1e} |"
                   f" {row['deviation']:.1e} | {row['deviation'] / row['oscillator_bar']:.2f} | {'yes' if row['graded'] else 'no'} |"
                   f" {row['cpu_oscillator']:.0f} / {row['cpu_lattice']:.0f} |")
    graded = [row["deviation"] / row["oscillator_bar"] for row in rows if row["graded"]]
    if graded:
        out.append(f"\ngraded {len(graded)} of {len(rows)} densities: {sum(r <= 1 for r in graded)} within one bar,"
                   f" {sum(r <= 2 for r in graded)} within two; median bar / deviation {statistics.median(1 / r for r in graded):.1f}")
    return "\n".join(out)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--problem", action="append", help="N_up+N_down:mass_up:mass_down:g (repeatable)")
    parser.add_argument("--spacing-factor", type=float, default=1.0, help="scale lattice-dmrg's default spacings (default 1)")
    parser.add_argument("--out", type=Path, help="append each problem's rows as a JSON line")
    parser.add_argument("--worker", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.worker:
        print(json.dumps(grade_one(args.worker, args.spacing_factor)))
        return
    rows = []
    for spec in args.problem or DEFAULT_PROBLEMS:
        done = subprocess.run([sys.executable, __file__, "--worker", spec, "--spacing-factor", str(args.spacing_factor)],
                              capture_output=True, text=True)
        if done.returncode != 0:
            print(f"{spec}: failed\n{done.stderr.strip().splitlines()[-1] if done.stderr.strip() else ''}", file=sys.stderr)
            continue
        found = json.loads(done.stdout.strip().splitlines()[-1])
        rows += found
        if args.out:
            with args.out.open("a") as handle:
                handle.write(json.dumps(found) + "\n")
        print(f"{spec}: done", file=sys.stderr, flush=True)
    print(table(rows))


if __name__ == "__main__":
    main()
