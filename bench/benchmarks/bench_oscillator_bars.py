"""Benchmark of ``oscillator-ed``'s error-bar rule on stored ladders: coverage and calibration per particle number.

Run by hand (not part of the test suite):

    python bench/benchmarks/bench_oscillator_bars.py --store S1.sqlite [--store S2.sqlite ...] [--factor 1 --factor 2]
        [--shift 0.1 --shift 0.25]

Every successful oscillator-ed task in the stores (running coupling, four or more cutoffs) on a grid point of
the shipped reference dataset is graded level by level against another method's value for that level: for
N = 3 the ``three-body`` value, for N >= 4 the lattice family's (lattice-dmrg or lattice-ed, chosen among
their runs as the dataset does), whether the level is agreed or open -- a disagreement must count against the
bar. Graded strictly (the project's rule) only where that reference's uncertainty is at most a tenth of the bar;
that drops exactly the levels whose bar a rule narrows most, so every level with a reference is also counted
against the combined bars, |E - reference| <= 2 (bar + reference uncertainty). The stored
ladder (``diagnostics.energy_fits``: cutoffs and raw energies) is extrapolated again with
``GuardedPowerLaw(change_factor=f, asymptotic_shift=s)`` for each factor and exponent shift (of ladders
reaching the asymptotic cutoff) asked (defaults: the backend's), so one set of solves measures every variant.
With ``--interaction effective`` the stored effective-interaction ladders are graded instead, first with the backend's
model for them (``GuardedHalfPowerSeries``, "half-power series") and then with ``GuardedPowerLaw`` as before version 15.
With ``--as-reported`` the stored energies and bars are graded as the backend reported them (no
re-extrapolation; e.g. version 7's centre-of-mass copies, which take their parent's value and bar).
With ``--same-store`` the N = 3 ladders are graded against the stores' own ``three-body`` results instead, so
problems off the dataset's grid count too (e.g. ``heavy_pair_suite.toml``, the pair heavier up to mass ratio 28.8).
Reported per N: levels graded, within 2 bars, the median and the smallest of bar / |E - reference|; then
all levels with a reference and how many lie within twice the combined bars.
"""

from __future__ import annotations

import argparse
import json
import sqlite3
import statistics
from collections import defaultdict

import numpy as np

from trapbench.backends.oscillator_ed import GuardedPowerLaw, cutoff_model
from trapbench.problems import dataset

LATTICE = ("lattice-dmrg", "lattice-ed")


def reference(level: dataset.DatasetLevel, n_particles: int) -> tuple[float, float] | None:
    """(value, uncertainty) of another method family for this level, or None."""
    wanted = ("three-body",) if n_particles == 3 else LATTICE
    by_backend: dict[str, list] = defaultdict(list)
    for run in level.runs:
        if run.backend in wanted:
            by_backend[run.backend].append(run)
    if not by_backend:
        return None
    chosen = min((dataset.choose_run(found) for found in by_backend.values()), key=lambda m: m.error)
    return chosen.value, chosen.error


def stored_results(stores: list[str], backend: str = "oscillator-ed"):
    """(N, grid key, result) of every successful task of ``backend`` in the stores."""
    for store in stores:
        connection = sqlite3.connect(f"file:{store}?mode=ro", uri=True)
        for (text,) in connection.execute("select result from tasks where backend = ? and status = 'ok'", (backend,)):
            result = json.loads(text)
            up, down = result["problem"]["up"], result["problem"]["down"]
            key = dataset.physics_key(up["count"], down["count"], up["mass"], down["mass"], result["g"])
            yield up["count"] + down["count"], key, result


def stored_three_body(stores: list[str]) -> dict:
    """{(grid key, level): (value, uncertainty)} of the ``three-body`` results in the stores (``--same-store``)."""
    return {(key, level): (value, error) for _, key, result in stored_results(stores, "three-body")
            for level, (value, error) in enumerate(zip(result["energies"], result["energy_errors"]))}


def reported(stores: list[str]):
    """(N, grid key, level, energy, bar) of every stored oscillator-ed level, as reported."""
    for n, key, result in stored_results(stores):
        for level, (energy, bar) in enumerate(zip(result["energies"], result.get("energy_errors") or [])):
            yield n, key, level, energy, bar


def ladders(stores: list[str], interaction: str = "renormalized"):
    """(N, grid key, level, cutoffs, raw energies) of every stored oscillator-ed ladder with ``interaction``."""
    for n, key, result in stored_results(stores):
        diagnostics = result.get("diagnostics") or {}
        if diagnostics.get("interaction") != interaction:
            continue
        for level, fit in enumerate(diagnostics.get("energy_fits") or []):
            if len(fit["steps"]) >= 4:
                yield n, key, level, np.array(fit["steps"]), np.array(fit["values"])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--store", action="append", required=True)
    parser.add_argument("--factor", action="append", type=float, default=None)
    parser.add_argument("--shift", action="append", type=float, default=None, help="exponent shift of ladders reaching the asymptotic cutoff")
    parser.add_argument("--as-reported", action="store_true", help="grade the stored energies and bars as they are")
    parser.add_argument("--interaction", choices=("renormalized", "effective"), default="renormalized",
                        help="which stored ladders; 'effective' grades the backend's model for them"
                        " (GuardedHalfPowerSeries) against GuardedPowerLaw on the same ladders")
    parser.add_argument("--steep", action="append", type=float, default=None,
                        help="steep-exponent guard: bar >= the whole extrapolation from this fitted power up (0: off)")
    parser.add_argument("--top-factor", action="append", type=float, default=None,
                        help="multiple of the total variation for a fitted power at the top of the scan")
    parser.add_argument("--same-store", action="store_true",
                        help="grade N = 3 ladders against the stores' own three-body results (any problem, not only the"
                        " dataset's grid)")
    parser.add_argument("--without-turn-remainder", action="store_true",
                        help="a turned-around ladder's bar without the remainder of its last change (before version 13)")
    args = parser.parse_args()
    shipped = dataset.load()
    own = stored_three_body(args.store) if args.same_store else {}
    if args.as_reported:
        found = list(reported(args.store))
        variants = [None]
    else:
        found = list(ladders(args.store, args.interaction))
        backend_rule = GuardedPowerLaw()
        variants = [(f, s, p, t) for f in args.factor or [backend_rule.change_factor]
                    for s in args.shift or [backend_rule.asymptotic_shift]
                    for p in args.steep or [backend_rule.steep_power or 0.0]
                    for t in args.top_factor or [backend_rule.top_factor]]
        if args.interaction == "effective":
            variants.insert(0, "series")
    print(f"ladders: {len(found)} levels from {len(args.store)} store(s); dataset version {shipped.version}\n")
    print("| change_factor, exponent shift, steep power (0 off), top factor | N | graded | within 2 bars | coverage | median bar/err | smallest bar/err |"
          " all with a reference | within 2 combined bars |")
    print("|---|---|---|---|---|---|---|---|---|")
    for variant in variants:
        graded, combined = defaultdict(list), defaultdict(list)
        for n, key, level, *data in found:
            if args.same_store:
                ref = own.get((key, level)) if n == 3 else None
            else:
                entry = shipped.index.get(key)
                ref = reference(entry.levels[level], n) if entry is not None and level < len(entry.levels) else None
            if ref is None:
                continue
            if variant is None:
                value, bar = data
            elif variant == "series":
                fit = cutoff_model("effective")(*data)
                value, bar = fit.value, fit.error
            else:
                rule = GuardedPowerLaw(change_factor=variant[0], asymptotic_shift=variant[1],
                                       steep_power=variant[2] or None, top_factor=variant[3],
                                       turn_remainder=not args.without_turn_remainder)
                fit = rule(*data)
                value, bar = fit.value, fit.error
            combined[n].append(abs(value - ref[0]) <= 2 * (bar + ref[1]))
            if ref[1] <= 0.1 * bar:
                graded[n].append(bar / max(abs(value - ref[0]), 1e-15))
        for n in sorted(combined):
            ratios = graded.get(n, [])
            within = sum(r >= 0.5 for r in ratios)
            strict = (f"{len(ratios)} | {within} | {100 * within / len(ratios):.0f} % | {statistics.median(ratios):.1f} |"
                      f" {min(ratios):.2f}") if ratios else "0 | | | |"
            label = "as reported" if variant is None else "half-power series" if variant == "series" else ", ".join(f"{v:g}" for v in variant)
            print(f"| {label} | {n} | {strict} | {len(combined[n])} |"
                  f" {sum(combined[n])} |")


if __name__ == "__main__":
    main()
