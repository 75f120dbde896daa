"""The three-body (2+1) backend against exact limits derived here by independent routes.

Each check names its source beside it. The backend works in a symmetry-reduced quarter of the
mass-scaled Jacobi plane; the references below are built from the particles' own coordinates
(orbital enumeration, quadrature over x, explicit 3D vectors), never from the backend's geometry.
"""

import itertools
import math

import mpmath
import numpy as np
import pytest
from scipy import integrate, special

from trapbench.backends import get
from trapbench.backends.base import Unsupported
from trapbench.problems import Problem

HEAVY = 20 / 3  # the heavy-pair mass ratio of the targets


@pytest.fixture(scope="module")
def backend():
    return get("three-body")


def hermite_function(n: int, x: np.ndarray, length: float) -> np.ndarray:
    """Normalized oscillator orbital of width ``length`` from scipy.special.eval_hermite (textbook)."""
    t = np.asarray(x) / length
    norm = 1 / math.sqrt(2**n * math.factorial(n) * math.sqrt(math.pi) * length)
    return norm * special.eval_hermite(n, t) * np.exp(-t * t / 2)


def sector_angles(m_pair: float, m_odd: float) -> tuple[float, float]:
    """Angles of the g = +inf wedges from explicit 3D vectors (no formula shared with the backend).

    In mass-scaled coordinates q_i = sqrt(m_i) x_i the hyperplane x_i = x_j has normal
    e_i/sqrt(m_i) - e_j/sqrt(m_j); projected on the plane orthogonal to the centre-of-mass direction
    these normals give the lines. Returns (theta_o, theta_i): the sector between the pair's line and
    a pair-odd line (ordering A A B) and the one between the two pair-odd lines (ordering A B A).
    """
    masses = np.array([m_pair, m_pair, m_odd])
    com = np.sqrt(masses) / np.linalg.norm(np.sqrt(masses))

    def line_direction(i: int, j: int) -> np.ndarray:
        normal = np.zeros(3)
        normal[i], normal[j] = 1 / math.sqrt(masses[i]), -1 / math.sqrt(masses[j])
        normal -= normal.dot(com) * com
        direction = np.cross(com, normal)  # in the plane, perpendicular to the normal
        return direction / np.linalg.norm(direction)

    def acute(u: np.ndarray, v: np.ndarray) -> float:
        return math.acos(min(1.0, abs(float(u.dot(v)))))

    pair_line, line_13, line_23 = line_direction(0, 1), line_direction(0, 2), line_direction(1, 2)
    theta_o = acute(pair_line, line_13)
    assert abs(theta_o - acute(pair_line, line_23)) < 1e-14  # the exchange mirrors the two odd lines
    return theta_o, math.pi - 2 * theta_o


# ----------------------------------------------------------------------------- g = 0


@pytest.mark.parametrize("m_up, m_down", [(1.0, 1.0), (HEAVY, 1.0), (1.0, 0.15)])
def test_non_interacting_towers(backend, m_up, m_down):
    # g = 0, common omega: E = n1 + n2 + n3 + 3/2 with n1 < n2 (Pauli), parity (-1)^(n1+n2+n3)
    # (textbook oscillator levels, enumerated here); masses do not enter.
    levels = sorted(
        (n1 + n2 + n3 + 1.5, (-1) ** (n1 + n2 + n3)) for n1, n2, n3 in itertools.product(range(8), repeat=3) if n1 < n2
    )[:7]
    result = backend.solve(Problem.create(2, 1, 0.0, mass_up=m_up, mass_down=m_down, states=7), order=10)
    assert result.energies == pytest.approx([e for e, _ in levels], abs=1e-11)
    for energy in {e for e, _ in levels}:
        expected = sorted(p for e, p in levels if e == energy)
        got = sorted(s["parity"] for s, e in zip(result.states, result.energies) if abs(e - energy) < 1e-9)
        assert got == expected
        assert all(s["degeneracy"] == len(expected) for s, e in zip(result.states, result.energies) if abs(e - energy) < 1e-9)


@pytest.mark.parametrize("m_up, m_down", [(1.0, 1.0), (HEAVY, 1.0), (0.15, 1.0)])
def test_first_order_slope(backend, m_up, m_down):
    # first-order perturbation theory (textbook): dE0/dg at g = 0 is
    # c1 = sum_{i in {0,1}} int phi_i(x; b_up)^2 phi_0(x; b_down)^2 dx, b_s = 1/sqrt(m_s); scipy quad here
    b_up, b_down = 1 / math.sqrt(m_up), 1 / math.sqrt(m_down)
    c1 = sum(
        integrate.quad(lambda x: hermite_function(i, x, b_up) ** 2 * hermite_function(0, x, b_down) ** 2, -np.inf, np.inf, epsabs=1e-14)[0]
        for i in (0, 1)
    )
    result = backend.solve(Problem.create(2, 1, 0.0, mass_up=m_up, mass_down=m_down), order=10)
    assert result.scalars["delta"] == pytest.approx(c1, abs=1e-10)  # Hellmann-Feynman at g = 0
    h = 1e-3
    slope = [backend.solve(Problem.create(2, 1, s * h, mass_up=m_up, mass_down=m_down), order=10).energies[0] for s in (1, -1)]
    assert (slope[0] - slope[1]) / (2 * h) == pytest.approx(c1, abs=1e-6)  # O(h^2) central difference


def test_non_interacting_densities_are_orbital_sums(backend):
    # g = 0 ground state (textbook): n_pair = phi_0^2 + phi_1^2 and n_odd = phi_0^2 with widths 1/sqrt(m_s);
    # the 1+2 labelling puts the pair on the down species
    problem = Problem.create(1, 2, 0.0, mass_up=1.0, mass_down=HEAVY, observables=["density"], grid_points=121)
    result = backend.solve(problem)  # densities converge like the wave function, not like its energy
    x = result.observables["density_down"].axes["x"]
    b_pair, b_odd = 1 / math.sqrt(HEAVY), 1.0
    pair = hermite_function(0, x, b_pair) ** 2 + hermite_function(1, x, b_pair) ** 2
    assert result.observables["density_down"].values == pytest.approx(pair, abs=1e-9)
    assert result.observables["density_up"].values == pytest.approx(hermite_function(0, x, b_odd) ** 2, abs=1e-9)


def test_density_carries_the_trap_energy_of_the_trimer(backend):
    # self-consistency of two outputs: <sum V_trap> = sum_s (m_s/2) int x^2 n_s(x) dx (definition), and
    # int n_s = N_s; trapezoid on the uniform grid (spectrally accurate for Gaussian tails)
    problem = Problem.create(2, 1, -3.0, mass_up=HEAVY, observables=["density"], grid_points=801, x_max=7.0)
    result = backend.solve(problem, order=12)
    x = result.observables["density_up"].axes["x"]
    up, down = result.observables["density_up"].values, result.observables["density_down"].values
    assert np.trapezoid(up, x) == pytest.approx(2.0, abs=1e-9)
    assert np.trapezoid(down, x) == pytest.approx(1.0, abs=1e-9)
    trap = 0.5 * HEAVY * np.trapezoid(x * x * up, x) + 0.5 * np.trapezoid(x * x * down, x)
    assert trap == pytest.approx(result.scalars["trap_energy"], abs=1e-8)


# ----------------------------------------------------------------------------- g -> +inf


def test_wedge_levels_at_large_g(backend):
    # g = +inf: hard walls on the coincidence lines; a 2D oscillator in a wedge of angle theta has
    # E_rel = 2n + k pi/theta + 1 (Bessel-type separation, textbook). The pair's node halves the A A B
    # wedge. Ordering of the total spectrum (COM + 1/2) compared at g = 1e5, where the 1/g shift is < 1e-4.
    theta_o, theta_i = sector_angles(HEAVY, 1.0)
    rel = [2 * n + k * math.pi / theta_o + 1 for n in range(3) for k in range(1, 4)] * 2  # left and right of the pair
    rel += [2 * n + k * math.pi / theta_i + 1 for n in range(3) for k in range(1, 4)]  # odd particle in the middle
    total = sorted(e + n_cm + 0.5 for e in rel for n_cm in range(6))[:6]
    result = backend.solve(Problem.create(2, 1, 1e5, mass_up=HEAVY, states=6), order=12)
    assert result.energies == pytest.approx(total, abs=2e-4)
    assert all(e < t for e, t in zip(result.energies, total))  # finite g lies below the hard-wall limit


def wedge_slope(theta: float, nu: float, mu: float) -> float:
    """K of E = E_inf - K/g for a wedge state psi = A rho^nu e^{-rho^2/2} sin(nu phi) with two contact walls.

    First order in 1/lambda (derived here): letting psi take a small value u on a wall of strength
    lambda = g sqrt(mu) adds -u |d_n psi| + lambda u^2 per unit length, minimized at u = |d_n psi|/(2 lambda):
    dE = -(1/(4 lambda)) sum_walls int (d_n psi)^2 dl, which for this psi (normalized on the plane) gives
    K = nu^2 Gamma(nu - 1/2) / (theta sqrt(mu) Gamma(nu + 1)). The same argument on a line gives Busch's
    E = 2 - 2/(sqrt(pi mu) g) for 1+1.
    """
    return nu * nu * math.gamma(nu - 0.5) / (theta * math.sqrt(mu) * math.gamma(nu + 1))


def fit_strong_coupling(backend, problem_at, couplings, level=0):
    """(E_inf, K) from E(g) = E_inf - K/g + c2/g^2 + c3/g^3 through the given couplings."""
    energies = [backend.solve(problem_at(g), order=12).energies[level] for g in couplings]
    design = np.array([[1, -1 / g, 1 / g**2, 1 / g**3] for g in couplings])
    coefficients = np.linalg.solve(design, energies)
    return coefficients[0], coefficients[1]


@pytest.mark.parametrize(
    "m_pair, parity, family",
    [(HEAVY, "odd", "outside"), (0.15, "odd", "inside")],
)
def test_strong_coupling_slopes_of_single_wedges(backend, m_pair, parity, family):
    # the lowest level of the sector sits in one wedge family at g = inf (non-degenerate): E_inf and K
    # from the wedge formulas above, fitted from g = 400 ... 3200
    theta_o, theta_i = sector_angles(m_pair, 1.0)
    mu = m_pair / (m_pair + 1)
    theta, nu = (2 * theta_o, math.pi / theta_o) if family == "outside" else (theta_i, math.pi / theta_i)
    e_inf, k = fit_strong_coupling(
        backend, lambda g: Problem.create(2, 1, g, mass_up=m_pair, parity=parity), (400.0, 800.0, 1600.0, 3200.0)
    )
    assert e_inf == pytest.approx(nu + 1 + 0.5, abs=1e-7)
    assert k == pytest.approx(wedge_slope(theta, nu, mu), rel=1e-4)


def test_equal_mass_strong_coupling_coefficient(backend):
    # equal masses: E = 9/2 - K/g with K = 81/(8 sqrt(2 pi)) for the 2+1 ground state (effective spin
    # chain: Volosniev et al., Nat. Commun. 5, 5300 (2014); Deuretzbacher et al., Phys. Rev. A 90,
    # 013611 (2014) [journal references from memory]); the g^2 <sum delta> -> K route as a second check
    e_inf, k = fit_strong_coupling(backend, lambda g: Problem.create(2, 1, g), (400.0, 800.0, 1600.0, 3200.0))
    expected = 81 / (8 * math.sqrt(2 * math.pi))
    assert e_inf == pytest.approx(4.5, abs=1e-8)
    assert k == pytest.approx(expected, rel=1e-5)
    g = 3200.0
    assert g * g * backend.solve(Problem.create(2, 1, g), order=12).scalars["delta"] == pytest.approx(expected, rel=2e-3)


# ----------------------------------------------------------------------------- static-impurity limit


def busch_ground_level(lam: float) -> float:
    """Lowest even level e of -1/2 d^2/dy^2 + y^2/2 + lam delta(y): Gamma(3/4 - e/2)/Gamma(1/4 - e/2) = -lam/2
    (T. Busch et al., Found. Phys. 28, 549 (1998) [journal reference from memory]); mpmath root, 30 digits."""
    mpmath.mp.dps = 30

    def equation(e):
        return mpmath.gamma(mpmath.mpf(3) / 4 - e / 2) / mpmath.gamma(mpmath.mpf(1) / 4 - e / 2) + mpmath.mpf(lam) / 2

    low = -mpmath.mpf(lam) ** 2 / 2 - 2 if lam < 0 else mpmath.mpf("0.5") + mpmath.mpf(10) ** -20
    high = mpmath.mpf("0.5") - mpmath.mpf(10) ** -20 if lam < 0 else mpmath.mpf("1.5") - mpmath.mpf(10) ** -20
    return float(mpmath.findroot(equation, (low, high), solver="anderson"))


@pytest.mark.parametrize("g", [2.0, -1.0])
def test_infinitely_heavy_odd_particle(backend, g):
    # m_odd -> inf: the odd particle sits at the trap centre and the two fermions fill the lowest even
    # (Busch) and odd (3/2, untouched) levels of one particle in the trap with a static delta(x) of
    # strength g: E -> e0(g sqrt(m_pair)) + 3/2 + 1/2 (static-impurity limit, derived here). The recoil
    # correction is first order in m_pair/m_odd: the deviation must shrink tenfold per decade.
    limit = busch_ground_level(g) + 1.5 + 0.5
    deviations = [backend.solve(Problem.create(2, 1, g, mass_down=heavy), order=12).energies[0] - limit for heavy in (1e3, 1e4)]
    assert abs(deviations[1]) < 1e-4
    assert 8 < deviations[0] / deviations[1] < 12


# ----------------------------------------------------------------------------- self-consistency


@pytest.mark.parametrize("m_up, g", [(HEAVY, -3.0), (1.0, 2.0), (0.15, 5.0)])
def test_virial_and_hellmann_feynman_self_consistency(backend, m_up, g):
    # self-consistency on the backend's own outputs: virial theorem E = 2 <V_trap> + (g/2) <sum delta>
    # for a contact interaction in a harmonic trap (scaling argument, textbook), and <sum delta> = dE/dg
    # against a central difference of its own energies
    problem = Problem.create(2, 1, g, mass_up=m_up, states=2)
    result = backend.solve(problem, order=12)
    for k, suffix in enumerate(("", "@1")):
        virial = 2 * result.scalars["trap_energy" + suffix] + 0.5 * g * result.scalars["delta" + suffix]
        assert result.energies[k] == pytest.approx(virial, abs=1e-9)
    h = 1e-4
    energies = [backend.solve(Problem.create(2, 1, g + s * h, mass_up=m_up), order=12).energies[0] for s in (1, -1)]
    assert (energies[0] - energies[1]) / (2 * h) == pytest.approx(result.scalars["delta"], abs=1e-6)
    assert result.scalar_errors["delta"] < 1e-8


def test_mirror_problem_has_the_same_spectrum(backend):
    # 1+2 is 2+1 with the species' names exchanged (relabelling, exact)
    a = backend.solve(Problem.create(2, 1, 1.5, mass_up=2.0, states=4), order=12)
    b = backend.solve(Problem.create(1, 2, 1.5, mass_down=2.0, states=4), order=12)
    assert a.energies == pytest.approx(b.energies, abs=1e-12)
    assert [s["parity"] for s in a.states] == [s["parity"] for s in b.states]


def test_parity_sectors_and_centre_of_mass_tower(backend):
    problem = Problem.create(2, 1, -3.0, mass_up=HEAVY, states=3)
    both = backend.solve(problem, order=12)
    even = backend.solve(problem.with_targets(parity="even"), order=12)
    odd = backend.solve(problem.with_targets(parity="odd"), order=12)
    assert all(s["parity"] == 1 for s in even.states) and all(s["parity"] == -1 for s in odd.states)
    merged = sorted(even.energies + odd.energies)[:3]
    assert both.energies == pytest.approx(merged, abs=1e-11)
    # common omega: the bound trimer's COM excitations E0 + 1, E0 + 2 are levels (exact separation)
    assert both.energies == pytest.approx([both.energies[0] + n for n in range(3)], abs=1e-11)
    assert [s["com"] for s in both.states] == [0, 1, 2]


def test_error_bars_cover_a_finer_solution(backend):
    # a coarse ladder's bars must cover the change to a much finer discretization (honesty of the bars)
    problem = Problem.create(2, 1, -3.0, mass_up=HEAVY, states=3, parity="even")
    coarse = backend.solve(problem, order=8)
    fine = backend.solve(problem, order=16, radius=12.0)
    for e, bar, exact in zip(coarse.energies, coarse.energy_errors, fine.energies):
        assert abs(e - exact) <= bar
        assert e >= exact - 1e-11  # Galerkin levels are upper bounds
    assert max(coarse.energy_errors) > 1e-10  # the coarse ladder is not converged: the check has teeth


@pytest.mark.parametrize("m_up, g", [(1.0, 2.0), (0.15, 10.0), (2.0, -1.0)])
def test_density_error_bars_cover_a_finer_solution(backend, m_up, g):
    # the same honesty for the densities: an order-8 ladder's grid bars cover its distance to the default
    # (order 14) densities, whose own bars are tiny; measured: distances 1e-11 ... 2e-8, bars 8e-9 ... 6e-7
    problem = Problem.create(2, 1, g, mass_up=m_up, observables=["density"])
    coarse, fine = backend.solve(problem, order=8), backend.solve(problem)
    for name in ("density_up", "density_down"):
        distance = float(np.max(np.abs(coarse.observables[name].values - fine.observables[name].values)))
        assert distance <= coarse.observables[name].error
        assert fine.observables[name].error < 1e-9
    assert coarse.observables["density_up"].error > 1e-8  # not converged at order 8: the check has teeth


# ----------------------------------------------------------------------------- other methods


def test_agrees_with_oscillator_ed_within_its_error_bars(backend):
    problem = Problem.create(2, 1, 0.5, states=2)
    ours = backend.solve(problem)
    theirs = get("oscillator-ed").solve(problem)
    for k in range(2):
        assert abs(ours.energies[k] - theirs.energies[k]) <= 2 * theirs.energy_errors[k] + ours.energy_errors[k]


@pytest.mark.slow
def test_agrees_with_lattice_dmrg_on_the_heavy_light_trimer(backend):
    # lattice-dmrg on its three coarsest default spacings (74-117 sites, ~30 CPU s): -4.09637 +- 2.9e-3. Its full
    # default ladder (to 180 sites, ~80 CPU s) gives -4.09652 +- 1.2e-3; both bars cover the three-body value.
    problem = Problem.create(2, 1, -3.0, mass_up=HEAVY)
    ours = backend.solve(problem)
    theirs = get("lattice-dmrg").solve(problem, spacings=[0.15, 0.12, 0.095])
    assert theirs.energy_errors[0] < 5e-3  # a bar that still tells a bound trimer at -4.1 from the -2.47 of a failure
    assert abs(ours.energies[0] - theirs.energies[0]) <= 2 * theirs.energy_errors[0] + ours.energy_errors[0]


# ----------------------------------------------------------------------------- refusals


def test_refuses_what_it_cannot_do(backend):
    with pytest.raises(Unsupported, match="2\\+2"):
        backend.solve(Problem.create(2, 2, 1.0))
    with pytest.raises(Unsupported, match="frequenc"):
        backend.solve(Problem.create(2, 1, 1.0, omega_down=2.0))
    with pytest.raises(Unsupported, match="obdm"):
        backend.solve(Problem.create(2, 1, 1.0, observables=["obdm"]))
    with pytest.raises(Unsupported, match="momentum"):
        backend.solve(Problem.create(2, 1, 1.0, observables=["momentum"]))


def test_common_frequency_scales_the_spectrum(backend):
    # E(g, omega) = omega E(g / sqrt(omega), 1): units with the trap length of omega (exact rescaling)
    omega = 2.5
    scaled = backend.solve(Problem.create(2, 1, 1.3, omega_up=omega, omega_down=omega, mass_up=2.0), order=12)
    reference = backend.solve(Problem.create(2, 1, 1.3 / math.sqrt(omega), mass_up=2.0), order=12)
    assert scaled.energies[0] == pytest.approx(omega * reference.energies[0], rel=1e-12)
    assert scaled.scalars["delta"] == pytest.approx(math.sqrt(omega) * reference.scalars["delta"], rel=1e-10)
