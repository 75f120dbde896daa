"""Benchmark of ``oscillator-ed`` error bars against an independent reference: coverage and calibration.

Run by hand (not part of the test suite):

    python bench/benchmarks/bench_oscillator_coverage.py STORE.sqlite [--out lines.jsonl] [--only 2+1]

STORE is a trapbench result store holding ``three-body`` results (spectral elements in the Jacobi
plane, a different method, ~1e-10). Every stored 2+1 and 1+2 problem is solved with oscillator-ed's
default parameters (three lowest levels), one problem per fresh process so CPU time and peak memory
(VmHWM) are per problem. Reported: per level |error| / error bar; coverage = share of levels with
|error| <= 2 x error bar; the median of error bar / |error|; CPU seconds. Lines are appended to
``--out`` as they finish (a JSON object per problem), and the summary table is printed from them.
"""

from __future__ import annotations

import argparse
import json
import sqlite3
import statistics
import subprocess
import sys
from pathlib import Path


def reference_problems(store: str) -> list[dict]:
    connection = sqlite3.connect(f"file:{store}?mode=ro", uri=True)
    rows = connection.execute(
        "select problem, energies, energy_errors from tasks where backend = 'three-body' and status = 'ok'"
        " and n_up + n_down = 3 order by mass_up, mass_down, n_up, g"
    ).fetchall()
    return [{"problem": json.loads(p), "energies": json.loads(e), "errors": json.loads(x)} for p, e, x in rows]


def solve_one(problem_json: str) -> dict:
    """In a fresh process: oscillator-ed with defaults, CPU time and peak memory."""
    import time

    from threadpoolctl import threadpool_limits

    from trapbench.backends.registry import get
    from trapbench.problems.spec import Problem

    problem = Problem.from_dict(json.loads(problem_json))
    start = time.process_time()
    with threadpool_limits(limits=1):
        result = get("oscillator-ed").solve(problem)
    cpu = time.process_time() - start
    with open("/proc/self/status") as status:
        peak = next(int(line.split()[1]) * 1024 for line in status if line.startswith("VmHWM:"))
    return {
        "energies": list(result.energies),
        "errors": list(result.energy_errors or []),
        "cpu_s": cpu,
        "peak_bytes": peak,
        "lengths": result.diagnostics.get("basis_lengths"),
        "interaction": result.diagnostics.get("interaction"),
        "warnings": list(result.warnings),
    }


def label(problem: dict) -> str:
    up, down = problem["up"], problem["down"]
    return f"{up['count']}+{down['count']} m_up={up['mass']:.4g} m_down={down['mass']:.4g} g={problem['interaction']['g']:g}"


def summarize(lines: list[dict]) -> str:
    ratios, calibration, cpu, table = [], [], [], []
    for line in lines:
        for k, (exact, value, bar) in enumerate(zip(line["reference"], line["energies"], line["errors"])):
            error = abs(value - exact)
            ratios.append(error / bar)
            calibration.append(bar / max(error, 1e-15))
            table.append(f"| {line['label']} | {k} | {exact:.10f} | {value:.10f} | {error:.2e} | {bar:.2e} | {error / bar:.2f} |")
        cpu.append(line["cpu_s"])
    covered = sum(r <= 2 for r in ratios)
    head = [
        f"levels: {len(ratios)}; within 2 x error bar: {covered} ({100 * covered / max(len(ratios), 1):.1f} %)",
        f"median error bar / |error|: {statistics.median(calibration):.1f}",
        f"CPU s per problem: median {statistics.median(cpu):.1f}, max {max(cpu):.1f}",
        "",
        "| problem | level | three-body | oscillator-ed | abs error | error bar | error / bar |",
        "|---|---|---|---|---|---|---|",
    ]
    return "\n".join(head + table)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("store")
    parser.add_argument("--out", default="oscillator_coverage.jsonl")
    parser.add_argument("--only", default=None, help="'2+1' or '1+2'")
    parser.add_argument("--worker", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.worker:
        print(json.dumps(solve_one(sys.stdin.read())))
        return
    out = Path(args.out)
    done = {json.loads(line)["label"] for line in out.read_text().splitlines()} if out.exists() else set()
    for reference in reference_problems(args.store):
        name = label(reference["problem"])
        counts = f"{reference['problem']['up']['count']}+{reference['problem']['down']['count']}"
        if name in done or (args.only and counts != args.only):
            continue
        run = subprocess.run(
            [sys.executable, __file__, args.store, "--worker"],
            input=json.dumps(reference["problem"]),
            capture_output=True,
            text=True,
            check=True,
        )
        line = {"label": name, "reference": reference["energies"], **json.loads(run.stdout.strip().splitlines()[-1])}
        with out.open("a") as handle:
            handle.write(json.dumps(line) + "\n")
        print(name, ["%.2e" % abs(a - b) for a, b in zip(line["energies"], reference["energies"])], line["errors"], flush=True)
    print(summarize([json.loads(line) for line in out.read_text().splitlines()]))


if __name__ == "__main__":
    main()
