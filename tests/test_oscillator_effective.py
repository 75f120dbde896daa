"""oscillator-ed with the centre-of-mass-aware effective interaction (``interaction = 'effective'``).

References: the exact 1+1 levels (Busch et al., Found. Phys. 28, 549 (1998), ``two-body`` backend's
30-digit roots: a self-consistency check, true by construction of the interaction); the ``three-body``
backend for 2+1 (independent precision solver, ~1e-8); Hellmann-Feynman by central differences of the
energy at a fixed cutoff.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from trapbench.backends.base import Unsupported
from trapbench.bench.check_suite import assert_check, check_cases
from trapbench.backends import oscillator_ed as oed
from trapbench.backends.oscillator_ed import OscillatorEDBackend
from trapbench.backends.registry import get
from trapbench.problems.exact.busch import two_body_levels
from trapbench.problems.spec import Problem


@pytest.fixture(autouse=True)
def one_blas_thread():
    with threadpool_limits(limits=1):
        yield


ED = OscillatorEDBackend()


@pytest.mark.parametrize("mass_down", [1.0, 20 / 3, 0.15])
@pytest.mark.parametrize("g", [2.0, -1.0, 10.0])
def test_pair_is_exact_at_every_cutoff(g, mass_down):
    """Self-consistency (by construction): 1+1 with V_eff has the exact lowest levels of both parities
    (Busch roots, 30 digits) at a small cutoff, where the bare and running couplings are far off."""
    problem = Problem.create(1, 1, g, mass_down=mass_down, states=5)
    exact = [e for e, _ in two_body_levels(g * math.sqrt(mass_down / (1 + mass_down)), 1.0, 5)]
    result = ED.solve(problem, interaction="effective", cutoff=8, ladder=1)
    assert result.diagnostics["interaction"] == "effective"
    assert max(abs(a - b) for a, b in zip(result.energies, exact)) < 1e-11
    bare = ED.solve(problem, interaction="bare", cutoff=8, ladder=1)
    assert abs(bare.energies[0] - exact[0]) > 1e-3


def test_pair_is_exact_in_a_tighter_common_trap():
    """omega_up = omega_down = 2: the tensor is built at g / sqrt(omega) and scaled by omega (exact scaling of
    the contact problem, E(g, omega) = omega E(g / sqrt(omega), 1)); 1+1 levels equal the ``two-body`` ones."""
    problem = Problem.create(1, 1, 2.0, mass_down=20 / 3, omega_up=2.0, omega_down=2.0, states=4)
    exact = get("two-body").solve(problem).energies
    result = ED.solve(problem, interaction="effective", cutoff=8, ladder=1)
    assert max(abs(a - b) for a, b in zip(result.energies, exact)) < 1e-11


@pytest.mark.parametrize("g", [2.0, -1.0])
def test_three_body_converges_to_the_precision_solver(g):
    """2+1, equal masses, against ``three-body``: the error shrinks along the cutoffs 8, 16, 24 and is
    below 2e-4 at 24 (measured 1.0e-4 at g = 2 and -8.0e-5 at g = -1), smaller than the running
    coupling's at the same cutoff (measured 4.4e-4 and -2.3e-4)."""
    problem = Problem.create(2, 1, g)
    reference = get("three-body").solve(problem).energies[0]
    errors = [ED.solve(problem, interaction="effective", cutoff=c, ladder=1).energies[0] - reference for c in (8, 16, 24)]
    assert abs(errors[0]) > abs(errors[1]) > abs(errors[2])
    assert abs(errors[2]) < 2e-4
    running = ED.solve(problem, interaction="renormalized", cutoff=24, ladder=1).energies[0] - reference
    assert abs(errors[2]) < abs(running)


@pytest.mark.parametrize("g", [1.5, -1.0])
def test_hellmann_feynman_through_the_derivative_of_the_effective_tensor(g):
    """<dV_eff/dg> (central difference of the tensor) equals dE/dg by central differences of the energy at
    a fixed cutoff (Hellmann-Feynman holds exactly for the truncated Hermitian H_eff(g))."""
    h = 1e-4
    kwargs = dict(cutoff=10, ladder=1, interaction="effective")
    mid = ED.solve(Problem.create(2, 1, g, mass_down=20 / 3), **kwargs)
    plus = ED.solve(Problem.create(2, 1, g + h, mass_down=20 / 3), **kwargs)
    minus = ED.solve(Problem.create(2, 1, g - h, mass_down=20 / 3), **kwargs)
    slope = (plus.energies[0] - minus.energies[0]) / (2 * h)
    assert mid.scalars["delta"] == pytest.approx(slope, rel=1e-6)


def test_interaction_parameter_keeps_the_old_flag_and_refuses_what_it_cannot_build():
    problem = Problem.create(2, 2, 2.0)
    default = ED.solve(problem, cutoff=8, ladder=1)
    flag_off = ED.solve(problem, cutoff=8, ladder=1, renormalized=False)
    assert default.diagnostics["interaction"] == "renormalized"
    assert flag_off.diagnostics["interaction"] == "bare"
    assert ED.solve(problem, cutoff=8, ladder=1, interaction="bare").energies == flag_off.energies
    assert ED.solve(problem, cutoff=8, ladder=1, interaction="renormalized").energies == default.energies
    # 'auto' takes the effective interaction for 2+1 and 1+2 whose pair is not heavier than the third particle
    problem = Problem.create(2, 1, 2.0)
    assert ED.solve(problem, cutoff=8, ladder=1).energies == ED.solve(problem, cutoff=8, ladder=1, interaction="effective").energies
    assert ED.solve(problem, cutoff=8, ladder=1, renormalized=False).diagnostics["interaction"] == "bare"
    for n_up, n_down, mass_up, kind in ((1, 2, 20 / 3, "effective"), (1, 2, 0.5, "renormalized"), (2, 1, 2.0, "renormalized")):
        chosen = ED.solve(Problem.create(n_up, n_down, -1.0, mass_up=mass_up), cutoff=8, ladder=1).diagnostics["interaction"]
        assert chosen == kind, (n_up, n_down, mass_up)
    problem = Problem.create(2, 1, 2.0)
    with pytest.raises(Unsupported, match="equal trap frequencies"):
        ED.solve(Problem.create(1, 1, 1.0, omega_down=2.0), interaction="effective", cutoff=8, ladder=1)
    with pytest.raises(Unsupported, match="truncation = 'energy'"):
        ED.solve(problem, interaction="effective", truncation="orbital", cutoff=8, ladder=1)
    with pytest.raises(Unsupported, match="trap orbitals"):
        ED.solve(problem, interaction="effective", basis_lengths="optimize", cutoff=8, ladder=1)
    with pytest.raises(Unsupported, match="trimer"):
        ED.solve(Problem.create(2, 1, -1.0, mass_up=20 / 3), interaction="effective", cutoff=8, ladder=1)
    light_pair = ED.solve(Problem.create(2, 1, -1.0, mass_down=20 / 3), interaction="effective", cutoff=8, ladder=1)
    assert light_pair.diagnostics["interaction"] == "effective"


def test_contact_density_and_virial_residual_converge_with_the_effective_interaction():
    """2+1 equal masses, g = 2: <sum delta> = <dV_eff/dg> approaches the ``three-body`` value (its
    Hellmann-Feynman derivative), measured 1.0e-4 off at cutoff 24 (running coupling: 4.5e-4), and the
    virial residual E - 2<V_trap> - (g/2) dE/dg (virial theorem) shrinks with the cutoff (-5.1e-3, -1.5e-3)."""
    problem = Problem.create(2, 1, 2.0)
    reference = get("three-body").solve(problem).scalars["delta"]
    coarse = ED.solve(problem, interaction="effective", cutoff=12, ladder=1)
    fine = ED.solve(problem, interaction="effective", cutoff=24, ladder=1)
    assert abs(fine.scalars["delta"] - reference) < 3e-4
    assert abs(fine.scalars["delta"] - reference) < abs(coarse.scalars["delta"] - reference)
    assert abs(fine.diagnostics["virial_residual"]) < 0.5 * abs(coarse.diagnostics["virial_residual"])


@pytest.mark.parametrize(
    "check", check_cases("oscillator-ed", params={"interaction": "effective", "cutoff": 12, "ladder": 3})
)
def test_common_check_suite_with_the_effective_interaction(check):
    """The project's common checks (contract, virial, Hellmann-Feynman, centre-of-mass tower, parity,
    species swap, g = 0, references from other methods) with the effective interaction."""
    assert_check(check)


def test_mirrored_three_body_problems_give_the_same_levels_with_the_effective_interaction():
    """1+2 and 2+1 with the species (counts and masses) swapped are the same Hamiltonian (common practice). The
    effective interaction's factors carry their single hops on the species of more configurations
    (``hop_species``), so the two orientations are built differently (hops on the pair's species in both) and
    must give the same levels and <sum delta>."""
    one_two = Problem.create(1, 2, 5.0, mass_up=20 / 3, mass_down=1.0, states=3)
    two_one = Problem.create(2, 1, 5.0, mass_up=1.0, mass_down=20 / 3, states=3)
    assert oed.hop_species(one_two, 17, 18) == "down" and oed.hop_species(two_one, 18, 17) == "up"
    a = ED.solve(one_two, cutoff=16, ladder=1, interaction="effective")
    b = ED.solve(two_one, cutoff=16, ladder=1, interaction="effective")
    assert np.allclose(a.energies, b.energies, rtol=0, atol=1e-10)
    assert a.scalars["delta"] == pytest.approx(b.scalars["delta"], abs=1e-9)
