"""The problem specification: validation at the edge, TOML round trip, canonical hash."""

import math

import pytest
import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from trapbench.problems import Problem, SpecError, format_problem, parse_problem

VALID = {
    "label": "demo",
    "up": {"count": 2, "mass": 1.0},
    "down": {"count": 1, "mass": 6.5},
    "interaction": {"g": [-1.0, 2.0]},
    "targets": {"states": 3, "parity": "even", "observables": ["density"]},
}


def with_change(path, value):
    data = {k: dict(v) if isinstance(v, dict) else v for k, v in VALID.items()}
    *parents, last = path.split(".")
    table = data
    for key in parents:
        table = table.setdefault(key, {})
    table[last] = value
    return data


@pytest.mark.parametrize(
    "path, value, field",
    [
        ("up.count", -1, "up.count"),
        ("up.count", 1.5, "up.count"),
        ("up.count", True, "up.count"),
        ("down.mass", 0.0, "down.mass"),
        ("down.mass", float("nan"), "down.mass"),
        ("down.mass", "heavy", "down.mass"),
        ("up.omega", float("inf"), "up.omega"),
        ("interaction.g", float("nan"), "interaction.g"),
        ("interaction.g", [], "interaction.g"),
        ("interaction.g", [1.0, float("inf")], "interaction.g[1]"),
        ("targets.states", 0, "targets.states"),
        ("targets.parity", "up", "targets.parity"),
        ("targets.observables", ["densty"], "targets.observables[0]"),
        ("trap.shape", "quartic", "trap.shape"),
    ],
)
def test_bad_values_name_the_field(path, value, field):
    with pytest.raises(SpecError) as info:
        Problem.from_dict(with_change(path, value))
    assert info.value.field == field
    assert "\n" not in str(info.value)


def test_unknown_key_suggests_the_closest():
    with pytest.raises(SpecError, match="did you mean 'mass'") as info:
        Problem.from_dict(with_change("up.mas", 2.0))
    assert info.value.field == "up.mas"
    with pytest.raises(SpecError, match="did you mean 'targets'"):
        Problem.from_dict({**VALID, "target": {}})


def test_missing_pieces():
    with pytest.raises(SpecError, match="interaction.g"):
        Problem.from_dict({k: v for k, v in VALID.items() if k != "interaction"})
    with pytest.raises(SpecError) as info:
        Problem.from_dict({k: v for k, v in VALID.items() if k != "down"})
    assert info.value.field == "down"
    with pytest.raises(SpecError, match="barrier_height"):
        Problem.from_dict({**VALID, "trap": {"shape": "harmonic+gaussian", "barrier_width": 0.5}})


def test_toml_round_trip_and_scan_points():
    problem = Problem.from_dict({**VALID, "trap": {"shape": "harmonic+gaussian", "barrier_height": 3, "barrier_width": 0.5}})
    text = format_problem(problem)
    assert parse_problem(text) == problem
    points = problem.points()
    assert [p.coupling for p in points] == [-1.0, 2.0]
    assert all(not p.is_scan for p in points)
    with pytest.raises(ValueError):
        problem.coupling


def test_canonical_hash_ignores_key_order_float_format_and_label():
    text_a = """
label = "a"
[up]
count = 2
mass = 1
[down]
mass = 6.50
count = 1
[interaction]
g = [-1, 2.0]
[targets]
states = 3
parity = "even"
observables = ["density"]
"""
    a = parse_problem(text_a)
    b = Problem.from_dict(VALID)
    assert a.key == b.key
    assert Problem.from_dict(with_change("down.mass", 6.5000001)).key != b.key


def test_toml_syntax_error_is_a_spec_error():
    with pytest.raises(SpecError, match="not valid TOML"):
        parse_problem("[up\ncount = 1")


def test_potential_shapes():
    box = Problem.from_dict({**VALID, "trap": {"shape": "box", "half_width": 3.0}})
    assert box.trap.potential([0.0, 2.9, 3.1], box.up).tolist() == [0.0, 0.0, math.inf]
    barrier = Problem.from_dict(
        {**VALID, "trap": {"shape": "harmonic+gaussian", "barrier_height": 2.0, "barrier_width": 0.5, "barrier_center": 1}}
    )
    # V = m w^2 x^2 / 2 + h exp(-(x - c)^2 / (2 w^2)) at x = c = 1, m = 6.5
    assert barrier.trap.potential([1.0], barrier.down)[0] == pytest.approx(0.5 * 6.5 + 2.0)
    assert not barrier.trap.is_symmetric


# ---------------------------------------------------------------------------- fuzzing

scalars = st.one_of(
    st.none(), st.booleans(), st.integers(-5, 5), st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=5)
)
values = st.recursive(scalars, lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner, max_size=3), max_leaves=8)
keys = st.sampled_from(["up", "down", "interaction", "targets", "trap", "physical", "label", "count", "mass", "g", "states", "shape", "x"])
documents = st.dictionaries(keys, values | st.dictionaries(keys, values, max_size=4), max_size=6)


@settings(max_examples=300, suppress_health_check=[HealthCheck.too_slow], deadline=None)
@given(documents)
def test_fuzzed_mappings_give_only_spec_errors(document):
    try:
        Problem.from_dict(document)
    except SpecError:
        pass


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=80))
def test_fuzzed_toml_text_gives_only_spec_errors(text):
    try:
        parse_problem(text)
    except SpecError:
        pass


@settings(max_examples=200, deadline=None)
@given(
    st.fixed_dictionaries(
        {
            "up": st.fixed_dictionaries({"count": st.integers(-2, 4), "mass": st.floats(-1, 50)}),
            "down": st.fixed_dictionaries({"count": st.integers(-2, 4)}),
            "interaction": st.fixed_dictionaries({"g": st.floats(allow_nan=True) | st.lists(st.floats(), max_size=3)}),
        }
    )
)
def test_fuzzed_near_valid_documents_round_trip_or_fail_cleanly(document):
    try:
        problem = Problem.from_dict(document)
    except SpecError:
        return
    assert parse_problem(tomli_w.dumps(problem.to_dict())) == problem
