"""Benchmark: the lattice backends' sixth-order continuum fit (``continuum_order = 6``) on stored spacing ladders.

Run by hand (not part of the test suite):

    python bench/benchmarks/bench_lattice_precision.py SOURCE [SOURCE ...]

Each SOURCE is a results store (``.sqlite``) or a result written by ``trapbench solve --output`` (``.json``).
By default the lattice backends report the continuum limit of their raw energies with ``CONTINUUM_MODEL`` (E0 +
c2 a^2 + c4 a^4), whose bar is at least 5 % of the extrapolation |E(a_min) - E0|. Every stored ground-state ladder
of five or more spacings is fitted again here with ``SixthOrderSpacingFit`` (the model ``continuum_order = 6``
selects: E6 = E0 of E0 + c2 a^2 + c4 a^4 + c6 a^6; bar the largest of |E6 - E4|, the change without the coarsest
spacing and the fit's standard error), and b6 adds the finest lattice's solver uncertainty (lattice-dmrg: the
larger of the backend's own bond-dimension extrapolation error, ``TRUNCATION_MODEL``, and the energy spread's
Weinstein term sigma^2 / (one trap quantum)). The backend adds instead the largest solver error of
any rung, which the store does not keep per rung.

For N = 3 each ground state is graded, |E6 - truth| against b6, where the truth is a ``three-body`` result in the
sources or the shipped dataset's value (``three-body``, bars ~1e-12). For N >= 4 the table lists E6 and b6 beside
the reported value and bar, and every ``oscillator-ed`` ground state in the sources for that problem is compared
with E6; the last column is the smallest relative accuracy E6 can judge (ten times b6 / |E6|, the project's rule).
With ``--dataset`` the shipped dataset's oscillator-ed ground states (newest version, default parameters) are graded
against E6 too: coverage and bar / error where b6 is at most a tenth of their bar, and every one against twice the
combined bars (bar + b6).
"""

from __future__ import annotations

import argparse
import json
import sqlite3
import statistics
from collections import defaultdict
from pathlib import Path

from trapbench.backends.extrapolation import SixthOrderSpacingFit
from trapbench.backends.lattice_dmrg import TRUNCATION_MODEL
from trapbench.problems import dataset

LATTICE = ("lattice-dmrg", "lattice-ed")


def results(sources: list[str]):
    """Every successful result in the stores and solve outputs, once per backend, problem and energies (a copy in
    another store, or a run whose extra parameters did not change its numbers, counts once)."""
    seen = set()
    for source in sources:
        if source.endswith(".json"):
            loaded = json.loads(Path(source).read_text())
            found = loaded if isinstance(loaded, list) else [loaded]
        else:
            connection = sqlite3.connect(f"file:{source}?mode=ro", uri=True)
            found = (json.loads(text) for (text,) in connection.execute("select result from tasks where status = 'ok'"))
        for result in found:
            identity = (result["backend"], point_of(result), tuple(round(e, 9) for e in result.get("energies") or ()))
            if identity not in seen:
                seen.add(identity)
                yield result


def shipped_truth() -> dict[tuple, float]:
    """Ground states of the shipped dataset's N = 3 points (``three-body``, "precision" levels)."""
    truth = {}
    for entry in dataset.load().entries:
        for level in entry.levels:
            if level.state == 0 and level.status == "precision":
                truth[point(entry.n_up, entry.n_down, entry.mass_up, entry.mass_down, entry.g)] = level.value
    return truth


def point(n_up: int, n_down: int, mass_up: float, mass_down: float, g: float) -> tuple:
    """A grid point's identity (masses and g rounded so that stored and shipped values meet)."""
    return (n_up, n_down, round(mass_up, 9), round(mass_down, 9), round(g, 9))


def point_of(result: dict) -> tuple:
    up, down = result["problem"]["up"], result["problem"]["down"]
    return point(up["count"], down["count"], up["mass"], down["mass"], result["g"])


def label(key: tuple) -> str:
    return f"{key[0]}+{key[1]} m={key[2]:g}/{key[3]:g} g={key[4]:g}"


def finest_solver_error(result: dict) -> float:
    """lattice-dmrg, finest lattice: the backend's bond-dimension extrapolation error (``TRUNCATION_MODEL``) and the
    energy spread's Weinstein term sigma^2 (one trap quantum as the gap), whichever is larger."""
    rungs = (result.get("diagnostics") or {}).get("per_rung") or []
    if result["backend"] != "lattice-dmrg" or not rungs:
        return 0.0
    ladder = rungs[-1]["chi_ladder"][0]
    truncation = TRUNCATION_MODEL([rung["truncation_error"] for rung in ladder], [rung["energy"] for rung in ladder])
    return max(truncation.error, float(ladder[-1].get("spread", 0.0)) ** 2)


def sixth_order(result: dict) -> tuple[float, float, dict] | None:
    """(E6, b6, parts) of the ground state, or None where the ladder is too short for the fit."""
    diagnostics = result.get("diagnostics") or {}
    spacings = diagnostics.get("spacings") or []
    if len(spacings) < SixthOrderSpacingFit.minimum_points:
        return None
    energies = [row[0] if isinstance(row, list) else row for row in diagnostics.get("raw_energies") or []]
    fit = SixthOrderSpacingFit()(spacings, energies)
    parts = {"fit": fit.error, "solver": finest_solver_error(result)}
    return fit.value, fit.error + parts["solver"], parts


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("sources", nargs="+", help="results stores (.sqlite) or solve outputs (.json)")
    parser.add_argument("--dataset", action="store_true",
                        help="also grade the shipped dataset's oscillator-ed ground states (newest version, defaults)")
    args = parser.parse_args()

    truth = shipped_truth()
    lattice: list[tuple[tuple, dict]] = []
    oscillator: dict[tuple, list[dict]] = defaultdict(list)
    for result in results(args.sources):
        key = point_of(result)
        if result["backend"] == "three-body" and result.get("energy_errors"):
            if result["energy_errors"][0] < 1e-9:
                truth[key] = result["energies"][0]
        elif result["backend"] in LATTICE:
            lattice.append((key, result))
        elif result["backend"] == "oscillator-ed" and result.get("energy_errors"):
            oscillator[key].append(result)

    print("| backend | problem | spacings (finest) | reported E, bar | E6 | b6 (fit, solver) | truth - E6 | |E6 - truth| / b6 |")
    print("|---|---|---|---|---|---|---|---|")
    ratios, precise = [], {}
    for key, result in sorted(lattice, key=lambda item: item[0]):
        fitted = sixth_order(result)
        if fitted is None:
            continue
        e6, b6, parts = fitted
        spacings = result["diagnostics"]["spacings"]
        reported = f"{result['energies'][0]:.8f} +- {result['energy_errors'][0]:.1e}"
        detail = f"{parts['fit']:.1e}, {parts['solver']:.1e}"
        if key in truth:
            off = truth[key] - e6
            ratios.append(abs(off) / b6)
            tail = f"{off:+.1e} | {abs(off) / b6:.2f}"
        else:
            tail = "- | -"
            if key[0] + key[1] >= 4:
                best = precise.get(key)
                if best is None or b6 < best[1]:
                    precise[key] = (e6, b6, result["backend"])
        print(f"| {result['backend']} | {label(key)} | {len(spacings)} ({min(spacings):.3f}) | {reported} | {e6:.9f} | "
              f"{b6:.1e} ({detail}) | {tail} |")
    if ratios:
        print(f"\nN = 3: {sum(r <= 1 for r in ratios)} of {len(ratios)} within b6, {sum(r <= 2 for r in ratios)} within 2 b6;"
              f" median |E6 - truth| / b6 {statistics.median(ratios):.2f}, largest {max(ratios):.2f}")

    if precise and oscillator:
        print("\n| problem | E6 +- b6 (lattice) | oscillator-ed params | E +- bar | CPU s | E - E6 | relative | graded at (>= 10 b6 / |E6|) |")
        print("|---|---|---|---|---|---|---|---|")
        for key, (e6, b6, backend) in sorted(precise.items()):
            for result in oscillator.get(key, []):
                energy, bar = result["energies"][0], result["energy_errors"][0]
                off = energy - e6
                floor = 10 * b6 / abs(e6)
                print(f"| {label(key)} | {e6:.8f} +- {b6:.1e} ({backend}) | "
                      f"{json.dumps(result.get('params') or {})} | {energy:.8f} +- {bar:.1e} | {result.get('cpu_time_s', 0):.1f} | "
                      f"{off:+.1e} | {abs(off) / abs(e6):.1e} | {floor:.1e} |")
    if precise and args.dataset:
        grade_dataset_oscillator(precise)


def shipped_oscillator_defaults() -> dict[tuple, tuple[float, float, str]]:
    """(value, bar, version) of the shipped dataset's oscillator-ed ground states with default parameters, newest version."""
    found = {}
    for entry in dataset.load().entries:
        key = point(entry.n_up, entry.n_down, entry.mass_up, entry.mass_down, entry.g)
        for level in entry.levels:
            if level.state != 0:
                continue
            runs = [run for run in level.runs if run.backend == "oscillator-ed" and not run.params]
            if runs:
                newest = max(runs, key=lambda run: dataset.version_rank(run.version))
                found[key] = (newest.value, newest.own_error or newest.error, newest.version)
    return found


def grade_dataset_oscillator(precise: dict[tuple, tuple[float, float, str]]) -> None:
    """Coverage and calibration of oscillator-ed's shipped default ground states against the sixth-order limits;
    graded (the project's rule) where b6 is at most a tenth of the oscillator bar."""
    shipped = shipped_oscillator_defaults()
    print("\n| problem | E6 +- b6 | oscillator-ed (version) E +- bar | E - E6 | bar / abs(E - E6) | graded |")
    print("|---|---|---|---|---|---|")
    graded, combined = [], []
    for key, (e6, b6, _) in sorted(precise.items()):
        if key not in shipped:
            continue
        value, bar, version = shipped[key]
        off = value - e6
        ratio = bar / max(abs(off), 1e-300)
        strict = b6 <= bar / 10
        combined.append(abs(off) / (bar + b6))
        if strict:
            graded.append(ratio)
        print(f"| {label(key)} | {e6:.8f} +- {b6:.1e} | {value:.8f} +- {bar:.1e}"
              f" ({version}) | {off:+.1e} | {ratio:.1f} | {'yes' if strict else 'no'} |")
    if graded:
        print(f"\ngraded {len(graded)}: within one bar {sum(r >= 1 for r in graded)}, within two bars"
              f" {sum(r >= 0.5 for r in graded)}; median bar / error {statistics.median(graded):.1f},"
              f" smallest {min(graded):.2f}")
    if combined:
        print(f"all {len(combined)}: within twice the combined bars (bar + b6) {sum(r <= 2 for r in combined)},"
              f" largest abs(E - E6) / (bar + b6) {max(combined):.2f}")


if __name__ == "__main__":
    main()
