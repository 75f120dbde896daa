"""The shipped examples load, convert their laboratory units and are solvable by some installed backend."""

from importlib import resources

import pytest

from trapbench.backends import registry
from trapbench.backends.base import support_of
from trapbench.problems import load_problem

EXAMPLES = sorted(p.name for p in resources.files("trapbench.problems").joinpath("examples").iterdir()
                  if p.name.endswith(".toml"))


@pytest.mark.parametrize("name", EXAMPLES)
def test_example_loads_and_some_backend_admits_it(name):
    problem = load_problem(resources.files("trapbench.problems").joinpath("examples", name))
    assert problem.points()
    admitting = [b.name for b in registry.all_backends() if support_of(b, problem)]
    assert admitting, f"no installed backend admits {name}"


def test_the_lab_example_is_a_mixture_of_our_own():
    problem = load_problem(resources.files("trapbench.problems").joinpath("examples", "lab_pair.toml"))
    # 53Cr (52.9406 u) over 6Li (6.0151 u), masses from memory of the isotope tables; lighter species = m0
    assert problem.down.mass / problem.up.mass == pytest.approx(52.9406 / 6.0151)
