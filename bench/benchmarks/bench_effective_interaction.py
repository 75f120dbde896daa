"""Convergence of ``oscillator-ed``'s three interactions side by side: bare, running (renormalized) and
the centre-of-mass-aware effective interaction.

Run by hand (not part of the test suite), one core:

    OMP_NUM_THREADS=1 python bench/benchmarks/bench_effective_interaction.py            # full table
    OMP_NUM_THREADS=1 python bench/benchmarks/bench_effective_interaction.py --quick    # cutoffs 8..16
    OMP_NUM_THREADS=1 python bench/benchmarks/bench_effective_interaction.py --survey   # 2+1 error-bar survey
    OMP_NUM_THREADS=1 python bench/benchmarks/bench_effective_interaction.py --windows  # ladder models, cutoffs to 64

Cases: 2+1 with the pair's mass ratio m_up/m_down = 1 and 20/3 at g = 2 and -1 (reference: the
``three-body`` backend, ~1e-8), and 2+2 equal masses at g = 2 (no reference precise enough: the agreed
dataset level has an uncertainty of 1.9e-3, so the table gives successive differences instead).
Each interaction is solved at single cutoffs c = 8, 12, ..., 32 (``ladder = 1``, default basis lengths,
ground state over both parities). Reported per cutoff: the energy, its error (2+1) or the difference
to the previous cutoff (2+2), and the CPU seconds of that one solve (process time, one BLAS thread;
includes building the interaction and the ground state's scalars). The convergence exponent p of
|error| ~ c^-p is fitted by least squares in log-log over the last four cutoffs (for 2+2 from the
successive differences, |E(c) - E(c - 4)| ~ c^-(p+1)); it is reported only where the error keeps
its sign over those cutoffs. A refused combination (the effective interaction where a heavy-heavy-light
trimer can bind) is printed as refused and left out of the tables. The coverage table applies the
backend's ladder rule to every four consecutive cutoffs of the 2+1 rows. ``--survey`` runs the backend
with its default ladder (effective, then running interaction) on 2+1 over mass ratios 0.15-20/3 and g = -3 ... 20 (three levels each) against
``three-body`` and counts the levels within twice their error bars. ``--windows`` solves eight 2+1 problems with
the effective interaction at cutoffs 12, 16, ..., 64 (one ladder each, the pair not heavier than the third particle,
g = -3 ... 20) and applies the backend's model for that interaction (``GuardedHalfPowerSeries``) and the running
coupling's (``GuardedPowerLaw``) to every four consecutive cutoffs from 28 up, against ``three-body``; it also prints
the local exponents log(e_k / e_k+1) / log(c_k+1 / c_k) of the raw errors.
"""

from __future__ import annotations

import argparse
import json
import math
import time

CASES = [(2, 1, m, g) for m in (1.0, 20 / 3) for g in (2.0, -1.0)] + [(2, 2, 1.0, 2.0)]
INTERACTIONS = ("bare", "renormalized", "effective")


def solve(problem, interaction: str, cutoff: int) -> tuple[float, float]:
    from trapbench.backends.oscillator_ed import OscillatorEDBackend

    start = time.process_time()
    result = OscillatorEDBackend().solve(problem, interaction=interaction, cutoff=cutoff, ladder=1)
    return result.energies[0], time.process_time() - start


def fitted_exponent(cutoffs, values) -> float | None:
    """Least-squares slope of log|value| against log c over the last four points (same sign only)."""
    import numpy as np

    c, v = np.asarray(cutoffs[-4:], float), np.asarray(values[-4:], float)
    if len(v) < 3 or not (np.all(v > 0) or np.all(v < 0)):
        return None
    return float(-np.polyfit(np.log(c), np.log(np.abs(v)), 1)[0])


def run(cutoffs) -> list[dict]:
    from threadpoolctl import threadpool_limits

    from trapbench.backends.base import Unsupported
    from trapbench.backends.registry import get
    from trapbench.problems.spec import Problem

    rows = []
    with threadpool_limits(limits=1):
        for n_up, n_down, ratio, g in CASES:
            problem = Problem.create(n_up, n_down, g, mass_up=ratio, mass_down=1.0)
            reference = get("three-body").solve(problem).energies[0] if n_down == 1 else None
            for interaction in INTERACTIONS:
                try:
                    energies, times = zip(*(solve(problem, interaction, c) for c in cutoffs))
                except Unsupported as refusal:
                    print(json.dumps({"case": [n_up, n_down, ratio, g], "interaction": interaction, "refused": str(refusal)}))
                    continue
                row = {"case": [n_up, n_down, ratio, g], "interaction": interaction, "cutoffs": list(cutoffs),
                       "energies": list(energies), "cpu": list(times), "reference": reference}
                if reference is not None:
                    row["errors"] = [e - reference for e in energies]
                    row["exponent"] = fitted_exponent(cutoffs, row["errors"])
                else:
                    row["differences"] = [b - a for a, b in zip(energies, energies[1:])]
                    p = fitted_exponent(cutoffs[1:], row["differences"])
                    row["exponent"] = None if p is None else p - 1
                rows.append(row)
                print(json.dumps(row), flush=True)
    return rows


def table(rows) -> list[str]:
    cutoffs = rows[0]["cutoffs"]
    head = "| case | interaction | " + " | ".join(f"c={c}" for c in cutoffs) + " | p | CPU s at c=" + str(cutoffs[-1]) + " |"
    lines = [head, "|" + "---|" * (len(cutoffs) + 4)]
    for row in rows:
        n_up, n_down, ratio, g = row["case"]
        label = f"{n_up}+{n_down} m={ratio:.3g} g={g:g}"
        values = row.get("errors") or [math.nan] + row["differences"]
        cells = " | ".join("-" if math.isnan(v) else f"{v:+.1e}" for v in values)
        p = "-" if row["exponent"] is None else f"{row['exponent']:.2f}"
        lines.append(f"| {label} | {row['interaction']} | {cells} | {p} | {row['cpu'][-1]:.1f} |")
    return lines


def coverage(rows) -> list[str]:
    """The backend's ladder rule (``oscillator_ed.cutoff_model``) on every four consecutive cutoffs of the
    2+1 rows: extrapolation error against ``three-body``, error bar, and whether |error| <= 2 bars."""
    import statistics

    from trapbench.backends.oscillator_ed import cutoff_model

    lines = ["| case | interaction | cutoffs | error | bar | within 2 bars |", "|---|---|---|---|---|---|"]
    summary = {}
    for row in rows:
        if row["reference"] is None or row["interaction"] == "bare":
            continue
        n_up, n_down, ratio, g = row["case"]
        c, e = row["cutoffs"], row["energies"]
        for end in range(4, len(c) + 1):
            fit = cutoff_model(row["interaction"])(c[end - 4 : end], e[end - 4 : end])
            error = fit.value - row["reference"]
            inside = abs(error) <= 2 * fit.error
            summary.setdefault(row["interaction"], []).append((inside, fit.error / max(abs(error), 1e-15)))
            lines.append(
                f"| {n_up}+{n_down} m={ratio:.3g} g={g:g} | {row['interaction']} | {c[end - 4]}-{c[end - 1]} |"
                f" {error:+.1e} | {fit.error:.1e} | {'yes' if inside else 'NO'} |"
            )
    for name, marks in summary.items():
        lines.append(
            f"\n{name}: {sum(m for m, _ in marks)}/{len(marks)} within 2 bars, median bar / |error| ="
            f" {statistics.median(r for _, r in marks):.1f}"
        )
    return lines


SURVEY_RATIOS = (0.15, 1.0, 2.0, 20 / 3)
SURVEY_COUPLINGS = (-3.0, -1.0, 0.5, 2.0, 10.0, 20.0)


def survey(interaction: str, states: int = 3) -> list[str]:
    """2+1 with default ladders and ``interaction`` against ``three-body``, the lowest ``states`` levels
    over both parities: error, bar, coverage, ground states within 1e-4/1e-5/1e-6; refusals listed."""
    import statistics

    from threadpoolctl import threadpool_limits

    from trapbench.backends.base import Unsupported
    from trapbench.backends.oscillator_ed import OscillatorEDBackend
    from trapbench.backends.registry import get
    from trapbench.problems.spec import Problem

    lines = ["| m_up/m_down | g | level | error | bar | within 2 bars | CPU s |", "|---|---|---|---|---|---|---|"]
    marks, ground = [], []
    with threadpool_limits(limits=1):
        for ratio in SURVEY_RATIOS:
            for g in SURVEY_COUPLINGS:
                problem = Problem.create(2, 1, g, mass_up=ratio, mass_down=1.0, states=states)
                start = time.process_time()
                try:
                    result = OscillatorEDBackend().solve(problem, interaction=interaction)
                except Unsupported:
                    lines.append(f"| {ratio:.3g} | {g:g} | - | refused | - | - | - |")
                    continue
                cpu = time.process_time() - start
                reference = get("three-body").solve(problem).energies
                ground.append(abs(result.energies[0] - reference[0]))
                for k, (e, bar, ref) in enumerate(zip(result.energies, result.energy_errors, reference)):
                    inside = abs(e - ref) <= 2 * bar
                    marks.append((inside, bar / max(abs(e - ref), 1e-15)))
                    lines.append(f"| {ratio:.3g} | {g:g} | {k} | {e - ref:+.1e} | {bar:.1e} | {'yes' if inside else 'NO'} | {cpu:.1f} |")
                print(lines[-1], flush=True)
    within = " / ".join(str(sum(e <= t for e in ground)) for t in (1e-4, 1e-5, 1e-6))
    lines.append(
        f"\n{interaction}: {sum(m for m, _ in marks)}/{len(marks)} levels within 2 bars; median bar / |error| ="
        f" {statistics.median(r for _, r in marks):.1f}; ground states within 1e-4 / 1e-5 / 1e-6: {within}"
        f" of {len(ground)}"
    )
    return lines


WINDOW_CASES = [(1.0, m, g) for m, g in ((1.0, -3.0), (2.0, -3.0), (20 / 3, -3.0), (1.0, -1.0), (1.0, 2.0), (2.0, 5.0),
                                         (1.0, 20.0), (20 / 3, 20.0))]


def windows(top: int = 64, first: int = 28) -> list[str]:
    """Both ladder models on every four consecutive cutoffs of long effective-interaction ladders (module docstring)."""
    import statistics

    import numpy as np
    from threadpoolctl import threadpool_limits

    from trapbench.backends.oscillator_ed import GuardedPowerLaw, OscillatorEDBackend, cutoff_model
    from trapbench.backends.registry import get
    from trapbench.problems.spec import Problem

    models = {"half-power series": cutoff_model("effective"), "fitted power": GuardedPowerLaw()}
    lines = ["| pair/third | g | cutoffs | " + " | ".join(f"{name}: error, bar" for name in models) + " |",
             "|---|---|---|" + "---|" * len(models)]
    marks = {name: [] for name in models}
    with threadpool_limits(limits=1):
        for m_pair, m_third, g in WINDOW_CASES:
            problem = Problem.create(2, 1, g, mass_up=m_pair, mass_down=m_third, states=1)
            reference = get("three-body").solve(problem).energies[0]
            start = time.process_time()
            result = OscillatorEDBackend().solve(problem, interaction="effective", cutoff=top, ladder=(top - 12) // 4 + 1)
            cpu = time.process_time() - start
            cutoffs = np.array(result.diagnostics["cutoffs"], dtype=float)
            raw = np.array([level[0] for level in result.diagnostics["raw_energies"]])
            errors = raw - reference
            local = np.log(np.abs(errors[:-1] / errors[1:])) / np.log(cutoffs[1:] / cutoffs[:-1])
            print(f"pair/third {m_pair / m_third:.3g}, g = {g:g}: {cpu:.0f} CPU s; local exponents "
                  + " ".join(f"{p:.2f}" for p in local), flush=True)
            for end in range(4, len(cutoffs) + 1):
                if cutoffs[end - 4] < first:
                    continue
                cells = []
                for name, model in models.items():
                    fit = model(cutoffs[end - 4 : end], raw[end - 4 : end])
                    error = fit.value - reference
                    marks[name].append((abs(error), fit.error))
                    cells.append(f"{error:+.1e}, {fit.error:.1e}")
                lines.append(f"| {m_pair / m_third:.3g} | {g:g} | {cutoffs[end - 4]:.0f}-{cutoffs[end - 1]:.0f} | "
                             + " | ".join(cells) + " |")
    for name, found in marks.items():
        ratios = [bar / max(err, 1e-15) for err, bar in found]
        lines.append(f"\n{name}: {sum(err <= 2 * bar for err, bar in found)}/{len(found)} within 2 bars; median |error|"
                     f" {statistics.median(err for err, _ in found):.1e}; median bar / |error| {statistics.median(ratios):.1f},"
                     f" smallest {min(ratios):.2f}")
    return lines


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--survey", action="store_true", help="only the 2+1 coverage survey with default ladders")
    parser.add_argument("--windows", action="store_true", help="only the ladder models on 2+1 ladders to cutoff 64")
    args = parser.parse_args()
    if args.windows:
        print("\n".join(windows()))
        return
    if args.survey:
        for interaction in ("effective", "renormalized"):
            print("\n".join(survey(interaction)))
        return
    cutoffs = [8, 12, 16] if args.quick else [8, 12, 16, 20, 24, 28, 32]
    rows = run(cutoffs)
    print("\n".join(table(rows)))
    print("\n".join(coverage(rows)))


if __name__ == "__main__":
    main()
