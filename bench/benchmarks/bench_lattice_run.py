"""Time and peak memory of one lattice-backend run (a script run by hand; not part of the test run).

One configuration per process, so that the peak resident memory (VmHWM of /proc/self/status,
read inside the process at the end) belongs to this run alone. BLAS is pinned to one thread.
Prints one JSON line; ``--out`` appends it to a file.

    python bench/benchmarks/bench_lattice_run.py --backend lattice-dmrg --up 4 --down 4 --g 2 \\
        --spacings 0.5,0.4,0.32 --chi 64,128,256 --out lattice_runs.jsonl
    python bench/benchmarks/bench_lattice_run.py --backend lattice-ed --up 2 --down 2 --g 2 \\
        --grid-only --sites 40            # one lattice: time and memory against L

Reference energies for the accuracy column: ``--exact`` (e.g. the three-body backend, the reference dataset, or an exact 1+1 root).
"""

from __future__ import annotations

import argparse
import json
import time
import warnings
from pathlib import Path

from threadpoolctl import threadpool_limits

from trapbench.bench.runner import peak_rss_bytes


def numbers(text: str | None) -> tuple[float, ...] | None:
    return None if not text else tuple(float(v) for v in text.split(","))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--backend", choices=("lattice-ed", "lattice-dmrg"), required=True)
    parser.add_argument("--up", type=int, required=True)
    parser.add_argument("--down", type=int, required=True)
    parser.add_argument("--g", type=float, required=True)
    parser.add_argument("--mass-up", type=float, default=1.0)
    parser.add_argument("--mass-down", type=float, default=1.0)
    parser.add_argument("--states", type=int, default=1)
    parser.add_argument("--spacings", help="comma-separated ladder (default: the backend's)")
    parser.add_argument("--x-max", type=float)
    parser.add_argument("--chi", help="comma-separated bond dimensions (lattice-dmrg)")
    parser.add_argument("--max-sweeps", type=int)
    parser.add_argument("--tolerance", type=float)
    parser.add_argument("--grid-only", action="store_true", help="solve one lattice of --sites sites, no ladder")
    parser.add_argument("--sites", type=int)
    parser.add_argument("--exact", type=float, help="reference ground energy for the accuracy column")
    parser.add_argument("--out", type=Path)
    args = parser.parse_args()

    from trapbench.backends import lattice
    from trapbench.backends.registry import get
    from trapbench.problems.spec import Problem

    warnings.simplefilter("ignore")
    problem = Problem.create(args.up, args.down, args.g, mass_up=args.mass_up, mass_down=args.mass_down, states=args.states)
    backend = get(args.backend)
    params = {}
    if args.spacings:
        params["spacings"] = numbers(args.spacings)
    if args.x_max is not None:
        params["x_max"] = args.x_max
    if args.chi:
        params["chi"] = tuple(int(c) for c in numbers(args.chi))
    if args.max_sweeps is not None:
        params["max_sweeps"] = args.max_sweeps
    if args.tolerance is not None:
        params["tolerance"] = args.tolerance
    record = {
        "backend": args.backend, "config": f"{args.up}+{args.down}", "g": args.g, "mass_up": args.mass_up, "mass_down": args.mass_down,
    }
    wall, cpu = time.perf_counter(), time.process_time()
    with threadpool_limits(limits=1):
        if args.grid_only:
            resolved = backend.resolve_params(params)
            half_width = args.x_max or lattice.half_width(problem)
            grid = lattice.make_grid(problem, 2 * half_width / (args.sites - 1), half_width)
            if args.backend == "lattice-ed":
                from trapbench.backends.lattice_ed import solve_on_grid

                levels = solve_on_grid(problem, grid, False, resolved["tolerance"])
            else:
                from trapbench.backends.lattice_dmrg import solve_on_grid

                levels = solve_on_grid(problem, grid, False, resolved["chi"], resolved)
            record.update(
                sites=grid.sites, energies=sorted(levels.energies), solver_errors=levels.solver_errors,
                diagnostics=levels.diagnostics,
            )
        else:
            result = backend.solve(problem, **params)
            record.update(
                energies=result.energies,
                error_estimate=result.error_estimate,
                sites=result.diagnostics["sites"],
                spacings=result.diagnostics["spacings"],
                lattice_energies=result.diagnostics["raw_energies"],
                warnings=result.warnings,
                chi_ladders=[d.get("chi_ladder") for d in result.diagnostics["per_rung"]],
            )
    record.update(
        params={k: list(v) if isinstance(v, tuple) else v for k, v in params.items()},
        wall_s=time.perf_counter() - wall,
        cpu_s=time.process_time() - cpu,
        peak_memory_bytes=peak_rss_bytes(),
    )
    if args.exact is not None:
        record["exact"] = args.exact
        record["relative_error"] = abs(record["energies"][0] - args.exact) / abs(args.exact)
    line = json.dumps(record)
    print(line)
    if args.out:
        with args.out.open("a") as handle:
            handle.write(line + "\n")


if __name__ == "__main__":
    main()
