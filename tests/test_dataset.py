"""The reference dataset: its grid, the agreement rule, leave-one-out grading, and what the package ships.

The rule itself is the project's (stated in trapbench/problems/dataset.py); the checks here are of its
logic on rows made up for the test, and of the shipped file against exact facts that hold for any
correct value: the g = 0 towers bound every level from below for g > 0 and from above for g < 0, and the
g = +inf fermionized energy N^2/2 bounds equal-mass levels from above (sum delta is a positive operator;
min-max principle, common practice).
"""

import argparse
import json

import pandas as pd
import pytest

from trapbench.bench.cli import main
from trapbench.bench.suite import load_suite
from trapbench.problems import dataset
from trapbench.problems.references import references_for
from trapbench.problems.spec import Problem


def row(backend, value, error, n=(2, 2), masses=(1.0, 1.0), g=2.0, state=0):
    return {"backend": backend, "backend_version": "1", "params": {}, "n_up": n[0], "n_down": n[1],
            "mass_up": masses[0], "mass_down": masses[1], "g": g, "state": state, "energy": value,
            "energy_error": error, "status": "ok", "cpu_time_s": 1.0}


def test_suite_matches_the_grid():
    suite = load_suite("dataset")
    grid = {p.label: p for p in dataset.dataset_problems()}
    assert {p.name for p in suite.problems} == set(grid)
    for problem in suite.problems:
        assert problem.problem.physics_dict() == grid[problem.name].physics_dict()
    # masses: ratios 1, 2, 20/3 and, for N_up != N_down, their inverses; the lighter species has mass 1
    ratios = {round(p.up.mass / p.down.mass, 9) for p in grid.values() if (p.up.count, p.down.count) == (2, 1)}
    assert ratios == {1.0, 2.0, round(20 / 3, 9), 0.5, round(3 / 20, 9)}
    assert all(min(p.up.mass, p.down.mass) == 1.0 for p in grid.values())


def test_the_sixth_order_suite_is_the_grids_ground_states_from_four_to_six_particles():
    suite = load_suite("dataset-order6")
    grid = {p.label: p for p in dataset.dataset_problems() if p.n_particles in (4, 5, 6)}
    assert {p.name for p in suite.problems} == set(grid)
    for problem in suite.problems:
        physics = problem.problem.physics_dict()
        assert physics == {**grid[problem.name].physics_dict(), "targets": physics["targets"]}
        assert problem.problem.targets.states == 1
    assert [(plan.name, plan.param_sets) for plan in suite.backends] == [("lattice-dmrg", ({"continuum_order": 6},))]


def test_the_shipped_dataset_holds_the_sixth_order_suite_at_every_point_it_covers():
    shipped = dataset.load()
    assert shipped.version == dataset.DATASET_VERSION
    suite = load_suite("dataset-order6")
    keys = {dataset.problem_key(point) for problem in suite.problems for point in problem.problem.points()}
    ground = {entry.key: entry.levels[0] for entry in shipped.entries}
    assert keys <= set(ground)
    for key in keys:
        runs = ground[key].runs
        assert any(run.backend == "lattice-dmrg" and run.params.get("continuum_order") == 6 for run in runs), key


def test_two_independent_families_that_agree_are_published():
    built = dataset.build([row("oscillator-ed", 10.0001, 2e-4), row("lattice-dmrg", 10.0, 1e-4)])
    (entry,) = built.entries
    (level,) = entry.levels
    assert level.status == "agreed" and level.value == 10.0 and level.uncertainty == 2e-4


def test_disagreement_or_one_family_stays_open():
    apart = dataset.build([row("oscillator-ed", 10.01, 1e-3), row("lattice-dmrg", 10.0, 1e-3)])
    assert apart.entries[0].levels[0].status == "open" and apart.entries[0].levels[0].value is None
    # lattice-ed and lattice-dmrg share the lattice discretization: one family
    lattice = dataset.build([row("lattice-ed", 10.0, 1e-3), row("lattice-dmrg", 10.0, 1e-3)])
    assert lattice.entries[0].levels[0].status == "open"


def test_three_particles_come_from_the_precision_method():
    built = dataset.build([row("three-body", 4.1, 1e-10, n=(2, 1)), row("oscillator-ed", 4.2, 1e-3, n=(2, 1))])
    level = built.entries[0].levels[0]
    assert level.status == "precision" and level.value == 4.1 and [m.backend for m in level.methods] == ["three-body"]


def test_the_precision_method_is_graded_by_another_familys_newest_confirmed_run_alone():
    old_version = {**row("oscillator-ed", 4.1000003, 1e-8, n=(2, 1)), "backend_version": "0"}  # superseded
    built = dataset.build([row("three-body", 4.1, 1e-10, n=(2, 1)), old_version,
                           row("oscillator-ed", 4.1000002, 1e-6, n=(2, 1)), row("oscillator-ed", 4.10001, 1e-4, n=(2, 1))])
    level = built.entries[0].levels[0]
    assert level.status == "precision" and level.value == 4.1 and level.uncertainty == 1e-10  # the check is not admitted
    assert level.reference_for("three-body") == (4.1000002, 1e-6, ("oscillator-ed",))
    assert level.reference_for("oscillator-ed") == (4.1, 1e-10, ("three-body",))
    alone = dataset.build([row("three-body", 4.1, 1e-10, n=(2, 1))]).entries[0].levels[0]
    assert alone.independent_check() is None and alone.reference_for("three-body") is None


def test_the_shipped_three_particle_levels_are_graded_by_oscillator_ed_where_it_ran():
    problem = Problem.create(2, 1, 0.5, mass_up=1.0, mass_down=1.0, states=3)
    for_three_body = [r for r in references_for(problem, for_backend="three-body") if r.route == "dataset"]
    assert [r.state for r in for_three_body] == [0, 1, 2]
    assert all(r.methods == ("oscillator-ed",) for r in for_three_body)
    level = dataset.load().lookup(problem).levels[0]
    check = level.independent_check()
    # the two independent routes agree within twice the check's bar (the check's own calibration goal)
    assert abs(check.value - level.value) <= 2 * check.error and check.error < 1e-6


def test_every_shipped_three_particle_level_has_an_independent_check_that_its_bar_covers():
    # the project's calibration rule (>= 95 % within 2 sigma) applied to the checking method's bars: a precision
    # value that another family's honest bar excludes would be a wrong reference
    shipped = dataset.load()
    checks = [(level, level.independent_check()) for entry in shipped.entries if entry.n_up + entry.n_down == 3
              for level in entry.levels]
    assert len(checks) == 180 and all(check is not None for _, check in checks)
    within = sum(abs(check.value - level.value) <= 2 * check.error for level, check in checks)
    assert within >= 0.95 * len(checks)


def test_results_of_one_parity_sector_are_not_taken_for_the_full_spectrum():
    odd_only = {**row("lattice-dmrg", 10.5, 1e-4), "problem": {"targets": {"parity": "odd"}}}
    built = dataset.build([row("oscillator-ed", 10.0001, 2e-4), odd_only, row("lattice-dmrg", 10.0, 1e-4)])
    level = built.entries[0].levels[0]
    assert level.status == "agreed" and level.value == 10.0
    alone = dataset.build([odd_only])
    assert not alone.entries


def test_each_method_keeps_its_most_precise_result_that_its_other_runs_confirm():
    built = dataset.build([row("oscillator-ed", 10.01, 5e-2), row("oscillator-ed", 10.0002, 3e-4),
                           row("lattice-dmrg", 10.0, 1e-4)])
    level = built.entries[0].levels[0]
    assert level.status == "agreed" and {m.value for m in level.methods} == {10.0002, 10.0}
    assert level.uncertainty == 3e-4 and all(m.own_error is None for m in level.methods)


def test_a_narrow_bar_contradicted_by_the_same_method_is_passed_over():
    # the project's own 3+3 scenario (mass ratio 2, g = 2): oscillator-ed at three cutoffs; the narrowest bar
    # (first run) is excluded by the third run, the second is consistent with both
    runs = [row("oscillator-ed", 12.1046, 0.0137, n=(3, 3)), row("oscillator-ed", 12.0974, 0.016, n=(3, 3)),
            row("oscillator-ed", 12.031, 0.058, n=(3, 3)), row("lattice-dmrg", 12.0862, 0.001, n=(3, 3))]
    level = dataset.build(runs).entries[0].levels[0]
    chosen = {m.backend: m for m in level.methods}["oscillator-ed"]
    assert (chosen.value, chosen.error, chosen.own_error) == (12.0974, 0.016, None)
    assert level.status == "agreed" and level.uncertainty == 0.016
    # without the third run the narrowest bar stands, and the level stays open (1.3 combined bars apart)
    assert dataset.build(runs[:2] + runs[3:]).entries[0].levels[0].status == "open"
    # a merge sees the same: the file's run against the update's
    shipped = dataset.build(runs[:1] + runs[3:])
    (merged,) = dataset.merge(shipped, dataset.build(runs[1:3])).entries
    assert merged.levels[0].status == "agreed" and merged.levels[0].uncertainty == 0.016
    # the runs not used travel with the file, so the next merge still sees them
    assert sorted(run.value for run in merged.levels[0].other_runs) == [12.031, 12.1046]
    reread = dataset.Dataset.from_json_dict(json.loads(json.dumps(shipped.to_json_dict())))
    assert reread.entries == shipped.entries


def test_when_no_run_of_a_method_is_consistent_the_narrowest_bar_is_widened():
    built = dataset.build([row("oscillator-ed", 10.3, 1e-1), row("oscillator-ed", 10.0002, 3e-4),
                           row("lattice-dmrg", 10.0, 1e-4)])
    level = built.entries[0].levels[0]
    chosen = {m.backend: m for m in level.methods}["oscillator-ed"]
    # widened by the shortfall |10.3 - 10.0002| - 0.1 - 3e-4 until it covers the other run
    assert chosen.value == 10.0002 and chosen.own_error == 3e-4
    assert chosen.error == pytest.approx(abs(10.3 - 10.0002) - 0.1)
    assert level.status == "agreed" and level.uncertainty == pytest.approx(chosen.error)
    # merging the same runs again changes nothing: a run held by both sides counts once, at its reported bar
    (again,) = dataset.merge(built, built).entries
    assert again.levels == built.entries[0].levels


def test_a_reference_never_grades_the_method_that_produced_it(monkeypatch):
    built = dataset.build([row("oscillator-ed", 10.0002, 3e-4), row("lattice-dmrg", 10.0, 1e-4)])
    monkeypatch.setattr(dataset, "load", lambda: built)
    problem = Problem.create(2, 2, 2.0, states=1)
    energy = lambda backend: [r for r in references_for(problem, for_backend=backend) if r.quantity == "energy"]
    (for_oscillator,) = energy("oscillator-ed")
    assert (for_oscillator.value, for_oscillator.uncertainty, for_oscillator.methods) == (10.0, 1e-4, ("lattice-dmrg",))
    (for_lattice_ed,) = energy("lattice-ed")  # same family as lattice-dmrg: graded by the oscillator basis only
    assert for_lattice_ed.value == 10.0002 and for_lattice_ed.methods == ("oscillator-ed",)
    (for_others,) = energy("my-solver")
    assert for_others.value == 10.0 and for_others.uncertainty == 3e-4 and for_others.kind == "computed"


def test_the_build_command_writes_a_versioned_file(tmp_path):
    from trapbench.bench.store import Store

    store = tmp_path / "empty.sqlite"
    Store.open(store).close()
    assert main(["dataset", "--store", str(store)]) == 2  # no results of the suite: an input error
    assert main(["dataset", "--store", str(tmp_path / "missing.sqlite")]) == 2


def test_a_partial_build_merges_into_the_existing_file_without_losing_points():
    three = dataset.build([row("three-body", 4.1, 1e-9, n=(2, 1), g=2.0)])
    first = dataset.build([row("oscillator-ed", 10.0, 2e-4), row("lattice-ed", 10.0001, 3e-4)])
    assert [e.key for e in three.entries] != [e.key for e in first.entries]
    merged = dataset.merge(three, first)
    assert {e.key for e in merged.entries} == {three.entries[0].key, first.entries[0].key}
    # grid order: 2+1 points come before 2+2 points
    assert [(e.n_up, e.n_down) for e in merged.entries] == [(2, 1), (2, 2)]
    # a point measured anew replaces the old entry
    again = dataset.build([row("oscillator-ed", 10.0, 2e-4), row("lattice-ed", 10.5, 3e-4)])
    remerged = dataset.merge(merged, again)
    assert len(remerged.entries) == 2
    assert remerged.index[first.entries[0].key].levels[0].status == "open"
    assert remerged.index[three.entries[0].key].levels[0].value == 4.1


def test_a_merge_keeps_the_levels_and_the_precision_the_update_lacks():
    shipped = dataset.build([row("three-body", 4.1, 1e-12, n=(2, 1), g=2.0),
                             row("three-body", 5.3, 1e-12, n=(2, 1), g=2.0, state=1)])
    ground_only = dataset.build([row("three-body", 4.1 + 1e-9, 1e-8, n=(2, 1), g=2.0)])
    (entry,) = dataset.merge(shipped, ground_only).entries
    assert [(level.state, level.value, level.uncertainty) for level in entry.levels] == [(0, 4.1, 1e-12), (1, 5.3, 1e-12)]
    # methods are pooled per level and judged again: a second family turns a one-method level into an agreed one
    lattice_only = dataset.build([row("lattice-dmrg", 10.0, 1e-4)])
    with_oscillator = dataset.build([row("oscillator-ed", 10.00005, 2e-5)])
    (pooled,) = dataset.merge(lattice_only, with_oscillator).entries
    assert lattice_only.entries[0].levels[0].status == "open"
    level = pooled.levels[0]
    assert (level.status, level.value, level.uncertainty) == ("agreed", 10.00005, 1e-4)


def _shipped():
    loaded = dataset.load()
    if not loaded.entries:
        pytest.skip("no dataset file is shipped in this installation")
    return loaded


def test_shipped_levels_respect_the_exact_bounds():
    from trapbench.problems.references import noninteracting_levels

    for entry in _shipped().entries:
        problem = Problem.create(entry.n_up, entry.n_down, entry.g, mass_up=entry.mass_up, mass_down=entry.mass_down,
                                 states=len(entry.levels))
        free = [e for e, _ in noninteracting_levels(problem, len(entry.levels))]
        for level in entry.levels:
            if not level.published:
                continue
            slack = 2 * level.uncertainty + 1e-12
            if entry.g > 0:
                assert level.value >= free[level.state] - slack, (entry, level)
                if entry.mass_up == entry.mass_down:
                    assert level.value <= (entry.n_up + entry.n_down) ** 2 / 2 + slack or level.state > 0
            else:
                assert level.value <= free[level.state] + slack, (entry, level)


def test_catalogue_json_prints_every_entry_with_dataset_references(capsys):
    assert main(["catalogue", "--json"]) == 0
    entries = json.loads(capsys.readouterr().out)
    assert isinstance(entries, list) and len(entries) >= 76
    assert all({"name", "problem", "references"} <= set(e) for e in entries)
    loaded = dataset.load()
    published = sum(1 for e in loaded.entries if any(level.published for level in e.levels))
    served = [e for e in entries if e["name"].startswith("dataset/")]
    assert len(served) == len(loaded.entries)
    with_energy = [e for e in served if any(r["quantity"] == "energy" and r["kind"] == "computed" for r in e["references"])]
    assert len(with_energy) == published


def _store_fixed_levels(path, suite, backend_name, energy, error):
    """A store holding one result of ``suite``: 2+2, equal masses, g = 2, from a stand-in named ``backend_name``."""
    from trapbench.backends.base import Backend, Capabilities
    from trapbench.backends.result import Solution
    from trapbench.bench.executor import OK, Outcome
    from trapbench.bench.store import Store
    from trapbench.bench.suite import Task

    class Fixed(Backend):
        name, version, summary = backend_name, "1", "a fixed level (test stand-in)"
        parameters = ()
        capabilities = Capabilities(error_bars=True)

        def compute(self, problem, params):
            return Solution(energies=[energy], states=[{}], energy_errors=[error])

    problem = Problem.create(2, 2, 2.0)
    with Store.open(path) as store:
        run_id = store.begin_run(suite, "", 1)
        store.record(run_id, suite, Task("2+2 m=1", problem, backend_name, {}, 60.0, 512.0),
                     Outcome(status=OK, result=Fixed().solve(problem).to_json_dict(), wall_time_s=0.1, cpu_time_s=0.1,
                             peak_rss_bytes=1 << 20))


def test_the_build_command_pools_several_stores_and_suites(tmp_path):
    # one method family in each store: neither store alone has two independent methods, together they agree
    _store_fixed_levels(tmp_path / "a.sqlite", "dataset", "oscillator-ed", 5.5394, 2e-4)
    _store_fixed_levels(tmp_path / "b.sqlite", "map", "lattice-ed", 5.5392, 3e-4)
    out = tmp_path / "data.json"
    args = ["dataset", "--store", str(tmp_path / "a.sqlite"), "--output", str(out), "--replace"]
    assert main(args) == 0
    alone = dataset.Dataset.from_json_dict(json.loads(out.read_text()))
    assert [lv.status for e in alone.entries for lv in e.levels] == ["open"]
    assert main(args + ["--store", str(tmp_path / "b.sqlite"), "--suite", "dataset", "--suite", "map"]) == 0
    pooled = dataset.Dataset.from_json_dict(json.loads(out.read_text()))
    level = pooled.entries[0].levels[0]
    assert level.status == "agreed" and level.value == 5.5394 and level.uncertainty == 3e-4
    assert {m.backend for m in level.methods} == {"oscillator-ed", "lattice-ed"}


def test_the_build_command_reads_the_dataset_and_sixth_order_suites_by_default(tmp_path):
    # the oscillator family from the dataset suite, the lattice family from dataset-order6, one store
    _store_fixed_levels(tmp_path / "a.sqlite", "dataset", "oscillator-ed", 5.5394, 2e-4)
    _store_fixed_levels(tmp_path / "a.sqlite", "dataset-order6", "lattice-dmrg", 5.53933, 1e-5)
    out = tmp_path / "data.json"
    assert main(["dataset", "--store", str(tmp_path / "a.sqlite"), "--output", str(out), "--replace"]) == 0
    level = dataset.Dataset.from_json_dict(json.loads(out.read_text())).entries[0].levels[0]
    assert level.status == "agreed" and level.value == 5.53933 and level.uncertainty == 2e-4
    assert level.reference_for("oscillator-ed") == (5.53933, 1e-5, ("lattice-dmrg",))


def test_the_build_command_writes_the_file_before_printing(tmp_path, monkeypatch):
    # a reader that stops early (`trapbench dataset ... | head -1`) closes the pipe at the first print
    _store_fixed_levels(tmp_path / "a.sqlite", "dataset", "oscillator-ed", 5.5394, 2e-4)
    out = tmp_path / "data.json"

    def closed_pipe(*args, **kwargs):
        raise BrokenPipeError

    from trapbench.bench.commands import dataset as command

    parser = argparse.ArgumentParser()
    command.register(parser)
    args = parser.parse_args(["--store", str(tmp_path / "a.sqlite"), "--output", str(out), "--replace"])
    monkeypatch.setattr("builtins.print", closed_pipe)
    with pytest.raises(BrokenPipeError):  # `trapbench` itself then exits quietly with 128 + SIGPIPE
        command.run(args)
    written = dataset.Dataset.from_json_dict(json.loads(out.read_text()))
    assert [level.methods[0].value for e in written.entries for level in e.levels] == [5.5394]


def test_disagreements_list_the_levels_where_two_families_exclude_each_other():
    built = dataset.build([row("oscillator-ed", 10.01, 2e-3), row("lattice-dmrg", 10.0, 1e-3),  # gap 0.01 > 3e-3
                           row("oscillator-ed", 7.0, 1e-3, g=5.0), row("lattice-ed", 7.0005, 1e-3, g=5.0),  # agreed
                           row("oscillator-ed", 3.0, 1e-3, g=-1.0)])  # one family: open, but no conflict
    (conflict,) = dataset.disagreements(built)
    assert (conflict["g"], conflict["method A"], conflict["method B"]) == (2.0, "lattice-dmrg", "oscillator-ed")
    assert conflict["gap"] == pytest.approx(0.01) and conflict["sigmas"] == pytest.approx(0.01 / 3e-3)


def test_stored_disagreements_judge_any_stored_level_and_never_pool_another_trap():
    """The same rule on a store's own rows, also off the dataset grid (4+4, mass ratio 2); a double-well run with
    the same particles, masses and g is another problem and must not join the harmonic level's runs."""
    double_well = {**row("lattice-dmrg", 6.0, 1e-3, n=(4, 4), masses=(2.0, 1.0), g=-2.0),
                   "problem": {"trap": {"shape": "harmonic+gaussian", "barrier_height": 4.0}}}
    rows = [row("oscillator-ed", 6.5068, 2.7e-3, n=(4, 4), masses=(2.0, 1.0), g=-2.0),
            row("lattice-dmrg", 6.4705, 6.9e-3, n=(4, 4), masses=(2.0, 1.0), g=-2.0),  # gap 0.0363 > 9.6e-3
            row("oscillator-ed", 20.985, 0.05, n=(4, 4), masses=(2.0, 1.0), g=2.0),
            row("lattice-dmrg", 20.9514, 2.2e-3, n=(4, 4), masses=(2.0, 1.0), g=2.0),  # agreed
            row("oscillator-ed", 7.0, 1e-4, n=(4, 4), masses=(2.0, 1.0), g=5.0), {**double_well, "g": 5.0}]
    (conflict,) = dataset.stored_disagreements(rows)  # pooled, the double well's 6.0 would conflict at g = 5
    assert (conflict["config"], conflict["mass ratio"], conflict["g"]) == ("4+4", 2.0, -2.0)
    assert (conflict["method A"], conflict["method B"]) == ("oscillator-ed", "lattice-dmrg")
    assert conflict["sigmas"] == pytest.approx(0.0363 / 9.6e-3)
    assert dataset.level_runs([double_well]) == {}


def test_the_report_states_the_datasets_coverage_against_the_grid_and_the_goals(monkeypatch):
    from trapbench.bench.report import analysis

    built = dataset.build([row("three-body", 4.1, 1e-12, n=(2, 1)), row("oscillator-ed", 4.1003, 1e-4, n=(2, 1)),
                           row("three-body", 5.1, 1e-12, n=(2, 1), g=5.0), row("oscillator-ed", 5.1, 1e-4, n=(2, 1), g=5.0),
                           row("three-body", 6.1, 1e-12, n=(2, 1), g=20.0),
                           row("oscillator-ed", 10.0002, 3e-4),
                           row("lattice-dmrg", 10.0, 1e-4), row("oscillator-ed", 12.0, 1e-3, g=5.0)])
    monkeypatch.setattr(dataset, "load", lambda: built)
    status = analysis.dataset_status().set_index("config")
    # the grid: 5 mass ratios x 6 g for 2+1, 3 x 6 for 2+2 (dataset_problems)
    assert status.loc["2+1", "grid points"] == 30 and status.loc["2+2", "grid points"] == 18
    assert status.loc["2+1", ["measured", "levels published", "within goal"]].tolist() == [3, 3, 3]
    # two of the three precision levels checked by oscillator-ed; 3e-4 apart is 3 of its bars: outside 2
    assert status.loc["2+1", ["precision levels checked", "checks within 2 bars"]].tolist() == [2, 1]
    assert pd.isna(status.loc["2+2", "precision levels checked"])
    two_two = status.loc["2+2"]
    assert (two_two["measured"], two_two["levels published"], two_two["levels open"]) == (2, 1, 1)
    assert two_two["worst"] == pytest.approx(3e-4 / 10.0) and two_two["within goal"] == 0  # goal 1e-6 at N = 4
    assert status.loc["6+6", "measured"] == 0


def test_a_newer_backend_version_supersedes_an_older_narrower_bar():
    old = {**row("oscillator-ed", -2.0094, 6e-3, g=-3.0), "backend_version": "3"}
    new = {**row("oscillator-ed", -2.0245, 1.3e-2, g=-3.0), "backend_version": "4"}
    lattice = row("lattice-dmrg", -2.0251, 8e-4, g=-3.0)
    built = dataset.build([old, new, lattice])
    level = built.entries[0].levels[0]
    assert level.status == "agreed" and {(m.backend, m.version) for m in level.methods} == {
        ("oscillator-ed", "4"), ("lattice-dmrg", "1")}
    # merging the new build into a file that holds the old disagreement gives the same verdict
    shipped = dataset.build([old, lattice])
    assert shipped.entries[0].levels[0].status == "open"
    (merged,) = dataset.merge(shipped, dataset.build([new])).entries
    assert merged.levels[0].status == "agreed" and merged.levels[0].uncertainty == 1.3e-2
