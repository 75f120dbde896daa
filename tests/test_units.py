"""Laboratory units -> dimensionless g via Olshanii's formula.

Source: M. Olshanii, Phys. Rev. Lett. 81, 938 (1998), equal-mass form g_1D = 2 hbar w_perp a / (1 - C' a / a_perp),
C' = |zeta(1/2)|/sqrt(2), a_perp = sqrt(hbar/(m w_perp)) -- recalled from memory, not re-read from the paper.
The unequal-mass form used by trapbench (reduced mass in place of m/2) was derived by analogy from the
relative-coordinate problem and is checked here only for consistency with the equal-mass form and the
weak-coupling limit, not against a paper. Physical constants: scipy.constants (CODATA).
"""

import math

import pytest
from scipy import constants, special

from trapbench.problems import Problem, SpecError, olshanii_coupling
from trapbench.problems.units import ZETA_HALF


HBAR = constants.hbar
ATOMIC_MASS = constants.physical_constants["atomic mass constant"][0]
BOHR_RADIUS = constants.physical_constants["Bohr radius"][0]


def test_zeta_constant():
    # |zeta(1/2)| by scipy.special.zeta (the module uses mpmath: two libraries)
    assert ZETA_HALF == pytest.approx(-special.zeta(0.5), abs=1e-14)


def test_equal_mass_hand_calculation():
    # Hand calculation for two 6Li atoms (6.0151223 u), w_ax = 2 pi 100 Hz, w_perp = 2 pi 20 kHz,
    # a = 1000 a0, in the equal-mass form g_1D = 2 hbar w_perp a / (1 - C a / a_perp),
    # a_perp = sqrt(hbar/(m w_perp)), C' = |zeta(1/2)|/sqrt(2) (Olshanii 1998, recalled).
    hbar, u, a0 = HBAR, ATOMIC_MASS, BOHR_RADIUS
    c_prime = -special.zeta(0.5) / math.sqrt(2)
    m = 6.0151223 * u
    w_ax, w_perp = 2 * math.pi * 100, 2 * math.pi * 20e3
    a = 1000 * a0
    a_perp = math.sqrt(hbar / (m * w_perp))
    g_1d = 2 * hbar * w_perp * a / (1 - c_prime * a / a_perp)
    length = math.sqrt(hbar / (m * w_ax))
    expected = g_1d / (hbar * w_ax * length)
    conversion = olshanii_coupling(6.0151223, 6.0151223, 100, 20e3, 1000)
    assert conversion.g == pytest.approx(expected, rel=1e-9)
    assert conversion.mass_up == conversion.mass_down == 1.0
    assert not conversion.warnings


def test_weak_coupling_limit_and_reference_mass():
    # a -> 0: g_1D -> 2 hbar^2 a / (mu a_perp^2) = 2 hbar w_perp a (Born limit of the formula above; for
    # unequal masses by the analogy stated in the module docstring, not checked against a paper)
    conversion = olshanii_coupling(6.0, 40.0, 50, 10e3, 1e-3)
    hbar, a0, u = HBAR, BOHR_RADIUS, ATOMIC_MASS
    mu = 6 * 40 / 46 * u
    g_weak = 2 * hbar**2 * 1e-3 * a0 / (mu * hbar / (mu * 2 * math.pi * 10e3))
    assert conversion.g_1d_si == pytest.approx(g_weak, rel=1e-6)
    # changing the reference mass rescales g by sqrt(m0'/m0) (g in units of sqrt(hbar^3 omega / m0): dimensional analysis)
    heavy = olshanii_coupling(6.0, 40.0, 50, 10e3, 1e-3, reference_mass_u=40.0)
    assert heavy.g == pytest.approx(conversion.g * math.sqrt(40 / 6), rel=1e-12)
    assert heavy.mass_down == pytest.approx(1.0) and heavy.mass_up == pytest.approx(6 / 40)


def test_resonance_warning_and_sign_change():
    conversion = olshanii_coupling(6.0, 6.0, 100, 20e3, 1000)
    a_res = conversion.resonance_scattering_length_bohr
    below = olshanii_coupling(6.0, 6.0, 100, 20e3, 0.95 * a_res)
    above = olshanii_coupling(6.0, 6.0, 100, 20e3, 1.05 * a_res)
    assert below.g > 0 > above.g
    assert any("confinement-induced resonance" in w for w in below.warnings)


def test_problem_with_physical_block():
    problem = Problem.from_dict(
        {
            "up": {"count": 1},
            "down": {"count": 1},
            "physical": {
                "mass_up_u": 6.0,
                "mass_down_u": 40.0,
                "axial_frequency_hz": 100.0,
                "transverse_frequency_hz": 20e3,
                "scattering_length_bohr": [100.0, 300.0],
            },
        }
    )
    assert problem.down.mass == pytest.approx(40 / 6)
    assert problem.g[1] > problem.g[0] > 0
    with pytest.raises(SpecError, match="give one of them"):
        Problem.from_dict({**problem.to_dict(), "interaction": {"g": 1.0}})
    with pytest.raises(SpecError) as info:
        Problem.from_dict({**problem.to_dict(), "down": {"count": 1, "mass": 2.0}})
    assert info.value.field == "down.mass"
