"""Results round-trip through JSON and pandas; a third-party backend plugs in through an entry point."""

import json
import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from trapbench.backends import Observable, Result, get
from trapbench.problems import Problem


def test_json_round_trip_is_lossless():
    problem = Problem.create(1, 1, 2.0, mass_down=20 / 3, states=3, observables=["density", "momentum"], grid_points=64)
    result = get("two-body").solve(problem)
    result.observables["complex_check"] = Observable(np.array([1 + 2j, 3.5 - 1e-300j]), {"k": np.array([0.1, 0.2])}, "-", "-",
                                                     error=1.25e-7)
    again = Result.from_json(result.to_json())
    assert again.energies == result.energies and again.states == result.states
    assert again.provenance == result.provenance and again.params == result.params
    for name, observable in result.observables.items():
        assert np.array_equal(again.observables[name].values, observable.values)
        assert again.observables[name].values.dtype == observable.values.dtype
        assert all(np.array_equal(again.observables[name].axes[k], v) for k, v in observable.axes.items())
        assert again.observables[name].error == observable.error
    assert again.observables["complex_check"].error == 1.25e-7
    # a result stored before observables carried an error bar reads as "not estimated"
    legacy = json.loads(result.to_json())
    for data in legacy["observables"].values():
        del data["error"]
    assert Result.from_json(json.dumps(legacy)).observables["complex_check"].error is None
    frame = result.to_dataframe()
    assert list(frame["energy"]) == result.energies and set(frame["backend"]) == {"two-body"}
    assert frame["mass_down"].iloc[0] == pytest.approx(20 / 3)


PLUGIN = '''
"""A user's own solver: the non-interacting energy, exact only at g = 0."""
from trapbench.backends import Backend, Capabilities, Solution, Support


class FreeFermions(Backend):
    name = "free-fermions"
    version = "0.1"
    summary = "non-interacting reference"
    capabilities = Capabilities(unequal_masses=False, unequal_frequencies=False, excited_states=False)

    def supports(self, problem, params):
        return Support.yes() if problem.coupling == 0 else Support.no("only g = 0")

    def compute(self, problem, params):
        n_up, n_down = problem.up.count, problem.down.count
        parity = (-1) ** (n_up * (n_up - 1) // 2 + n_down * (n_down - 1) // 2)
        return Solution(energies=[(n_up ** 2 + n_down ** 2) / 2], states=[{"parity": parity, "com": 0}])
'''


@pytest.fixture(scope="module")
def installed_plugin(tmp_path_factory):
    source = tmp_path_factory.mktemp("plugin-src")
    (source / "free_fermions_plugin.py").write_text(PLUGIN)
    (source / "pyproject.toml").write_text(textwrap.dedent('''
        [build-system]
        requires = ["setuptools>=61"]
        build-backend = "setuptools.build_meta"
        [project]
        name = "free-fermions-plugin"
        version = "0.1"
        [tool.setuptools]
        py-modules = ["free_fermions_plugin"]
        [project.entry-points."trapbench.backends"]
        free-fermions = "free_fermions_plugin:FreeFermions"
    '''))
    target = tmp_path_factory.mktemp("plugin-site")
    subprocess.run(
        [sys.executable, "-m", "pip", "install", "--quiet", "--no-deps", "--no-build-isolation", "--target", str(target), str(source)],
        check=True,
        capture_output=True,
        timeout=300,
    )
    return target


def test_plugin_found_through_entry_point(installed_plugin):
    env = {**os.environ, "PYTHONPATH": str(installed_plugin)}
    listing = subprocess.run([sys.executable, "-m", "trapbench.bench.cli", "backends"], env=env, capture_output=True, text=True, timeout=120)
    assert "free-fermions" in listing.stdout
    solved = subprocess.run(
        [sys.executable, "-m", "trapbench.bench.cli", "solve", "--up", "3", "--down", "2", "--g", "0", "-b", "free-fermions", "--json"],
        env=env, capture_output=True, text=True, timeout=120,
    )
    assert solved.returncode == 0, solved.stderr
    # Pauli principle in the oscillator levels n + 1/2: sum_{n < N} (n + 1/2) = N^2/2 per species, so
    # (9 + 4)/2 = 6.5 (textbook, common practice)
    assert json.loads(solved.stdout)["energies"] == [6.5]
    refused = subprocess.run(
        [sys.executable, "-m", "trapbench.bench.cli", "solve", "--up", "3", "--down", "2", "--g", "1", "-b", "free-fermions"],
        env=env, capture_output=True, text=True, timeout=120,
    )
    assert refused.returncode == 2 and "only g = 0" in refused.stderr
    excited = subprocess.run(
        [sys.executable, "-m", "trapbench.bench.cli", "solve", "--up", "3", "--down", "2", "--g", "0", "--states", "3",
         "-b", "free-fermions"],
        env=env, capture_output=True, text=True, timeout=120,
    )
    assert excited.returncode == 2 and "ground state only" in excited.stderr
