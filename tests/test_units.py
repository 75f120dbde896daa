"""Laboratory units -> dimensionless g via Olshanii's formula (M. Olshanii, PRL 81, 938 (1998))."""

import math

import mpmath
import pytest

from trapbench.problems import Problem, SpecError, olshanii_coupling
from trapbench.problems.units import ZETA_HALF


def test_zeta_constant():
    assert ZETA_HALF == pytest.approx(-float(mpmath.zeta(0.5)), abs=1e-15)
    # anchors section 5: C = |zeta(1/2)|/sqrt(2) = 1.0326265761 with a_perp = sqrt(hbar/(m w_perp))
    assert ZETA_HALF / math.sqrt(2) == pytest.approx(1.0326265761, abs=1e-10)


def test_equal_mass_hand_calculation():
    # Hand calculation for two 6Li atoms (6.0151223 u), w_ax = 2 pi 100 Hz, w_perp = 2 pi 20 kHz,
    # a = 1000 a0, in the equal-mass form g_1D = 2 hbar w_perp a / (1 - C a / a_perp),
    # a_perp = sqrt(hbar/(m w_perp)), C = 1.0326265761 (anchors section 5).
    hbar, u, a0 = 1.054571817e-34, 1.66053906660e-27, 5.29177210903e-11
    m = 6.0151223 * u
    w_ax, w_perp = 2 * math.pi * 100, 2 * math.pi * 20e3
    a = 1000 * a0
    a_perp = math.sqrt(hbar / (m * w_perp))
    g_1d = 2 * hbar * w_perp * a / (1 - 1.0326265761 * a / a_perp)
    length = math.sqrt(hbar / (m * w_ax))
    expected = g_1d / (hbar * w_ax * length)
    conversion = olshanii_coupling(6.0151223, 6.0151223, 100, 20e3, 1000)
    assert conversion.g == pytest.approx(expected, rel=1e-9)
    assert conversion.mass_up == conversion.mass_down == 1.0
    assert not conversion.warnings


def test_weak_coupling_limit_and_reference_mass():
    # a -> 0: g_1D -> 2 hbar w_perp a (anchors section 5), whatever the masses' ratio
    conversion = olshanii_coupling(6.0, 40.0, 50, 10e3, 1e-3)
    hbar, a0, u = 1.054571817e-34, 5.29177210903e-11, 1.66053906660e-27
    mu = 6 * 40 / 46 * u
    g_weak = 2 * hbar**2 * 1e-3 * a0 / (mu * hbar / (mu * 2 * math.pi * 10e3))
    assert conversion.g_1d_si == pytest.approx(g_weak, rel=1e-6)
    # changing the reference mass rescales g by sqrt(m0'/m0) (anchors section 1)
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
