"""Odd-even analysis: energies across backends and the three-point pairing gap.

Outside sources: the non-interacting energies (N_up^2 + N_down^2)/2 (textbook oscillator towers) and the
first-order coefficients c1 * sqrt(2 pi) = 1, 3/2, 11/4, 57/16, 321/64 (1+1, 2+1, 2+2, 3+2, 3+3) of
first-order perturbation theory (Gaussian integrals of Hermite functions worked out by hand, no published
source; re-derived by quadrature in tests/test_references.py), from which the first-order gaps follow by hand:
Delta(3) = g [3/2 - (1 + 11/4)/2] / sqrt(2 pi) = -3 g / (8 sqrt(2 pi)),
Delta(5) = g [57/16 - (11/4 + 321/64)/2] / sqrt(2 pi) = -41 g / (128 sqrt(2 pi)).
"""

import math

import pytest

from trapbench.backends.registry import get
from trapbench.bench.cli import main
from trapbench.bench.executor import Limits
from trapbench.bench.pairing import balanced_counts, ground_energies, odd_even_analysis, pairing_gaps

ROOT_2PI = math.sqrt(2 * math.pi)


def first_order_gaps(g):
    return {3: -3 * g / (8 * ROOT_2PI), 5: -41 * g / (128 * ROOT_2PI)}


def test_balanced_counts():
    assert [balanced_counts(n) for n in range(2, 9)] == [(1, 1), (2, 1), (2, 2), (3, 2), (3, 3), (4, 3), (4, 4)]


def test_gap_vanishes_without_interaction():
    energies = ground_energies(get("perturbative"), 0.0)
    expected = [(u * u + d * d) / 2 for u, d in (balanced_counts(n) for n in range(2, 9))]
    assert list(energies["energy"]) == pytest.approx(expected, abs=1e-12)
    gaps = pairing_gaps(energies)
    assert list(gaps["N"]) == [3, 5, 7]
    assert list(gaps["gap"]) == pytest.approx([0, 0, 0], abs=1e-12)


def test_first_order_gap_from_perturbation_theory():
    g = -0.3
    gaps = pairing_gaps(ground_energies(get("perturbative"), g, range(2, 7))).set_index("N")["gap"]
    for n, value in first_order_gaps(g).items():
        assert gaps[n] == pytest.approx(value, abs=1e-12)
    assert (gaps > 0).all()  # attraction favours even N


def test_exact_diagonalization_gap_approaches_first_order_quadratically():
    # Delta(g) - Delta_1(g) = O(g^2): halving g must divide the residual by about 4
    residuals = {}
    for g in (-0.1, -0.05):
        energies = ground_energies(get("oscillator-ed"), g, range(2, 7), {"cutoff": 16, "ladder": 4, "ladder_step": 4})
        assert (energies["status"] == "ok").all()
        gaps = pairing_gaps(energies).set_index("N")
        for n, value in first_order_gaps(g).items():
            residual = gaps.loc[n, "gap"] - value
            assert abs(residual) <= 0.1 * g * g + 3 * gaps.loc[n, "error"]
            residuals[n, g] = residual
    for n in (3, 5):
        assert residuals[n, -0.1] / residuals[n, -0.05] == pytest.approx(4, rel=0.25)


def test_unsupported_sizes_are_reported_not_hidden():
    energies, gaps = odd_even_analysis(["two-body", "perturbative"], -0.5, range(2, 5))
    two_body = energies[energies["backend"] == "two-body"].set_index("N")
    assert two_body.loc[2, "status"] == "ok"
    assert two_body.loc[3, "status"] == "unsupported" and "1+1" in two_body.loc[3, "reason"]
    assert set(gaps["backend"]) == {"perturbative"}


def test_a_size_the_parameters_cannot_handle_is_a_row_not_a_crash():
    class Capped:
        name = "capped"

        def supports(self, problem):
            return get("perturbative").supports(problem)

        def solve(self, problem, **params):
            if problem.n_particles > 3:
                from trapbench.problems.errors import SpecError

                raise SpecError("param.max_dimension", "basis too large for this size")
            return get("perturbative").solve(problem)

    energies = ground_energies(Capped(), -0.5, range(2, 6))
    assert list(energies["status"]) == ["ok", "ok", "failed", "failed"]
    assert "max_dimension" in energies.loc[2, "reason"]


def test_odd_even_command_prints_both_tables(capsys):
    assert main(["odd-even", "-b", "perturbative", "--g", "-0.5", "--max-particles", "5"]) == 0
    out = capsys.readouterr().out
    assert "pairing gap" in out and "Delta(N+1)" in out
    assert main(["odd-even", "-b", "perturbative", "--g", "-0.5", "--max-particles", "5", "--timeout", "60"]) == 0
    assert capsys.readouterr().out == out  # each size in its own process: the same tables
    assert main(["odd-even", "-b", "perturbative", "--g", "-0.5", "--max-particles", "1"]) == 2


def test_isolated_sizes_give_the_in_process_numbers():
    g = -0.3
    here = ground_energies(get("perturbative"), g, range(2, 5))
    isolated = ground_energies(get("perturbative"), g, range(2, 5), isolated=True, limits=Limits(timeout_s=60))
    assert list(isolated["status"]) == ["ok"] * 3
    assert list(isolated["energy"]) == list(here["energy"])  # bit for bit
