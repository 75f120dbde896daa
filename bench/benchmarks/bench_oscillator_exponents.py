"""Benchmark of ``oscillator-ed``'s convergence law: long single-cutoff ladders of 2+1 against ``three-body``.

Run by hand (not part of the test suite; about 15 CPU minutes on one core):

    python bench/benchmarks/bench_oscillator_exponents.py [--cutoffs 20,24,...,60] [--case KEY ...]

Each case is a 2+1 point of the shipped reference dataset (key 'N_up+N_down|m_up|m_down|g'), solved with the
backend's defaults (running coupling, energy truncation, automatic orbital lengths) at one cutoff at a time
(``ladder = 1``), so every cutoff's raw ground energy is seen. Reported per case and cutoff: the error against
the dataset's ``three-body`` value (uncertainty <= 1e-8, far below every error here), the local exponent
p_i = ln(err_i / err_{i+1}) / ln(c_{i+1} / c_i) where the error keeps its sign, and the CPU time of the solve.
Then the limit E_inf of fixed-exponent series E(c) = E_inf + sum_k A_k c^(-q_k), least squares over four
consecutive cutoffs, for two windows, minus the reference: it shows which law the ladder follows where.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

CASES = (
    "2+1|1|1|5",
    "2+1|1|1|20",
    "2+1|2|1|-3",
    "2+1|1|2|-3",
    "2+1|1|6.66666666667|-3",
    "2+1|1|6.66666666667|20",
    "2+1|6.66666666667|1|-1",
    "2+1|6.66666666667|1|20",
)
SERIES = ((1.5,), (1.5, 2.0), (1.5, 2.5), (1.5, 2.0, 2.5))


def series_limit(cutoffs: np.ndarray, energies: np.ndarray, powers: tuple[float, ...]) -> float:
    design = np.column_stack([np.ones_like(cutoffs)] + [cutoffs ** (-q) for q in powers])
    return float(np.linalg.lstsq(design, energies, rcond=None)[0][0])


def run_case(key: str, cutoffs: list[int]) -> None:
    from threadpoolctl import threadpool_limits

    from trapbench.backends.oscillator_ed import OscillatorEDBackend
    from trapbench.problems import dataset
    from trapbench.problems.spec import Problem

    entry = dataset.load().index[key]
    level = entry.levels[0]
    reference = next(run for run in level.runs if run.backend == "three-body")
    problem = Problem.create(entry.n_up, entry.n_down, entry.g, mass_up=entry.mass_up, mass_down=entry.mass_down)
    backend = OscillatorEDBackend()
    energies, lengths = [], None
    print(f"\n### {key} (reference {reference.value:.10f} +- {reference.error:.1e}, three-body)\n")
    print("| cutoff | E | E - reference | local p | CPU s |")
    print("|---|---|---|---|---|")
    with threadpool_limits(limits=1):
        for index, cutoff in enumerate(cutoffs):
            start = time.process_time()
            solution = backend.solve(problem, cutoff=cutoff, ladder=1)
            cpu = time.process_time() - start
            lengths = solution.diagnostics["basis_lengths"]
            energies.append(solution.energies[0])
            error = energies[-1] - reference.value
            local = ""
            if index:
                before = energies[-2] - reference.value
                if before * error > 0:
                    local = f"{np.log(before / error) / np.log(cutoff / cutoffs[index - 1]):.3f}"
            print(f"| {cutoff} | {energies[-1]:.12f} | {error:+.3e} | {local} | {cpu:.1f} |", flush=True)
    print(f"\norbital lengths {', '.join(f'{b:.4f}' for b in lengths)}\n")
    c, e = np.array(cutoffs, dtype=float), np.array(energies)
    windows = [slice(i, i + 4) for i in (len(c) // 2 - 2, len(c) - 4)] if len(c) >= 8 else [slice(len(c) - 4, len(c))]
    print("| series exponents | " + " | ".join(f"c = {int(c[w][0])}-{int(c[w][-1])}" for w in windows) + " |")
    print("|---|" + "---|" * len(windows))
    for powers in SERIES:
        limits = [series_limit(c[w], e[w], powers) - reference.value for w in windows]
        print(f"| {', '.join(f'{q:g}' for q in powers)} | " + " | ".join(f"{x:+.1e}" for x in limits) + " |")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cutoffs", default="20,24,28,32,36,40,44,48,52,56,60")
    parser.add_argument("--case", action="append", default=None, help="dataset key, e.g. '2+1|1|1|5' (repeatable)")
    args = parser.parse_args()
    cutoffs = sorted(int(x) for x in args.cutoffs.split(","))
    if len(cutoffs) < 4:
        parser.error("--cutoffs: give at least four cutoffs (the series fits use four)")
    for key in args.case or CASES:
        run_case(key, cutoffs)


if __name__ == "__main__":
    main()
