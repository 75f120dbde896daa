"""Benchmark of ``oscillator-ed``: CPU time and peak memory to reach a relative accuracy, and matvec throughput.

Run by hand (not part of the test suite):

    python bench/benchmarks/bench_oscillator_convergence.py            # full table
    python bench/benchmarks/bench_oscillator_convergence.py --quick    # small budgets

For each case (2+2 and 3+3; g = +2 and -2; mass ratio 1 and 20/3) the renormalized, energy-truncated
ground state (its g = 0 parity sector) is solved on a growing ladder of cutoffs c = 4, 8, 12, ...
until a CPU budget is spent. After each cutoff the last four points are extrapolated
(E_inf + A c^-p on the last three, the backend's rule and error bar). Reported per case:

- the first cutoff where the error bar / |E| <= 1e-4 and <= 1e-6, with the cumulative CPU time;
- the same for the distance to the final extrapolation ("self" error: a lower bound on the true error);
- peak resident memory (VmHWM of a fresh child process per case).

The matvec table compares the compiled factorized-contact matvec with a scipy CSR matvec that
has as many nonzeros as the kernels do multiply-adds (the memory-bandwidth reference, as in the
engineering notes). Times are CPU seconds on one BLAS thread; the machine may be shared.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time

from trapbench.bench.runner import peak_rss_bytes

CASES = [
    (n, n, g, m)
    for n in (2, 3)
    for m in (1.0, 20 / 3)
    for g in (2.0, -2.0)
]


def run_case(index: int, budget: float) -> dict:
    from threadpoolctl import threadpool_limits

    from trapbench.backends import oscillator_ed as oe
    from trapbench.problems.spec import Problem

    n_up, n_down, g, mass = CASES[index]
    problem = Problem.create(n_up, n_down, g, mass_down=mass)
    parity = (-1) ** ((n_up * (n_up - 1) + n_down * (n_down - 1)) // 2)
    rows = []
    start = time.process_time()
    with threadpool_limits(limits=1):
        cutoff = 4
        while time.process_time() - start < budget:
            t0 = time.process_time()
            trunc = oe.Truncation("energy", cutoff)
            g_eff, _ = oe.effective_coupling(problem, trunc, g)
            levels, diag = oe.solve_cutoff(problem, trunc, g_eff, 1, (parity,), 1e-12)
            row = {
                "cutoff": cutoff,
                "energy": levels[0].energy,
                "dimension": diag["dimension"][parity],
                "matvecs": diag["matvecs"][parity],
                "cpu_step": time.process_time() - t0,
                "cpu_total": time.process_time() - start,
            }
            if len(rows) >= 2:  # the backend's rule on its default ladder of (up to) four cutoffs
                ladder = rows[-3:] + [row]
                fit = oe.cutoff_model("renormalized")([r["cutoff"] for r in ladder], [r["energy"] for r in ladder])
                row["extrapolated"], row["error_bar"] = fit.value, fit.error
            rows.append(row)
            cutoff += 4
    final = rows[-1].get("extrapolated", rows[-1]["energy"])
    for row in rows:
        if "extrapolated" in row:
            row["self_error"] = abs(row["extrapolated"] - final)
    return {"case": [n_up, n_down, g, mass], "rows": rows, "peak_bytes": peak_rss_bytes(), "final": final}


def first_reaching(rows: list[dict], key: str, final: float, target: float):
    for row in rows:
        if key in row and row[key] / abs(final) <= target and (key != "self_error" or row is not rows[-1]):
            return row
    return None


def matvec_table() -> list[str]:
    import numpy as np
    import scipy.sparse as sp
    from threadpoolctl import threadpool_limits

    from trapbench.backends import oscillator_ed as oe
    from trapbench.problems.spec import Problem

    lines = ["| system | cutoff | dimension | multiply-adds | matvec CPU s | M madd/s | CSR same nnz CPU s | CSR Mnnz/s |", "|---|---|---|---|---|---|---|---|"]
    rng = np.random.default_rng(0)
    with threadpool_limits(limits=1):
        for (n, c) in ((2, 32), (3, 20), (3, 24)):
            problem = Problem.create(n, n, 2.0)
            sector = oe.sector_basis(problem, oe.Truncation("energy", c), (-1) ** (n * (n - 1)))  # g = 0 ground parity
            ham = oe.hamiltonian(problem, sector, 1.5)
            dim = sector.basis.dim
            v = rng.normal(size=dim)
            ham.matvec(v)
            reps = 5
            t = time.process_time()
            for _ in range(reps):
                ham.matvec(v)
            ours = (time.process_time() - t) / reps
            madds = ham.multiply_adds()
            per_row = max(1, madds // dim)
            cols = rng.integers(0, dim, size=dim * per_row)
            csr = sp.csr_matrix((rng.normal(size=dim * per_row), cols, np.arange(0, dim * per_row + 1, per_row)), shape=(dim, dim))
            csr @ v
            t = time.process_time()
            for _ in range(reps):
                csr @ v
            ref = (time.process_time() - t) / reps
            lines.append(
                f"| {n}+{n} | {c} | {dim} | {madds:.3g} | {ours:.3f} | {madds / ours / 1e6:.0f} | {ref:.3f} | {csr.nnz / ref / 1e6:.0f} |"
            )
    return lines


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small CPU budgets (about a minute in all)")
    parser.add_argument("--case", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--budget", type=float, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.case is not None:
        print(json.dumps(run_case(args.case, args.budget)))
        return 0
    print("## oscillator-ed: renormalized energy-truncated ED, ground state\n")
    print("| case | target | by error bar: cutoff, CPU s | by distance to final: cutoff, CPU s | final E | last error bar | largest dim | peak MiB |")
    print("|---|---|---|---|---|---|---|---|")
    for index, (n_up, n_down, g, mass) in enumerate(CASES):
        budget = (3.0 if n_up == 2 else 10.0) if args.quick else (30.0 if n_up == 2 else 120.0)
        out = subprocess.run(
            [sys.executable, __file__, "--case", str(index), "--budget", str(budget)],
            capture_output=True, text=True, check=True,
        )
        data = json.loads(out.stdout.strip().splitlines()[-1])
        rows, final = data["rows"], data["final"]
        label = f"{n_up}+{n_down}, m_down={mass:.4g}, g={g:+g}"
        for target in (1e-4, 1e-6):
            bar = first_reaching(rows, "error_bar", final, target)
            self_ = first_reaching(rows, "self_error", final, target)
            fmt = lambda r: f"{r['cutoff']}, {r['cpu_total']:.1f}" if r else "not reached"  # noqa: E731
            print(
                f"| {label} | {target:g} | {fmt(bar)} | {fmt(self_)} | {final:.8f} | {rows[-1].get('error_bar', float('nan')):.2e} |"
                f" {rows[-1]['dimension']} | {data['peak_bytes'] / 2**20:.0f} |",
                flush=True,
            )
    print("\n## matvec throughput (CPU, one thread)\n")
    print("\n".join(matvec_table()))
    return 0


if __name__ == "__main__":
    sys.exit(main())
