"""The generated report: files written, figures present, tables holding the stored numbers.

A tiny store is built with the real ``two-body`` (exact, Busch et al.) and ``perturbative``
(first order in g) backends through the sweep harness. The checks compare the report's tables with
the numbers in the store, and the report's own arithmetic (odd-even staggering, noise slope) with
independent evaluations: the first-order coefficients c1 = sum_ij int phi_i^2 phi_j^2 dx
(first-order perturbation theory, a textbook result) by scipy quadrature over scipy's Hermite
polynomials, the two-body energy by ODE shooting (trapbench.problems.exact.relative_shooting), and a synthetic
quadratic.
"""

from __future__ import annotations

import math
import re
import textwrap
from pathlib import Path

import matplotlib
import numpy as np
import pandas as pd
import pytest

matplotlib.use("Agg")

from trapbench.bench import report  # noqa: E402
from trapbench.bench.report.figures import noise  # noqa: E402
from trapbench.bench.cli import main  # noqa: E402
from trapbench.bench.store import Store  # noqa: E402
from trapbench.bench.suite import load_suite  # noqa: E402
from trapbench.bench.sweep import SweepOptions, run_sweep  # noqa: E402

from trapbench.problems.exact.relative_shooting import ground_energy

SUITE = """
name = "report-test"
timeout = 120

[[problems]]
name = "1+1 scan"
up = { count = 1 }
down = { count = 1 }
interaction = { g = [0.0, 1.0, 3.0] }

[[problems]]
name = "1+1 heavy up"
up = { count = 1, mass = 6.666666666666667 }
down = { count = 1 }
interaction = { g = [0.0, 3.0, 10.0] }
targets = { observables = ["density"], grid_points = 101, x_max = 5.0 }

[[problems]]
name = "spectrum 2+1 equal"
up = { count = 2 }
down = { count = 1 }
interaction = { g = [0.0, 0.1, 0.2] }
targets = { states = 6 }

[[problems]]
name = "spectrum 2+1 heavy"
up = { count = 2, mass = 6.666666666666667 }
down = { count = 1 }
interaction = { g = [0.0, 0.1, 0.2] }
targets = { states = 6 }

[[problems]]
name = "odd-even 1+0"
up = { count = 1 }
down = { count = 0 }
interaction = { g = 0.0 }

[[problems]]
name = "odd-even"
up = { count = 2 }
down = { count = 2 }
interaction = { g = [0.0, -0.1] }

[[problems]]
name = "odd-even 2+1"
up = { count = 2 }
down = { count = 1 }
interaction = { g = [0.0, -0.1] }

[[problems]]
name = "odd-even 1+1"
up = { count = 1 }
down = { count = 1 }
interaction = { g = -0.1 }

[[backends]]
name = "two-body"
problems = ["1+1 scan", "1+1 heavy up"]
ladder = [{ relative_points = 200 }, { relative_points = 800 }]

[[backends]]
name = "perturbative"
problems = ["spectrum 2+1 equal", "spectrum 2+1 heavy", "odd-even 1+0", "odd-even", "odd-even 2+1", "odd-even 1+1"]
"""


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    """The store filled by a sweep of SUITE and the report written from it."""
    folder = tmp_path_factory.mktemp("report")
    suite_path = folder / "suite.toml"
    suite_path.write_text(textwrap.dedent(SUITE))
    store_path = folder / "results.sqlite"
    suite = load_suite(suite_path)
    sweep = run_sweep(suite, SweepOptions(store_path=store_path, progress=False))
    assert set(sweep.statuses) == {"ok"}, sweep.summary()
    output = folder / "out"
    with Store.open(store_path) as store:
        written = report.write_report(store, output, suite, set(sweep.task_keys))
        frame = store.results_frame(keys=sweep.task_keys)
    return {"folder": folder, "suite_path": suite_path, "store": store_path, "output": output, "written": written,
            "frame": frame, "keys": sweep.task_keys}


def test_markdown_html_and_every_linked_figure_are_written(built):
    output = built["output"]
    markdown = (output / "report.md").read_text()
    page = (output / "report.html").read_text()
    linked = re.findall(r"!\[Figure (\d+)\]\((figures/[^)]+\.png)\)", markdown)
    assert len(linked) >= 4  # cost trade-off, cost vs N, spectra, densities, odd-even
    for number, path in linked:
        assert (output / path).stat().st_size > 10_000, path
        assert f"*Figure {number}: " in markdown  # every figure has a caption
    assert sorted(p.name for p in (output / "figures").glob("*.png")) == sorted(Path(p).name for _, p in linked)
    assert page.count('src="data:image/png;base64,') == len(linked)  # self-contained HTML
    assert page.count("<figcaption>") == len(linked)
    for title in ("Method map", "Agreement with reference values", "Accuracy against cost", "Cost against particle number",
                  "Spectra against g", "Heavy and light densities", "Odd-even energy differences",
                  "Machine, library versions and source revision"):
        assert f"## {title}" in markdown or f"### {title}" in markdown
        assert title in page
    for written in built["written"]:
        assert written.exists()
    # every Markdown table row has as many cells as its header (no stray '|' in names or values)
    widths = []
    for line in markdown.splitlines() + [""]:
        if line.startswith("|"):
            widths.append(len(re.findall(r"(?<!\\)\|", line)))
        elif widths:
            assert len(set(widths)) == 1, widths
            widths = []


def test_missing_figure_data_is_named_with_the_command_to_run(built):
    markdown = (built["output"] / "report.md").read_text()
    # no backend in the test store computes momentum noise maps
    for title in ("Momentum noise correlations at attractive g", "Integrated noise correlation against g"):
        section = markdown.split(f"### {title}")[1].split("###")[0]
        assert "No data for this figure" in section
        assert "`trapbench sweep figures`" in section


def test_agreement_tables_hold_the_stored_energies_and_busch_reference(built):
    frame, output = built["frame"], built["output"]
    markdown = (output / "report.md").read_text()
    assert "Busch" in markdown and "Found. Phys. 28, 549 (1998)" in markdown
    tables = [pd.read_csv(p) for p in sorted((output / "tables").glob("agreement_*.csv"))]
    agreement = pd.concat(tables)
    stored = frame[frame["state"] >= 0]
    for row in agreement.itertuples():
        match = stored[(stored["problem_name"] == row.problem) & np.isclose(stored["g"], row.g)
                       & (stored["state"] == row.state) & (stored["backend"] == row.backend)]
        assert not match.empty
        assert np.any(match["energy"].to_numpy() == row.energy)  # the exact stored float
    # the exact two-body ground state at g = 1 (Busch et al. 1998), re-derived by ODE shooting of the relative
    # problem, which shares nothing with the Gamma-function form the reference and the backend use
    exact = ground_energy(1.0)
    busch = agreement[(agreement["problem"] == "1+1 scan") & (agreement["g"] == 1.0) & (agreement["state"] == 0)]
    assert busch["reference"].iloc[0] == pytest.approx(exact, abs=1e-11)
    assert busch["energy"].iloc[0] == pytest.approx(exact, abs=1e-10)


def test_method_map_names_the_exact_two_body_solution_for_n2(built):
    table = pd.read_csv(built["output"] / "tables" / "method_map.csv")
    n2 = table[(table["N"] == 2) & (table["mass ratio"] == "1")]
    # g = 0, 1, 3 and g = -0.1: the advisor's regimes (g = 0 alone: trap-orbital methods are exact there)
    assert set(n2["g regime"]) == {"non-interacting", "weak", "attractive"}
    assert sorted(n2["target"].unique()) == [1e-6, 1e-5, 1e-4, 1e-3, 1e-2]
    row = n2[(n2["g regime"] == "weak") & (n2["target"] == 1e-5)].iloc[0]
    # two-body ran the g = 1 and 3 of "1+1 scan", both weak; it reaches 1e-5 on each
    assert row["backend"] == "two-body"
    stored = built["frame"]
    runs = stored[(stored["backend"] == "two-body") & (stored["n_up"] == 1) & (stored["mass_up"] == 1.0)
                  & (stored["state"] == 0) & (stored["g"] > 0)]
    # the map's cost is the largest over the problems of the cheapest run: a stored CPU time
    per_problem = runs.groupby("problem_key")["solve_cpu_s"].min()
    assert row["CPU s"] == pytest.approx(per_problem.max(), rel=1e-9)
    assert row["peak MiB"] > 0
    # the attractive group holds only perturbative's 1+1 at g = -0.1, which first order misses by O(g^2) ~ 1e-3
    attractive = n2[(n2["g regime"] == "attractive") & (n2["target"] == 1e-5)].iloc[0]
    assert attractive["backend"] == "none" and attractive["problems"] == 1


def test_calibration_and_verdicts_are_reported(built):
    output, frame = built["output"], built["frame"]
    calibration = pd.read_csv(output / "tables" / "calibration.csv").set_index("backend")
    two_body = calibration.loc["two-body"]
    stored = frame[(frame["backend"] == "two-body") & (frame["state"] >= 0)]
    assert two_body["with error bar"] == len(stored)
    # two-body's bars (~1e-14) are far below what an exact closed form evaluated to 1e-12 can check: nothing checked
    assert stored["energy_error"].max() < 1e-13
    assert two_body["checked"] == 0 and two_body["too loose a reference"] == len(stored)
    assert "## Error-bar calibration" in (output / "report.md").read_text()
    # first order at g = -0.1 misses the exact two-body energy by O(g^2): a measured miss, not unverified
    busch = pd.concat(pd.read_csv(p) for p in (output / "tables").glob("agreement_*.csv"))
    first_order = busch[(busch["backend"] == "perturbative") & (busch["g"] == -0.1)]
    assert list(first_order["verdict"]) == ["missed"]
    assert "error bars below 95 % at 2 sigma" in pd.read_csv(output / "tables" / "method_map.csv").columns


def first_order_coefficient(n_up: int, n_down: int) -> float:
    """c1 = sum_{i < n_up, j < n_down} int phi_i(x)^2 phi_j(x)^2 dx over oscillator orbitals (m = omega = 1), by quadrature.

    phi_n(x)^2 = H_n(x)^2 exp(-x^2) / (2^n n! sqrt(pi)) with the physicists' Hermite polynomials of scipy.special.
    """
    from scipy import integrate, special

    def density(n, x):
        return special.eval_hermite(n, x) ** 2 * math.exp(-x * x) / (2**n * math.factorial(n) * math.sqrt(math.pi))

    return sum(integrate.quad(lambda x: density(i, x) * density(j, x), -np.inf, np.inf, epsabs=1e-14)[0]
               for i in range(n_up) for j in range(n_down))


def test_odd_even_staggering_matches_first_order_closed_form(built):
    table = pd.read_csv(built["output"] / "tables" / "odd_even.csv")
    by = {(int(r.N), float(r.g)): r.Delta for r in table.itertuples()}
    # g = 0: E(a, b) = (a^2 + b^2)/2, so Delta = 0 for every odd N
    assert by[(1, 0.0)] == pytest.approx(0.0, abs=1e-12)
    assert by[(3, 0.0)] == pytest.approx(0.0, abs=1e-12)
    # first order: E(a, b) = E0 + c1(a, b) g, and c1(1, 0) = 0
    g = -0.1
    assert by[(1, g)] == pytest.approx(-0.5 * first_order_coefficient(1, 1) * g, abs=1e-12)
    expected = first_order_coefficient(2, 1) - (first_order_coefficient(1, 1) + first_order_coefficient(2, 2)) / 2
    assert by[(3, g)] == pytest.approx(expected * g, abs=1e-12)


def test_spectra_and_density_tables_are_the_stored_numbers(built):
    frame, output = built["frame"], built["output"]
    spectra = pd.read_csv(output / "tables" / "spectra.csv")
    assert set(spectra["mass ratio"]) == {"1", "6.667 (20/3)"}
    levels = [f"E{k}" for k in range(6)]
    assert len(spectra) == 2 * 3 and set(levels) <= set(spectra.columns)  # two mass ratios x three g, six levels
    stored = frame[(frame["backend"] == "perturbative") & (frame["n_up"] == 2) & (frame["n_down"] == 1)
                   & frame["problem_name"].str.startswith("spectrum")]
    assert sorted(spectra[levels].to_numpy().ravel()) == sorted(stored["energy"])
    # g = 0, equal masses: 2+1 levels 5/2, 7/2 (twice), 9/2 (three times) (oscillator towers, Pauli principle)
    free = spectra[(spectra["mass ratio"] == "1") & (spectra["g"] == 0.0)][levels].to_numpy().ravel()
    assert np.allclose(free, [2.5, 3.5, 3.5, 4.5, 4.5, 4.5], atol=1e-12)
    densities = pd.read_csv(output / "tables" / "densities.csv")
    # each density integrates to its particle number (1 each here) on the stored grid
    assert np.allclose(densities["integral n dx"], 1.0, atol=2e-3)
    # the heavy particle (mass 20/3) is narrower: at g = 0 ⟨x^2⟩ = 1/(2 m omega) per particle
    free = densities[densities["g"] == 0.0].set_index("species")["⟨x^2⟩"]
    heavy = [v for k, v in free.items() if k.startswith("heavy")][0]
    light = [v for k, v in free.items() if k.startswith("light")][0]
    assert heavy == pytest.approx(1 / (2 * 20 / 3), rel=1e-3)
    assert light == pytest.approx(0.5, rel=1e-3)


def test_noise_slope_recovers_a_known_quadratic():
    g = np.array([-0.5, -0.25, 0.0, 0.25, 0.5, 1.0])
    integral = 0.09 * g**2 + 0.02 * g**3  # s = 0.3 exactly
    s, error, used = noise.slope_at_zero(g, integral)
    assert s == pytest.approx(0.3, rel=1e-12)
    assert used == 4  # 0 < |g| <= 0.5
    assert error == pytest.approx(0.0, abs=1e-10)
    assert noise.slope_at_zero(np.array([0.0, 1.0]), np.array([0.0, 1.0])) is None


def test_command_reads_the_store_and_empty_store_says_what_to_run(built, tmp_path, capsys):
    output = tmp_path / "again"
    code = main(["report", "--suite", str(built["suite_path"]), "--store", str(built["store"]), "--output", str(output),
                 "--from-store"])
    assert code == 0
    assert (output / "report.md").read_text().count("![Figure") == (built["output"] / "report.md").read_text().count("![Figure")
    # several suites report together; here a second suite naming one of the same computations
    second = tmp_path / "second.toml"
    second.write_text('name = "second"\n[[problems]]\nname = "p"\nup = { count = 1 }\ndown = { count = 1 }\n'
                      'interaction = { g = 1.0 }\n[[backends]]\nname = "two-body"\nparams = { relative_points = 800 }\n')
    both = tmp_path / "both"
    assert main(["report", "--suite", str(built["suite_path"]), "--suite", str(second), "--store", str(built["store"]),
                 "--output", str(both), "--from-store"]) == 0
    text = (both / "report.md").read_text()
    assert text.startswith("# trapbench report: report-test + second")
    assert f"{len(set(built['keys']))} tasks" in text
    assert f"holds every one of the suites' {len(set(built['keys']))} tasks" in text
    # a suite whose computation is not stored: the report says it is partial and how to finish it
    unrun = tmp_path / "unrun.toml"
    unrun.write_text(second.read_text().replace('name = "second"', 'name = "unrun"').replace("800", "900"))
    partial = tmp_path / "partial"
    assert main(["report", "--suite", str(built["suite_path"]), "--suite", str(unrun), "--store", str(built["store"]),
                 "--output", str(partial), "--from-store"]) == 0
    text = (partial / "report.md").read_text()
    total = len(set(built["keys"])) + 1
    assert f"**Partial: 1 of the suites' {total} tasks (two-body 1) have not been run yet (`trapbench report --suite" in text
    empty = tmp_path / "empty"
    code = main(["report", "--suite", str(built["suite_path"]), "--store", str(tmp_path / "none.sqlite"),
                 "--output", str(empty), "--from-store"])
    assert code == 0
    assert "holds no results for this suite" in (empty / "report.md").read_text()
    assert main(["report", "--suite", "no-such-suite", "--store", str(tmp_path / "x.sqlite"), "--from-store"]) == 2
    assert "no built-in suite 'no-such-suite'" in capsys.readouterr().err


# ----------------------------------------------------------------------------- noise figures on synthetic data


class SyntheticNoise:
    """A stand-in backend with closed-form noise data: C(p_up, p_down) = -g A p_up p_down exp(-(p_up^2 + p_down^2)/2)
    on the problem's grid and noise_integral I = (S / m_up)^2 g^2, so the slope at g = 0 is S / m_up exactly."""

    A, S = 0.05, 0.03

    @classmethod
    def backend(cls):
        from trapbench.backends.base import Backend, Capabilities, Support
        from trapbench.backends.result import Observable, Solution

        class Synthetic(Backend):
            name = "synthetic-noise"
            version = "1"
            summary = "closed-form noise data for the report tests"
            parameters = ()
            capabilities = Capabilities(observables=("noise",))

            def supports(self, problem, params):
                return Support.yes()

            def compute(self, problem, params):
                g, grid = problem.coupling, problem.targets.grid_points
                p = np.linspace(-problem.extent()[1], problem.extent()[1], grid)
                p_up, p_down = np.meshgrid(p, p, indexing="ij")
                noise = -g * cls.A * p_up * p_down * np.exp(-(p_up**2 + p_down**2) / 2)
                return Solution(energies=[1.0], states=[{"parity": 1}],
                                observables={"noise": Observable(noise, {"p_up": p, "p_down": p}, "1/momentum^2", "0")},
                                scalars={"noise_integral": (cls.S / problem.up.mass) ** 2 * g**2}, error_estimate=1e-9)

        return Synthetic()


def test_noise_figures_read_maps_and_integrals_from_the_store(tmp_path):
    from trapbench.bench.executor import OK, Outcome
    from trapbench.bench.suite import Task
    from trapbench.bench.tables import attach_references
    from trapbench.problems.spec import Problem

    backend = SyntheticNoise.backend()
    problems = []
    for mass in (1.0, 2.0):
        problems.append(Problem.create(2, 2, -2.0, mass_up=mass, observables=["noise"], grid_points=49, p_max=6.0))
        problems += Problem.create(2, 2, [-0.5, -0.25, 0.0, 0.25, 0.5], mass_up=mass, observables=["noise"],
                                   grid_points=16).points()
    with Store.open(tmp_path / "s.sqlite") as store:
        run_id = store.begin_run("synthetic", "", len(problems))
        for problem in problems:
            result = backend.solve(problem).to_json_dict()
            store.record(run_id, "synthetic", Task("noise", problem, backend.name, {}, 60.0, 512.0),
                         Outcome(status=OK, result=result, wall_time_s=0.1, cpu_time_s=0.1, peak_rss_bytes=1 << 20))
        frame = attach_references(store.results_frame())
        maps = noise.build_maps(frame, store)
        integral = noise.build_integral(frame)
    assert maps.missing is None and integral.missing is None
    # max of -g A p1 p2 exp(-(p1^2 + p2^2)/2) at g = -2 is 2 A / e, at p1 = p2 = +-1 (on the 0.25-spaced grid)
    assert np.allclose(maps.table["max C"], 2 * SyntheticNoise.A / math.e, rtol=1e-12)
    assert np.allclose(maps.table["sum C dp dp"], 0.0, atol=1e-12)  # odd in each momentum
    assert list(maps.table["mass ratio"]) == ["1", "2"]
    slopes = integral.table.dropna(subset=["slope"]).set_index("mass ratio")["slope"]
    assert slopes["1"] == pytest.approx(SyntheticNoise.S, rel=1e-10)
    assert slopes["2"] == pytest.approx(SyntheticNoise.S / 2, rel=1e-10)


# ----------------------------------------------------------------------------- levels against the mass ratio, g = inf limits


class SyntheticLevels:
    """A stand-in backend whose k-th level of 2+1 is W_k(m_up/m_down) - 0.1 / (k + 1): just below the exact
    g = +inf level W_k of the hard-core wedges (problems.exact.wedges), with error bar 1e-9."""

    @staticmethod
    def backend():
        from trapbench.backends.base import Backend, Support
        from trapbench.backends.result import Solution
        from trapbench.problems.exact import wedges

        class Synthetic(Backend):
            name = "synthetic-levels"
            version = "1"
            summary = "levels just below the g = inf wedge levels, for the report tests"
            parameters = ()

            def supports(self, problem, params):
                return Support.yes()

            def compute(self, problem, params):
                states = problem.targets.states
                top = wedges.wedge_spectrum(problem.up.mass, problem.down.mass, 1.0, states)
                return Solution(energies=[w.energy - 0.1 / (k + 1) for k, w in enumerate(top)],
                                states=[{} for _ in top], error_estimate=1e-9)

        return Synthetic()


def store_levels(store, problems):
    from trapbench.bench.executor import OK, Outcome
    from trapbench.bench.suite import Task

    backend = SyntheticLevels.backend()
    run_id = store.begin_run("synthetic", "", len(problems))
    for problem in problems:
        store.record(run_id, "synthetic", Task("levels", problem, backend.name, {}, 60.0, 512.0),
                     Outcome(status=OK, result=backend.solve(problem).to_json_dict(), wall_time_s=0.1, cpu_time_s=0.1,
                             peak_rss_bytes=1 << 20))


def test_mass_scan_draws_the_stored_levels_and_the_exact_infinite_coupling_curves(tmp_path):
    from trapbench.bench.report.figures import mass_scan
    from trapbench.bench.tables import attach_references
    from trapbench.problems.spec import Problem

    ratios = (1 / 8.8, 0.4, 1.0, 2.5, 5.0, 8.8)  # the lighter species at mass 1
    problems = [Problem.create(2, 1, 10.0, mass_up=max(r, 1.0), mass_down=max(1 / r, 1.0), states=3) for r in ratios]
    with Store.open(tmp_path / "s.sqlite") as store:
        store_levels(store, problems[:4])
        assert mass_scan.build(attach_references(store.results_frame())).missing  # four ratios are too few
        store_levels(store, problems[4:])
        outcome = mass_scan.build(attach_references(store.results_frame()))
    assert outcome.missing is None and len(outcome.table) == len(ratios)
    table = outcome.table
    for k in range(3):  # the drawn numbers are the stored ones, each 0.1/(k+1) below its g = inf level
        assert np.allclose(table[f"E{k} at g=inf"] - table[f"E{k}"], 0.1 / (k + 1), atol=1e-12)
    # equal masses: the g = inf levels are the fermionized ones, N^2/2 = 4.5 three times (three distinguishable
    # orderings of 2+1 on a line, each like three free fermions 1/2 + 3/2 + 5/2; textbook fermionization)
    equal = table[table["mass ratio"] == "1"].iloc[0]
    assert [equal[f"E{k} at g=inf"] for k in range(3)] == pytest.approx([4.5, 4.5, 4.5], abs=1e-12)
    assert "8.8 (53Cr/6Li)" in set(table["mass ratio"]) and "0.1136 (6Li/53Cr)" in set(table["mass ratio"])
    axis = outcome.figure.axes[0]
    assert axis.get_xscale() == "log" and len(axis.lines) >= 3 + 3  # three level curves and three g = inf curves


def test_spectra_panels_carry_the_exact_infinite_coupling_levels(built):
    from trapbench.bench.report.figures import spectra
    from trapbench.bench.tables import attach_references

    data = spectra.select(attach_references(built["frame"]))
    equal, heavy = data.panels
    # fermionization of 2+1 at equal masses: 4.5 (three times), then 5.5 -- free-fermion sums 1/2 + 3/2 + 5/2 and
    # 1/2 + 3/2 + 7/2, each times the C(3, 1) = 3 orderings of the spins (textbook, hand-counted here)
    assert equal.infinite[:4] == pytest.approx([4.5, 4.5, 4.5, 5.5], abs=1e-12)
    assert heavy.ratio == pytest.approx(20 / 3, rel=1e-6) and len(heavy.infinite) == 6
    # every stored level at finite g > 0 lies at or below its g = inf counterpart (sum of deltas is positive)
    for panel in (equal, heavy):
        top = max(g for points in panel.lines.values() for g, _, _ in points)
        at_top = sorted(e for points in panel.lines.values() for g, e, _ in points if g == top)
        assert all(e <= inf + 1e-12 for e, inf in zip(at_top, sorted(panel.infinite)))
