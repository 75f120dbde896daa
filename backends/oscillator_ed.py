"""Backend ``oscillator-ed``: exact diagonalization in a harmonic-oscillator basis.

Method (configuration interaction / "exact diagonalization", common practice for few fermions in
a trap; e.g. Sowinski et al., Phys. Rev. A 88, 033607 (2013); Grining et al., New J. Phys. 17,
115001 (2015)). Species s uses oscillator orbitals phi_n(x; b_s): by default those of its own trap,
b_s = 1/sqrt(m_s omega_s), one-body energies omega_s (n + 1/2); where a heavy-heavy-light trimer can
bind (g < 0, a pair species heavier than its partner) or two pairs can (g < 0, two or more fermions of
each species), and for g > 0 up to four particles where two or more fermions are the heavier species,
narrower lengths chosen by minimizing the bare energy at a small cutoff (``basis_lengths``;
``oscillator_scaling``: the one-body term is then a pentadiagonal matrix, parity is still (-1)^n). The many-body basis is Slater determinants of each species:

- ``truncation = "energy"``: all determinant pairs whose non-interacting energy is <= E_0 + cutoff
  (cutoff in hbar omega_ref; counted as sum_s omega_s x quanta_s whatever the orbitals' length), the
  energy-restricted basis that converges far better per state;
- ``truncation = "orbital"``: N_s fermions in the lowest ``cutoff`` orbitals of each species.

Parity (x -> -x) is diagonal in this basis, (-1)^(sum of orbital indices), so each sector is a
sub-basis, solved separately. The contact term uses exact Gauss-Hermite matrix elements through the
factorized form g sum_q w_q rho_up(x_q) rho_down(x_q) (``problems.exact.contact_quadrature``,
``fock_ed.ProductHamiltonian``); nothing is summed on a grid.

Renormalized interaction (``renormalized = true``; Lindgren et al., New J. Phys. 16, 063003 (2014);
Rojo-Francas et al., Phys. Rev. A 105, 063326 (2022) [bibliographic detail from memory]): g is
replaced by g_eff(cutoff) such that the 1+1 problem in the same truncated basis has the exact 1+1
ground energy (Busch et al., the ``two-body`` backend's root). Needs equal trap frequencies.
<sum delta> is then reported as dE/dg = <delta>_trunc dg_eff/dg with dg_eff/dg from the 1+1 problem.

Interaction choice (``interaction``): 'bare' (g delta), 'renormalized' (the running g_eff above) or
'effective'; 'auto' (default) reads the older flag ``renormalized`` (true: running coupling), so earlier
parameter sets mean what they meant. The effective interaction (``effective_interaction``: Okubo /
Lee-Suzuki transformation of the exact two-body relative problem, built per centre-of-mass quantum N of
the pair, for any masses through generalized Talmi-Moshinsky brackets; Kvaal et al., Phys. Rev. B 76,
085421 (2007); Rotureau, Eur. Phys. J. D 67, 153 (2013); Brauneis et al., arXiv:2408.10052 (2024)) replaces
g delta by a pair tensor V_eff[a, b; c, d] applied through the engine's interaction factors.

Two-body cutoff: Lambda = cutoff (in quanta), the excitation the basis allows, so a pair with N
centre-of-mass quanta gets the relative space n <= cutoff - N and 1+1 is exact at every cutoff. A pair
can hold up to cutoff + N_up + N_down - 2 quanta when its spectators sit in their lowest orbitals; those
pair states above Lambda get no interaction. Measured alternatives (ground-state error at cutoff 24;
2+2 equal masses, g = 2, against 5.53938, the extrapolation of the ladders below; 2+1 against
``three-body``): Lambda = cutoff + N_up + N_down - 2 (every pair state covered) 2.6e-3 for 2+2
against 7.2e-4, about equal for 2+1 (1.1e-4 against 1.0e-4 at equal masses; -3.3e-4 against -6.1e-4
for mass ratio 20/3 at g = 2); Lambda = cutoff with the bare contact above it -3.7e-3 (2+2); Lambda =
cutoff + N_up + N_down 2.4e-3 (2+1, equal masses). Pairs whose spectators are excited see the same
V_eff (a two-body operator cannot know them): the remaining error is many-body.

Needs a common trap frequency, the energy truncation and the trap orbitals (``basis_lengths = 'auto'``
means them here); anything else is refused with the reason, and so is the regime where a
heavy-heavy-light trimer can bind (g < 0, a pair species heavier than its partner): the trap orbitals
cannot hold it (measured 2+1, mass ratio 20/3: -4.5e-3 off at cutoff 32 for g = -1; 1.76 off and
outside twice its bar at g = -3). <sum delta> = dE/dg = <dV_eff/dg> (Hellmann-Feynman in the truncated
space; dV_eff/dg by a central difference of the tensor, truncation error ~h^2, h = 1e-4 max(1, |g|)).
Densities and correlations are those of the truncated eigenvectors, not transformed back (their error
is not stated separately).

Measured ground-state error at single cutoffs c (``bench/benchmarks/bench_effective_interaction.py``,
one core; 2+1 against ``three-body``, 2+2 against 5.53938, the extrapolation of these ladders, known to
~2e-4; m = m_up/m_down, the pair's mass ratio; p fitted to |error| ~ c^-p over c = 20-32, for 2+2 from
the successive differences; '-' where the error changes sign; CPU s of the single solve at c = 32;
2+1 at m = 20/3, g = -1: bare and running in optimized orbitals, effective in the trap's, now refused):

    case         g   interaction   c = 16    c = 24    c = 32     p    CPU s
    2+1  m=1     2   bare         +9.5e-02  +7.6e-02  +6.5e-02  0.53    4.8
                     renormalized +8.8e-04  +4.4e-04  +2.8e-04  1.64    3.8
                     effective    +2.5e-04  +1.0e-04  +5.7e-05  2.08    6.2
    2+1  m=1    -1   bare         +6.1e-02  +5.1e-02  +4.5e-02  0.44    6.4
                     renormalized -4.7e-04  -2.3e-04  -1.4e-04  1.69    7.7
                     effective    -2.0e-04  -8.0e-05  -4.3e-05  2.20    5.5
    2+1  m=20/3  2   bare         +7.9e-02  +6.7e-02  +5.8e-02  0.47    4.8
                     renormalized -2.0e-03  +4.4e-04  +6.9e-04     -    5.5
                     effective    -4.5e-03  -6.1e-04  +1.7e-04     -    5.3
    2+1  m=20/3 -1   bare         +8.1e-02  +6.8e-02  +6.0e-02  0.44   11.6
                     renormalized -1.7e-04  +1.9e-05  +2.2e-05     -    9.1
                     effective    -2.2e-02  -9.4e-03  -4.5e-03  2.43    3.3
    2+2  m=1     2   bare         +1.9e-01  +1.5e-01  +1.3e-01  0.78   30.2
                     renormalized +3.8e-03  +1.9e-03  +1.1e-03  1.94   34.2
                     effective    +1.6e-03  +7.2e-04  +4.1e-04  2.11   39.7

(CPU s as measured then; since the engine assembles the effective interaction's factors a range at a time, 2+2's
whole four-cutoff ladder to c = 32 takes 7.3 CPU s, ``bench/benchmarks/bench_oscillator_results.md``.)

Up to version 14 the effective ladder used the running coupling's model (``cutoff_model``); on four-cutoff
ladders of the 2+1 rows above all 16 extrapolations lay within twice their bars (median bar 4x the true error);
with the default ladder on 2+1 over mass ratios 0.15-20/3 and g = -3 ... 20 (trimer regimes refused),
60/60 levels within twice their bars, median bar 6x the error, median ground-state error 1.3e-5
(running coupling on the same problems: 9.9e-5). Since version 15 it has its own, a series in c^(-1/2) that
starts at c^(-3/2) (``GuardedHalfPowerSeries``: the exact two-body spectrum removes the first two terms).
Single runs outside the table (no reference below 1e-3): 3+3, g = 2: effective 11.98223, 11.99183,
11.99220 at c = 12, 16, 20 (rising, then flat), running 12.00493, 12.00169, 11.99847 (falling); 2+2 with
m_up/m_down = 3/20, g = 2: effective 5.25369, 5.25782 at c = 16, 24, running 5.25607, 5.25906 (both
rising).
Two bound pairs in the trap's orbitals (2+2, equal masses, g = -3; running coupling; ``basis_lengths =
'trap'``, the default before version 4): the ground energy along c = 8, 12, ..., 36 is -2.10266, -2.03915,
-2.01879, -2.01222, -2.01045, -2.01045, -2.01111, -2.01200: it rises, then turns and falls slowly. A
ladder below c = 24 sees only the rise and extrapolates to -2.0094 +- 0.006, while lattice-dmrg gives
-2.0251 +- 0.0008 (2.6 of those bars away; the first excited level, -1.368 +- 0.15, extrapolates to
-1.048 from c = 24-36, against lattice-dmrg's -1.0251). Hence 'auto' now optimizes the lengths there
(``basis_lengths``): -2.0245 +- 0.013 and -1.0112 +- 0.040 by default. The report lists levels where two
method families exclude each other as dataset disagreements, and ``advise`` lowers its confidence there.

Convergence: ``ladder`` cutoffs (cutoff, cutoff - step, ...) run through the shared convergence
ladder (``backends/ladder.py``, which states how every error bar is formed): each level is followed
across them by (parity sector, rank in the sector) and, with >= 3 cutoffs, extrapolated with
``cutoff_model``: bare interaction E_inf + a c^-1/2 + b c^-1 (measured 1+1 error exponents:
0.50-0.53 in the energy cutoff for g = 0.5..10, 0.57 in the orbital cutoff n_max = 10-80);
renormalized interaction E_inf + A c^-p with p fitted (2+2, g = 2: p rises from 0.7 to 1.76 over
c = 8-32, then 1.67 at c = 36-44), its bar widened where the ladder is not yet asymptotic
(``GuardedPowerLaw``); effective interaction E_inf + a c^-3/2 + b c^-2 + d c^-5/2 on ladders from cutoff 24 up
(``GuardedHalfPowerSeries``, the power law elsewhere). The solver floor is the Lanczos tolerance. <V_trap> and dE/dg
are extrapolated with the energy's model, for the effective interaction with the power law (their exponents differ
from the energy's there; ``scalar_errors``); the kinetic energy and the contact derived from them carry the
propagated error bars.

Default ladders (version 10): largest cutoff 44 for three particles and 32 for four (28 and 24 before), step 4.
A sector's H is built as an explicit CSR matrix up to ``ASSEMBLE_LIMIT`` nonzeros (``fock_assembly``), whose
product costs a tenth of the matrix-free one on these bases (2+1 at cutoff 40: 1.9 against 17.6 ms); that
pays for the larger cutoffs. A ladder's bases are nested, so the largest cutoff's one-body part and contact are
assembled once per parity and each smaller cutoff takes their restriction (``NestedSectors``; same matrices to
rounding, measured 10-20 % less CPU per default solve on 2+1 ... 3+1). Measured on the 2+1 dataset grid with
three levels against ``three-body`` (30 problems, one core, another job on the second): median error of the 90
levels 3.3e-5 -> 5.9e-6; ground states within 1e-4 / 1e-5 / 1e-6: 29 / 20 / 8 of 30 (version 9: 25 / 10 / 3); CPU s
median 8.9, largest 20 (before the restriction above and the cheaper degeneracy check of ``fock_ed``).
Version 11 searches the orbital lengths at cutoff 12 instead of 8 where a heavy majority at least 4 times
heavier than its partner is repelled (``length_search_cutoff``); elsewhere it is version 10. On the same grid:
median error 5.5e-6, ground states within 1e-4 / 1e-5 / 1e-6: 29 / 23 / 9 of 30, all 90 levels within twice their
bars (median bar 7.6x the error); CPU s median 4.4, largest 11.1.
Version 12 raises the default largest cutoff to 28 for five particles and 24 for six (20 and 16 before: about a
second of CPU, and ground-state bars of 1e-2 to 1 at moderate g). Measured on the 3+2 and 3+3 dataset grids (mass
ratios 1, 2, 20/3 and, for 3+2, 1/2 and 3/20; g = -3 ... 20; three levels; other jobs on both cores): median
ground-state bar 2.7e-2 -> 4.6e-3 (3+2, 30 points; equal masses at g = 5: 0.85 -> 0.014) and 0.26 -> 0.034 (3+3, 18
points), wider at 3 of the 3+2 and 5 of the 3+3 points (3+3 at g = -3, where the ladder has not settled: equal
masses 0.047 -> 0.68); CPU s 5.5-12.7 (3+2, at most 483 MiB) and 5.0-9.7 (3+3, 453 MiB). Against lattice-dmrg's
continuum limits (30 3+2 ground states at g = -3 ... 20; 9 3+3 at g = -1, 0.5, 2) all but one lie within twice
their bar plus the reference's uncertainty, at most 1.8 bars off; the miss is 3+2 at mass ratio 3/20 (the heavy pair
in the minority), g = 20: 2.9 bars (``bench/benchmarks/bench_oscillator_results.md``). Version 13 widens the bar
of a ladder that turned around by the remainder of its last change (``GuardedPowerLaw``, fifth guard): that point
becomes 9.725707 +- 5.3e-3, 1.7 bars off; everything else is version 12.
Version 14 takes the effective interaction by default for 2+1 and 1+2 whose pair is not heavier than the third
particle (``effective_by_default``). On the 2+1 dataset grid (30 problems, three levels, against ``three-body``):
ground states within 1e-4 / 1e-5 / 1e-6: 29 / 23 / 9 -> 30 / 24 / 12 of 30; median ground-state bar 2.5e-5 ->
1.1e-5; all 90 levels within twice their bars, median bar 7.6x -> 5.6x the error (smallest 0.84); CPU s median
5.2, largest 9.4 (another job on the second core). Still beyond 1e-5: equal masses at g = 20 (1.2e-5), g = -3
with the pair light or equal (8.2e-5, 7.0e-5, 4.3e-5 for pair/third mass ratios 1, 1/2, 3/20), the pair
heavier at g = -3 (mass ratio 2: 4.7e-5) and at g = -1 (20/3: 3.5e-5).
Version 15 extrapolates the effective interaction's ladders with ``GuardedHalfPowerSeries`` instead of a fitted
single power, whose exponent still drifts at cutoffs 32-44 (local exponents along 12-64 at equal masses: 2.11 ->
2.32 at g = -3, 1.71 -> 1.67 at g = 20). On the 2+1 dataset grid (same 30 problems; the 12 with a heavier pair keep
the running coupling and are unchanged): median error of the 90 levels 4.3e-6 -> 1.5e-6, all 90 within twice their
bars (median bar 5.6x -> 9.6x the error, smallest 0.84 -> 1.15); median ground-state bar 1.1e-5 -> 7.5e-6; ground
states within 1e-5 / 1e-6: 24 / 12 -> 26 / 14 of 30 absolute, 25 / 19 -> 26 / 20 relative; the 1+2 mirror grid
the same to the digits shown; CPU s median 5.0, largest 8.5 (two sweeps on two cores). The light pair at g = -3
(pair/third 3/20) comes within 1e-5 (4.3e-5 -> -2.0e-6); g = -3 with the pair equal or at 1/2 moves from
8.2e-5 / 7.0e-5 to -2.9e-5 / -1.7e-5 and stays beyond it, as do the heavier pairs above (unchanged).
Version 16 widens two kinds of running-coupling bars (``GuardedPowerLaw``, sixth guard and ``top_factor``): a fitted
exponent of 2.2 or more gets at least the whole extrapolation, one at the top of the scan twice the total variation.
Measured on 2+1 with the pair heavier (mass ratios 2 to 28.8, 126 levels against ``three-body``): the 53Cr/6Li pair
at g = -1 was 2.6 bars off and is now 0.4; the 90 levels up to mass ratio 10 all lie within twice their bars. Beyond a
pair/partner mass ratio of 10 (``heavy_pair_beyond_measured``) the result carries a warning: at 15, g = 5, the first
excited level's ladder had just turned around at the default cutoffs and lay 2.9 bars off (1.2e-4; to cutoff 64 it
keeps falling, still 8.7e-5 above). The trap's orbitals, asked for where a heavy-heavy-light trimer can bind, are
refused with the running coupling on a ladder (``TRAP_ORBITALS_TRIMER_REFUSAL``).

Centre-of-mass copies (``com_copies``): with a common trap frequency, the energy truncation, the trap's
orbitals and a bare or running contact coupling, N_com commutes with the truncated Hamiltonian
(``com_separates_exactly``), so each level's <N_com> is an exact integer k (the ``com`` label). A level with
k >= 1 is its intrinsic parent plus k hbar omega, but at cutoff c its intrinsic part only has c - k quanta,
so its own ladder lags (2+1, cutoff 20: 5.6e-4 and 4.2e-4 off against ``three-body`` where the parent
plus 1 is 2.9e-5 and 7.3e-5 off). Such a level is reported as the parent's limit plus k with the parent's
bar (where that bar is the smaller and the order of the levels holds); its own ladder value stays in
``diagnostics['com_copies']``. Measured on the N = 4 dataset grid (defaults, version 8): 23 of 144 levels
are replaced this way (``bench/benchmarks/bench_oscillator_results.md``).

Scalars (``result.SCALAR_NAMES``) and observables (``result.OBSERVABLE_NAMES``) are computed from
the largest cutoff's eigenvectors for the ``observable_states`` lowest states (suffix @k for k > 0);
momenta use phi~_n(p) = (-i)^n phi_n(p; 1/b_s), normalized to int n_s(p) dp = N_s. Each grid's
``error`` is its largest change from the cutoff before, turned into a remainder by the two-cutoff rule
(``ladder.grid_error``). Measured on 2+1 against ``three-body`` densities (mass ratios 0.15-20/3): the
density error falls like c^-1.5 ... c^-1.9, faster than the c^-2/3 the rule assumes, so the bars are
wide (numbers in tests/test_oscillator_ed.py). At four to six particles, against lattice-dmrg's densities
extrapolated to the continuum (2+2, 3+1, 3+2, 3+3; masses 1, 2, 20/3; g = -2 ... 5; defaults; the lattice's spacings
0.7 times its defaults where its bar was not yet a tenth of this one): 16 of 16 densities within one bar, median bar
3.2 times the deviation (``bench/benchmarks/bench_density_bars.py``, bench_oscillator_results.md). The Gaussian
tails of a finite oscillator basis cannot show the C/k^4 contact tail: the ``contact`` scalar comes
from <sum delta> instead. The virial residual E - 2<V_trap> - (g/2) <sum delta> (virial theorem, from
scaling x -> s x) is in ``diagnostics``; it vanishes as the basis converges.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import lru_cache
from typing import Any

import numpy as np
import scipy.sparse as sp

from ..problems.errors import SpecError
from ..problems.spec import Problem
from . import fock_ed
from . import oscillator_scaling as scaling
from ..problems import exact as ob
from .base import Backend, Capabilities, Parameter, SolverError, Support
from .extrapolation import DriftingPowerLaw, Extrapolation, PolynomialModel
from .ladder import Rung, RungLevel, grid_error, last_change_bar, rank_keys, run_ladder
from .result import Observable, Solution

COM_TOLERANCE = 1e-3  # <N_com> within this of an integer labels the centre-of-mass excitation
SCALAR_ERROR_FLOOR = 1e-8  # relative; see the ladder call in _compute
# nonzeros up to which a sector's H is an explicit CSR matrix (~0.5 GiB while it is built): on 2+1 a product
# then costs about a tenth of the matrix-free one (bench/benchmarks/bench_assembly.py)
ASSEMBLE_LIMIT = 2e7
# basis lengths are chosen at this cutoff: the bare optimum keeps shrinking with the cutoff (it fits the
# cusp), and lengths found at 8 gave a monotonic renormalized ladder for the 20/3 trimer where those
# found at 16 made the energy turn around
LENGTH_SEARCH_CUTOFF = 8
# ... except where a heavy majority at least this many times heavier than its partner is repelled: there lengths
# found at 12 hold the light particle's narrower distribution better (``length_search_cutoff``)
REPELLED_SEARCH_CUTOFF = 12
REPELLED_SEARCH_MASS_RATIO = 4.0


# ----------------------------------------------------------------------------- basis


@dataclass(frozen=True)
class Truncation:
    kind: str  # "energy" or "orbital"
    cutoff: int


@dataclass
class SectorBasis:
    basis: fock_ed.ProductBasis
    n_orbitals: tuple[int, int]
    lengths: tuple[float, float]  # oscillator length of each species' orbitals (oscillator_scaling)
    max_degree: int | None = None  # largest a + b + c + d of a matrix element inside the basis


def orbital_counts(problem: Problem, truncation: Truncation) -> tuple[int, int]:
    """Orbitals per species: the cutoff itself, or every orbital reachable within the energy cutoff."""
    if truncation.kind == "orbital":
        return truncation.cutoff, truncation.cutoff
    return tuple(s.count + int(math.floor(truncation.cutoff / s.omega + 1e-9)) for s in problem.species)


def _species_space(count: int, n_orbitals: int, omega: float, max_excitation: float | None):
    """Configurations sorted by (energy, parity), their energies and parities."""
    occ = fock_ed.all_configurations(n_orbitals, count)
    quanta = occ.sum(axis=1)
    energy = omega * (quanta + count / 2)
    if max_excitation is not None:
        keep = energy - energy.min() <= max_excitation + 1e-9
        occ, quanta, energy = occ[keep], quanta[keep], energy[keep]
    parity = 1 - 2 * (quanta % 2)
    order = np.lexsort((-parity, energy))
    return fock_ed.FockSpace(n_orbitals, count, occ[order]), energy[order], parity[order]


def trap_lengths(problem: Problem) -> tuple[float, float]:
    return problem.up.oscillator_length, problem.down.oscillator_length


def sector_basis(
    problem: Problem, truncation: Truncation, parity: int, lengths: tuple[float, float] | None = None
) -> SectorBasis:
    """The truncated basis of total parity ``parity`` as rectangles of the padded coefficient matrix.

    A configuration's truncation energy is sum_s omega_s (quanta_s + N_s/2) with the trap frequencies,
    whatever the orbitals' ``lengths`` (default: the trap lengths): the cutoff counts quanta.
    Up configurations are grouped by (energy, parity); down configurations are sorted by parity,
    then energy, so each group's allowed partners are a contiguous prefix of one parity class.
    """
    m_u, m_d = orbital_counts(problem, truncation)
    limit = truncation.cutoff if truncation.kind == "energy" else None
    up, e_u, p_u = _species_space(problem.up.count, m_u, problem.up.omega, limit)
    down0, e_d0, p_d0 = _species_space(problem.down.count, m_d, problem.down.omega, limit)
    order = np.lexsort((e_d0, -p_d0))
    down = fock_ed.FockSpace(m_d, problem.down.count, down0.occupied[order])
    e_d, p_d = e_d0[order], p_d0[order]
    e0 = e_u.min() + e_d.min()
    rects = []
    start = 0
    keys = list(zip(e_u.tolist(), p_u.tolist()))
    while start < len(keys):
        stop = start
        while stop < len(keys) and keys[stop] == keys[start]:
            stop += 1
        energy, p_up = keys[start]
        cls = np.nonzero(p_d == parity * p_up)[0]
        if len(cls):
            if limit is None:
                count = len(cls)
            else:
                count = int(np.sum(e_d[cls] <= e0 + limit - energy + 1e-9))
            rects.append((start, stop, cls[0], cls[0] + count))
        start = stop
    max_degree = None
    if limit is not None:
        # a hop b -> a of up and d -> c of down between two kept determinants has b + d and a + c
        # each <= N_up + N_down - 2 + (quanta affordable within the cutoff): the contact quadrature
        # needs only that polynomial degree, about half of what all orbital pairs would need
        quanta = int(math.floor(limit / min(problem.up.omega, problem.down.omega) + 1e-9))
        max_degree = 2 * (problem.up.count + problem.down.count - 2 + quanta)
    rect_array = np.array(rects, dtype=np.int64).reshape(-1, 4)
    lengths = trap_lengths(problem) if lengths is None else tuple(lengths)
    return SectorBasis(fock_ed.ProductBasis(up, down, rect_array), (m_u, m_d), lengths, max_degree)


def hamiltonian(
    problem: Problem,
    sector: SectorBasis,
    g: float,
    factors: fock_ed.InteractionFactors | None = None,
    assemble_limit: float = 0,
) -> fock_ed.ProductHamiltonian:
    """H = sum_s sum_ab (h_s)_ab c+_a c_b + g sum_q w_q rho_up(x_q) rho_down(x_q) on ``sector``;
    h_s = omega_s (n + 1/2) in the trap's orbitals, ``oscillator_scaling.one_body_matrix`` otherwise.
    With ``factors`` (an effective interaction tensor, ``effective_factors``) the interaction is
    g sum_k O_up(A_k) O_down(B_k) instead of the contact. ``assemble_limit``: nonzeros up to which H is
    built as an explicit CSR matrix (``fock_ed.ProductHamiltonian``; 0: always matrix-free)."""
    m_u, m_d = sector.n_orbitals
    (b_u, b_d) = sector.lengths
    return fock_ed.ProductHamiltonian(
        sector.basis, one_body_matrix(problem.up, m_u, b_u), one_body_matrix(problem.down, m_d, b_d), g,
        contact_factorization(sector) if factors is None else factors, assemble_limit=assemble_limit,
    )


def contact_factorization(sector: SectorBasis) -> fock_ed.ContactFactorization:
    """delta(x_up - x_down) = sum_q w_q rho_up(x_q) rho_down(x_q) on the sector's orbitals: Gauss-Hermite
    points exact up to the polynomial degree the sector's hops need (``sector.max_degree``)."""
    m_u, m_d = sector.n_orbitals
    (b_u, b_d) = sector.lengths
    quad = ob.contact_quadrature(m_u, b_u, m_d, b_d, sector.max_degree)
    return fock_ed.ContactFactorization(
        quad.points, quad.weights, quad.values_up, quad.values_down, ob.orbital_parities(m_u), ob.orbital_parities(m_d)
    )


class NestedSectors:
    """The one-body part and the contact (at g = 1) of a ladder's largest cutoff, per parity, as explicit CSR
    matrices, restricted to each smaller cutoff's basis.

    A ladder's bases are nested (energy or orbital truncation, one set of orbital lengths) and neither the
    orbitals nor the exact contact elements depend on the cutoff, so H(c) = H_1|c + g_used(c) V|c: one
    assembly per parity instead of one per cutoff (built on first use; a parity whose largest sector exceeds
    ``limit`` nonzeros is left to the per-cutoff path, matrix-free there).
    """

    def __init__(self, problem: Problem, truncation: Truncation, lengths, limit: float):
        self.problem, self.truncation, self.lengths, self.limit = problem, truncation, lengths, limit
        self._parts: dict[int, tuple | None] = {}

    def _largest(self, parity: int):
        if parity not in self._parts:
            sector = sector_basis(self.problem, self.truncation, parity, self.lengths)
            parts = None
            if sector.basis.dim:
                m_u, m_d = sector.n_orbitals
                factors = contact_factorization(sector)
                contact = fock_ed.ProductHamiltonian(
                    sector.basis, np.zeros((m_u, m_u)), np.zeros((m_d, m_d)), 1.0, factors, assemble_limit=self.limit,
                ).matrix
                if contact is not None:
                    parts = (sector, hamiltonian(self.problem, sector, 0.0, factors).one_body_matrix(), contact)
            self._parts[parity] = parts
        return self._parts[parity]

    def restricted(self, sector: SectorBasis, parity: int) -> tuple[sp.csr_matrix, sp.csr_matrix] | None:
        """(H_1, V) on ``sector`` (a basis of this ladder at a cutoff <= its largest), or None."""
        parts = self._largest(parity)
        if parts is None:
            return None
        largest, one_body, contact = parts
        positions = sector.basis.positions_in(largest.basis)
        return one_body[positions][:, positions], contact[positions][:, positions]


def one_body_matrix(species, n_orbitals: int, length: float) -> np.ndarray:
    """h of one species in orbitals of ``length``: exactly diagonal when that is the trap length."""
    if math.isclose(length, species.oscillator_length, rel_tol=1e-14):
        return np.diag(ob.oscillator_energies(n_orbitals, species.omega))
    return scaling.one_body_matrix(n_orbitals, species.mass, species.omega, length)


def trap_potential_matrix(species, n_orbitals: int, length: float) -> np.ndarray:
    """<a| m omega^2 x^2/2 |b> of one species in orbitals of ``length``."""
    return scaling.trap_potential_matrix(n_orbitals, species.mass, species.omega, length)


# ----------------------------------------------------------------------------- renormalization


def exact_pair_energy(g: float, reduced_mass: float, omega: float) -> float:
    """Ground energy of 1+1 (Busch et al.): omega (1/2 + e_0(lambda)), lambda = g sqrt(mu/omega)."""
    from ..problems.exact.busch import even_relative_level

    return omega * (0.5 + even_relative_level(g * math.sqrt(reduced_mass / omega), 0))


@lru_cache(maxsize=64)
def _pair_matrices(mass_up: float, mass_down: float, omega: float, kind: str, cutoff: int, lengths: tuple[float, float]):
    """Dense H0 and V = delta(x_up - x_down) of 1+1 in the even sector of the truncated basis.

    With one particle per species a configuration is one orbital, so V[(a, c), (b, d)] =
    sum_q w_q u_a u_b v_c v_d is a single Gram product over the quadrature points, and
    H0[(a, c), (b, d)] = h_up[a, b] delta_cd + delta_ab h_down[c, d].
    """
    pair = Problem.create(1, 1, 0.0, mass_up=mass_up, mass_down=mass_down, omega_up=omega, omega_down=omega)
    sector = sector_basis(pair, Truncation(kind, cutoff), +1, lengths)
    m_u, m_d = sector.n_orbitals
    quad = ob.contact_quadrature(m_u, lengths[0], m_d, lengths[1])
    a = sector.basis.up.occupied[sector.basis.up_index, 0]
    c = sector.basis.down.occupied[sector.basis.down_index, 0]
    rows = quad.values_up[:, a] * quad.values_down[:, c]  # (points, basis)
    v = rows.T @ (quad.weights[:, None] * rows)
    h_up = one_body_matrix(pair.up, m_u, lengths[0])
    h_down = one_body_matrix(pair.down, m_d, lengths[1])
    h0 = h_up[np.ix_(a, a)] * (c[:, None] == c[None, :]) + h_down[np.ix_(c, c)] * (a[:, None] == a[None, :])
    return h0, 0.5 * (v + v.T)


def effective_coupling(
    problem: Problem, truncation: Truncation, g: float, lengths: tuple[float, float] | None = None
) -> tuple[float, float]:
    """g_eff with E_trunc(1+1; g_eff) = E_exact(1+1; g), and dg_eff/dg.

    Safeguarded Newton iteration with dE_trunc/dg_eff = <V> (Hellmann-Feynman) inside the bracket
    [0, g] (g > 0) or [g_lo, g] (g < 0): the truncated energy is variational, E_trunc(g) >= E_exact(g),
    and increases monotonically with g_eff. dg_eff/dg = (dE_exact/dg) / <V>_trunc.
    """
    if g == 0.0:
        return 0.0, 1.0
    from scipy.linalg import eigh

    omega, mu = problem.up.omega, problem.reduced_mass()
    lengths = trap_lengths(problem) if lengths is None else tuple(lengths)
    h0, v = _pair_matrices(problem.up.mass, problem.down.mass, omega, truncation.kind, truncation.cutoff, lengths)
    target = exact_pair_energy(g, mu, omega)

    def evaluate(x: float) -> tuple[float, float]:
        values, vectors = eigh(h0 + x * v, subset_by_index=[0, 0])
        return values[0] - target, float(vectors[:, 0] @ v @ vectors[:, 0])

    if g > 0:
        lo, hi = 0.0, g
    else:
        lo, hi = 2 * g, g
        while evaluate(lo)[0] > 0:
            lo *= 2
            if lo < -1e6:
                raise SolverError("oscillator-ed: no effective coupling reproduces the two-body energy")
    x = 0.5 * (lo + hi)
    for _ in range(100):
        f, slope = evaluate(x)
        if f > 0:
            hi = x
        else:
            lo = x
        step = f / slope if slope > 0 else 0.0
        new = x - step
        if not (lo < new < hi):
            new = 0.5 * (lo + hi)
        if abs(new - x) <= 1e-14 * max(1.0, abs(x)) or hi - lo <= 1e-14 * max(1.0, abs(x)):
            x = new
            break
        x = new
    f, slope = evaluate(x)
    if abs(f) > 1e-11 * max(1.0, abs(target)):
        raise SolverError(f"oscillator-ed: effective coupling did not converge (residual {f:.2e})")
    step = 1e-4 * max(1.0, abs(g))
    exact_slope = (exact_pair_energy(g + step, mu, omega) - exact_pair_energy(g - step, mu, omega)) / (2 * step)
    return float(x), exact_slope / slope


# ----------------------------------------------------------------------------- effective interaction

EFFECTIVE_DERIVATIVE_STEP = 1e-4  # relative step of the central difference dV_eff/dg (see effective_derivative_factors)


def effective_refusal(problem: Problem, kind: str, length_choice: str) -> str | None:
    """Why the centre-of-mass-aware effective interaction cannot be built here, or None.

    It needs one trap frequency (the centre of mass separates), the energy truncation (a pair's quanta
    are then bounded, so its relative space per centre-of-mass quantum is defined) and each species in
    its natural orbitals b_s = 1/sqrt(m_s omega) (the Talmi-Moshinsky rotation holds only there). Where a
    heavy-heavy-light trimer can bind (``heavy_light_trimer_possible``) those orbitals fail: refused.
    """
    if not problem.equal_frequencies:
        return "the effective interaction needs equal trap frequencies (omega_up = omega_down)"
    if kind != "energy":
        return "the effective interaction needs truncation = 'energy' (pair quanta bounded per centre-of-mass quantum)"
    if length_choice == "optimize":
        return "the effective interaction needs each species' trap orbitals: use basis_lengths = 'trap' or 'auto'"
    if heavy_light_trimer_possible(problem):
        return (
            "a heavy-heavy-light trimer may bind here and the effective interaction needs the trap orbitals, which"
            " cannot hold it (2+1, mass ratio 20/3, g = -3: 1.76 off with a bar of 0.73); use interaction ="
            " 'renormalized' with basis_lengths = 'auto'"
        )
    return None


def effective_by_default(problem: Problem, kind: str, length_choice: str) -> bool:
    """Whether 'auto' takes the effective interaction: 2+1 or 1+2 whose pair is not heavier than the third
    particle (no ``heavy_pair_present``), where the effective interaction can be built (``effective_refusal``).

    Measured with the default ladder (cutoffs 32-44), three levels, against ``three-body`` on the 18 dataset
    problems with such a pair (pair/third mass ratios 1, 1/2, 3/20; g = -3 ... 20; 2026-12-05): the effective
    interaction's ground-state bar is narrower than the running coupling's at all 18 (median 3.5e-6 against
    1.8e-5), its error smaller at 16 (equal masses, g = 5: 1.5e-5 -> 7.4e-6; 3/20, g = 20: 1.2e-5 -> 2.1e-6; 3/20,
    g = -3: 1.1e-4 -> 4.3e-5) and larger at two g = -3 points, where both lie within their bars (equal masses
    2.0e-6 -> 8.2e-5 with bars 6.0e-4 and 2.2e-4; 1/2: 2.0e-5 -> 7.0e-5, bars 4.6e-4 and 1.4e-4); all 54 of its
    levels lie within twice their bars. Where the pair is heavier the running coupling in orbitals of optimized
    length stays far ahead (20/3, g = 2: 2.3e-6 against 2.3e-4 in the trap orbitals the effective interaction
    needs). Cost: about 1.6 times the running coupling's (side by side, pair/third mass ratios 1 at g = 2, 3/20 at
    g = 20 and 1/2 at g = -3: 7.2-8.3 against 4.0-5.9 CPU s, another job on the second core).
    """
    counts = sorted((problem.up.count, problem.down.count))
    if counts != [1, 2] or heavy_pair_present(problem):
        return False
    return effective_refusal(problem, kind, length_choice) is None


@lru_cache(maxsize=4)
def _effective_tensor(g, mass_up, mass_down, omega, pair_quanta, n_up, n_down) -> np.ndarray:
    """V_eff[a, b; c, d] on the trap orbitals; a common omega scales as E(g, omega) = omega E(g / sqrt(omega), 1)."""
    from .effective_interaction import pair_interaction_tensor

    try:
        tensor = omega * pair_interaction_tensor(g / math.sqrt(omega), mass_up, mass_down, pair_quanta, n_up, n_down)
    except ArithmeticError as failure:
        raise SolverError(f"oscillator-ed: the effective interaction could not be built ({failure})") from None
    tensor.setflags(write=False)  # shared through the cache
    return tensor


@lru_cache(maxsize=8)
def _effective_tensor_factors(g, mass_up, mass_down, omega, pair_quanta, n_up, n_down, hop_species):
    """V_eff as engine factors, single hops on ``hop_species``."""
    tensor = _effective_tensor(g, mass_up, mass_down, omega, pair_quanta, n_up, n_down)
    return fock_ed.InteractionFactors.single_hops(tensor, species=hop_species)


@lru_cache(maxsize=4)
def _effective_derivative_tensor_factors(g, step, mass_up, mass_down, omega, pair_quanta, n_up, n_down, hop_species):
    """(V_eff(g + step) - V_eff(g - step)) / (2 step) as engine factors: the difference is taken on the tensor, so
    the derivative has as many factors as V_eff itself."""
    args = (mass_up, mass_down, omega, pair_quanta, n_up, n_down)
    tensor = (_effective_tensor(g + step, *args) - _effective_tensor(g - step, *args)) / (2 * step)
    return fock_ed.InteractionFactors.single_hops(tensor, species=hop_species)


def _effective_setting(problem: Problem, truncation: Truncation) -> tuple:
    """What V_eff's factors on ``truncation`` depend on besides g, in the cached builders' order: the masses,
    omega, the pair cutoff Lambda = the many-body cutoff in quanta (see the module docstring for the choice),
    the orbitals per species and ``hop_species``."""
    m_u, m_d = orbital_counts(problem, truncation)
    quanta = int(math.floor(truncation.cutoff / problem.up.omega + 1e-9))
    return problem.up.mass, problem.down.mass, problem.up.omega, quanta, m_u, m_d, hop_species(problem, m_u, m_d)


def effective_factors(problem: Problem, truncation: Truncation, g: float) -> fock_ed.InteractionFactors:
    """V_eff(g) (``effective_interaction``) as engine factors on the trap orbitals of ``truncation``."""
    return _effective_tensor_factors(float(g), *_effective_setting(problem, truncation))


def hop_species(problem: Problem, m_u: int, m_d: int) -> str:
    """The species whose single hops carry V_eff's factors: the one with more configurations in m_s orbitals
    (the assembly's outer species), whose operators are then sparse. Measured on 1+2 with the heavy particle
    alone (mass ratio 20/3, g = 5, defaults): hops on the single particle's 45 configurations, dense operators on
    the pair's 1035, took 46 s; the other way round, as for the mirrored 2+1, a few seconds."""
    return "down" if math.comb(m_d, problem.down.count) > math.comb(m_u, problem.up.count) else "up"


def effective_derivative_factors(problem: Problem, truncation: Truncation, g: float) -> fock_ed.InteractionFactors:
    """dV_eff/dg as the central difference (V_eff(g + h) - V_eff(g - h)) / 2h, h = 1e-4 max(1, |g|):
    truncation error ~ h^2 |V'''| / 6 (relative ~1e-9 for V_eff smooth on the scale of g), rounding
    ~ 1e-16 / h ~ 1e-12. The difference is taken on the pair tensor before it is factorized: as many factors
    as V_eff has, not twice as many."""
    step = EFFECTIVE_DERIVATIVE_STEP * max(1.0, abs(g))
    return _effective_derivative_tensor_factors(float(g), step, *_effective_setting(problem, truncation))


# ----------------------------------------------------------------------------- one cutoff


@dataclass
class Level:
    """One eigenstate at one cutoff; ``contact``: <psi| sum delta |psi> in the truncated basis when the solve
    had the contact's matrix at hand (else None: computed on request)."""

    energy: float
    parity: int
    vector: np.ndarray
    sector: SectorBasis
    contact: float | None = None


def solve_cutoff(
    problem: Problem,
    truncation: Truncation,
    g_used: float,
    k: int,
    parities,
    tol: float,
    lengths=None,
    factors=None,
    nested: NestedSectors | None = None,
):
    """The k lowest levels in each requested parity sector, merged and sorted (interaction: the contact
    g_used delta, or g_used times the two-body operator ``factors``). ``nested``: the ladder's matrices
    (``NestedSectors``, contact interaction only), restricted to this cutoff where they exist.

    (Seeding Lanczos with the previous cutoff's eigenvector was tried: no fewer matvecs for k >= 3.)
    """
    levels = []
    diagnostics = {"dimension": {}, "matvecs": {}}
    for parity in parities:
        sector = sector_basis(problem, truncation, parity, lengths)
        if sector.basis.dim == 0:
            continue
        parts = nested.restricted(sector, parity) if nested is not None and factors is None else None
        if parts is None:
            ham = hamiltonian(problem, sector, g_used, factors, ASSEMBLE_LIMIT)
        else:
            ham = fock_ed.MatrixOperator((parts[0] + g_used * parts[1]).tocsr())
        values, vectors = fock_ed.lowest_eigenpairs(ham.as_linear_operator(), min(k, sector.basis.dim), tol=tol)
        diagnostics["dimension"][parity] = sector.basis.dim
        diagnostics["matvecs"][parity] = ham.matvec_count
        for i, e in enumerate(values):
            contact = None if parts is None else float(vectors[:, i] @ (parts[1] @ vectors[:, i]))
            levels.append(Level(float(e), parity, vectors[:, i], sector, contact))
    levels.sort(key=lambda lv: lv.energy)
    return levels, diagnostics


def com_quanta(problem: Problem, level: Level) -> float | None:
    """<N_com> = || b_com psi ||^2 with b_com = sum_s sqrt(m_s/M) sum_ab (a_t,s)_ab c+_{s,a} c_{s,b}.

    With a common trap frequency the centre of mass separates (any masses) and every eigenstate of a
    non-degenerate level has an integer <N_com>. In the trap's orbitals a_t lowers (sqrt(n) below the
    diagonal) and stays inside both truncations; in scaled orbitals it also raises
    (``oscillator_scaling.trap_lowering_matrix``) and the part leaving the basis is lost, so <N_com> is
    then only near an integer as the basis converges (the label needs COM_TOLERANCE).
    """
    if not problem.equal_frequencies:
        return None
    basis = level.sector.basis
    total = problem.up.mass * problem.up.count + problem.down.mass * problem.down.count
    m_u, m_d = level.sector.n_orbitals
    lower = []
    for space, m, species, length in zip((basis.up, basis.down), (m_u, m_d), problem.species, level.sector.lengths):
        a = scaling.trap_lowering_matrix(m, species.oscillator_length, length)
        lower.append(math.sqrt(species.mass / total) * space.one_body(a))
    psi = basis.to_matrix(level.vector)
    # the lowered state in the padded product space (all of it inside the basis in the trap's orbitals)
    lowered = lower[0] @ psi + (lower[1] @ psi.T).T
    return float(np.sum(lowered**2))


def com_label(problem: Problem, level: Level) -> int | None:
    """The centre-of-mass quantum k of a level when <N_com> is within ``COM_TOLERANCE`` of an integer, else None."""
    n_com = com_quanta(problem, level)
    return int(round(n_com)) if n_com is not None and abs(n_com - round(n_com)) < COM_TOLERANCE else None


def com_separates_exactly(problem: Problem, kind: str, interaction: str, lengths) -> bool:
    """Whether N_com commutes with the truncated Hamiltonian, so centre-of-mass labels are exact.

    With a common trap frequency H = omega N_com + H_rel for any masses, and a contact interaction (bare or
    with a running g) depends on relative coordinates only. The energy truncation (total quanta <= Q) is a
    function of the total quanta, which N_com preserves, and in the trap's orbitals the centre-of-mass
    lowering operator stays inside it (``com_quanta``): N_com then commutes with the truncated H. Not so for
    the orbital truncation (raising leaves it), scaled orbitals, or the effective interaction (it depends on
    each pair's own centre-of-mass quantum, which the total centre-of-mass operators mix with the spectators').
    """
    return (problem.equal_frequencies and kind == "energy" and interaction in ("bare", "renormalized")
            and tuple(lengths) == tuple(trap_lengths(problem)))


def com_copies(energies, errors, states, steady=None) -> tuple[list[float], list[float], list[dict]]:
    """Reported levels that are centre-of-mass excitations of a reported intrinsic level, from that level.

    A state with <N_com> = k >= 1 is the intrinsic state of energy E - k with k centre-of-mass quanta (exact
    separation, ``com_separates_exactly``). In the energy-truncated basis at cutoff c its intrinsic part only
    has the quanta up to c - k, so its ladder converges more slowly than its parent's (the com = 0 level of
    parity (-1)^k times its own whose limit lies within the two bars of E - k; the nearest if several). Where
    the parent's bar is the smaller, the copy is given E_parent + k and the parent's bar, unless that would
    change the order of the reported levels, and only where ``steady[i]``: the ladder followed a level with
    the same k on every cutoff (levels are followed by their rank in a parity sector). The last reported level
    is never moved up: a level the ladder did not report may lie below the new value (3+1, g = 40, cutoffs
    10-14: the ground state's copy extrapolated to 7.99 +- 0.94 and was reported fourth; moved to its parent's
    8.837 it would have hidden the fourth spin-chain level near 8.0). Returns the energies, the bars and one
    record per replacement.
    """
    energies, errors = list(energies), list(errors)
    records = []
    for i, state in enumerate(states):
        k = state.get("com")
        if not k or (steady is not None and not steady[i]):
            continue
        parents = [j for j, parent in enumerate(states) if parent.get("com") == 0
                   and parent.get("parity") == state.get("parity") * (-1) ** k
                   and abs(energies[j] + k - energies[i]) <= errors[i] + errors[j]]
        if not parents:
            continue
        j = min(parents, key=lambda j: abs(energies[j] + k - energies[i]))
        value = energies[j] + k
        lower = energies[i - 1] if i > 0 else -math.inf
        upper = energies[i + 1] if i + 1 < len(energies) else energies[i]
        if errors[j] >= errors[i] or not lower <= value <= upper:
            continue
        records.append({"state": i, "com": k, "parent": j, "ladder_energy": energies[i], "ladder_error": errors[i]})
        energies[i], errors[i] = value, errors[j]
    return energies, errors, records


def heavy_pair_present(problem: Problem, ratio: float = 1.0) -> bool:
    """A species of at least two fermions is more than ``ratio`` times heavier than the other (occupied) species."""
    up, down = problem.up, problem.down
    return (up.count >= 2 and down.count >= 1 and up.mass > ratio * down.mass) or (
        down.count >= 2 and up.count >= 1 and down.mass > ratio * up.mass
    )


def heavy_light_trimer_possible(problem: Problem) -> bool:
    """g < 0 and a species of at least two fermions is heavier than the other (occupied) species."""
    return problem.coupling < 0 and heavy_pair_present(problem)


# The trap orbitals where a heavy-heavy-light trimer can bind, running coupling, default ladder (2+1 at pair/third mass
# ratios 2, 4, 20/3, 8.83, 10 and g = -3, -2, -1, -0.5, three levels, against three-body; 2026-12-05): at g = -3
# excited levels lay 4.9 (mass ratio 2), 13.8 (8.83) and 5.0 (10) bars off -- their ladders move away from the
# limit at every reachable cutoff, which no ladder rule can see; 'auto' (optimized lengths) covers them.
TRAP_ORBITALS_TRIMER_REFUSAL = (
    "a heavy-heavy-light trimer may bind here and the trap orbitals cannot hold it: with the running coupling their"
    " ladders move away from the limit (2+1, mass ratio 8.83, g = -3: an excited level 13.8 error bars off); use"
    " basis_lengths = 'auto' (or ladder = 1 for a single cutoff without error bar)"
)

HEAVY_PAIR_MEASURED_RATIO = 10.0  # the largest pair/partner mass ratio at which the bars were measured (version 16)


def heavy_pair_beyond_measured(problem: Problem) -> bool:
    """A species of at least two fermions more than ``HEAVY_PAIR_MEASURED_RATIO`` times heavier than its partner: the
    error bars there are not verified (2+1 at 15, g = 5: a turned-around excited level 2.9 bars off; see
    ``GuardedPowerLaw``)."""
    return heavy_pair_present(problem, HEAVY_PAIR_MEASURED_RATIO)


def heavy_majority_repels(problem: Problem) -> bool:
    """g > 0, at most four particles, and a species of at least two fermions heavier than the other (occupied)
    species: the case where orbitals of optimized lengths were measured better than the trap's
    (``basis_lengths``)."""
    return problem.coupling > 0 and heavy_pair_present(problem) and problem.n_particles <= 4


def two_pairs_can_bind(problem: Problem) -> bool:
    """g < 0 with at least two fermions of each species: two or more pairs can bind at once."""
    return problem.coupling < 0 and problem.up.count >= 2 and problem.down.count >= 2


def length_search_cutoff(problem: Problem) -> int:
    """The cutoff at which 'auto' searches the orbitals' lengths: 12 where a heavy majority at least 4 times heavier
    than its partner is repelled (``heavy_majority_repels``), else 8.

    Measured with defaults, three levels each, against ``three-body`` on 2+1 with the pair heavier (searches at 8
    and at 12 side by side, 2026-12-04): at mass ratios 4, 5, 20/3 and 10, g = 0.5, 2, 5, 20, the search at 12
    lowered most errors (ground states, 20/3: 1.3e-6 / 1.3e-5 / 2.5e-5 / 3.3e-5 -> 2.4e-7 / 2.3e-6 / 5.3e-6 /
    7.2e-6 for g = 0.5 / 2 / 5 / 20, first excited at g = 5 / 20: 1.4e-4 / 2.4e-4 -> 2.2e-5 / 4.0e-5; 10, g = 20:
    5.2e-5 -> 2.2e-5, first excited 8.5e-4 -> 2.4e-4) with every level within twice its bar; at mass ratio 2 it
    raised them (g = 5: 1.9e-8 -> 6.7e-6), and 3 was mixed (g = 2 worse, g = 5 and 20 better), hence the
    threshold. Not for g < 0: a search at 12 put a level of the 20/3 trimer 2.6 bars off
    (``bench_oscillator_results.md``), and a search at 20 gave a bar 13x too narrow at g = 0.5.
    """
    if not heavy_majority_repels(problem):
        return LENGTH_SEARCH_CUTOFF
    heavy, light = (problem.up, problem.down) if problem.up.mass > problem.down.mass else (problem.down, problem.up)
    return REPELLED_SEARCH_CUTOFF if heavy.mass >= REPELLED_SEARCH_MASS_RATIO * light.mass else LENGTH_SEARCH_CUTOFF


def basis_lengths(problem: Problem, choice: str, kind: str, cutoff: int, parities) -> tuple[tuple[float, float], dict]:
    """The orbitals' length per species: the trap lengths, or those minimizing the bare ground energy
    at ``cutoff`` (``oscillator_scaling.choose_lengths``).

    ``auto`` optimizes only where a trimer of two heavy fermions and a light particle can bind (g < 0,
    a species of >= 2 fermions heavier than its partner; in 1D such a trimer exists for any mass ratio
    above 1 -- Kartavtsev et al., JETP 108, 365 (2009), from memory): its size is set by the light
    particle's binding, far below the light trap length (2+1, mass ratio 20/3, g = -3: the trap
    orbitals extrapolated to -2.47 for -4.097). Where no trimer forms the scaled orbitals were measured
    worse than the trap's (1+2 at 20/3, g = -3: 3.3e-3 against 4.2e-4 off): they miss the unbound
    particle and the centre-of-mass excitations, which the trap orbitals hold exactly.

    Asked for explicitly there ('trap'), the running coupling's ladders are refused
    (``TRAP_ORBITALS_TRIMER_REFUSAL``: excited levels 4.9-13.8 bars off at g = -3, measured 2026-12-05).

    ``auto`` also optimizes where two or more pairs can bind (g < 0, two or more fermions of each species):
    with the trap's orbitals the running-coupling ladder rises and turns down only beyond the default
    cutoffs, and its bar missed (2+2, equal masses, against lattice-dmrg: g = -3, default ladder, -2.0094 +-
    0.006 for -2.0251 +- 0.0008; g = -2, cutoff 32, 0.709505 +- 1.7e-4 for 0.708881 +- 2.7e-4). The optimized
    orbitals (lengths ~0.55 at g = -3) give a ladder falling monotonically from above: -2.0245 +- 0.013
    (default) and 0.708913 +- 1.8e-3 (cutoff 32), both within 0.1 bar of lattice-dmrg; at g = -1 both
    choices cover it (2.660215 +- 2.6e-4 trap, 2.660357 +- 6.4e-4 optimized, lattice-dmrg 2.660256 +-
    6e-4). The price: bars 2-8x wider and 2-3x the CPU time (the length search).

    ``auto`` also optimizes for g > 0 where two or more fermions are heavier than their partners, up to four
    particles (``heavy_majority_repels``): the chosen orbitals are narrower for the light particle (2+1, mass
    ratio 20/3, g = 2: lengths 0.370 and 0.661 against the trap's 0.387 and 1). Measured with defaults against
    ``three-body`` (2+1 and its mirror 1+2 at mass ratios 2 and 20/3, g = 0.5, 2, 5, 20; three levels): ground
    states 1.0e-4 -> 2.1e-5 (mass ratio 2, g = 2), 8.2e-4 -> 1.8e-5 (20/3, g = 2), 1.5e-3 -> 1.1e-4 (20/3,
    g = 20); over the whole 2+1 grid the median error of the 90 levels falls from 8.3e-5 to 3.3e-5, ground
    states within 1e-4 from 19 to 25 of 30, all 90 within 2 bars (with ``GuardedPowerLaw``'s floor guard:
    the first excited level at 20/3 gets worse, 3e-5 -> 1.2e-3, and is covered by the guard alone). On the
    N = 4 grid (3+1 at mass ratios 2 and 20/3, 2+2 at 2 and 20/3, g > 0, against lattice-dmrg and
    lattice-ed, whose own uncertainties, 3e-4 to 3e-3, make these distances agreement rather than verified
    accuracy): median distance of the 34 levels with a lattice value 8.1e-4 -> 5.3e-4, 3+1 at mass ratio 2,
    g = 2, ground state -1.5e-2 +- 2e-2 -> 2.3e-4 +- 8e-4, all within twice the combined bars; 2+2 at 20/3,
    g = 2, ground state farther (1.7e-3 -> 8.6e-3, bar 1e-2). Not applied beyond four particles: at the
    default cutoff 16 of 3+3 (mass ratio 20/3, g = 2) the optimized ladder's bar was 0.56. Where the masses
    are equal or the heavy species is a single particle (2+1 measured), the trap orbitals did better (they hold the
    centre-of-mass excitations exactly, ``com_copies``). CPU time 1.2-2x (the search).
    """
    binds = heavy_light_trimer_possible(problem) or two_pairs_can_bind(problem) or heavy_majority_repels(problem)
    if choice == "trap" or (choice == "auto" and not binds):
        return trap_lengths(problem), {}
    truncation = Truncation(kind, cutoff)

    def lowest(lengths):
        levels, _ = solve_cutoff(problem, truncation, problem.coupling, 1, parities, 1e-10, lengths)
        return levels[0].energy

    lengths, record = scaling.choose_lengths(trap_lengths(problem), lowest)
    return (float(lengths[0]), float(lengths[1])), {"cutoff": cutoff, **record}


# ----------------------------------------------------------------------------- extrapolation


def cutoff_model(interaction: str):
    """The ladder model of the infinite-cutoff limit for ``interaction`` ('bare', 'renormalized', 'effective').

    Bare contact interaction: the error decays as c^(-1/2) (the delta function's oscillator-basis
    expansion; measured p = 0.50-0.53 for 1+1 at g = 0.5..10, see tests), so the model is
    E(c) = E_inf + a c^(-1/2) + b c^(-1), a polynomial in h = c^(-1/2).
    A two-cutoff ladder gets the remainder a c^(-1/2) law implies (``two_rung_power`` 1/2).

    Renormalized interaction: E(c) = E_inf + A c^(-p) with p fitted to the last three cutoffs and
    still drifting at reachable cutoffs (``extrapolation.DriftingPowerLaw``, which also handles an
    energy that turns around: the renormalized interaction is not variational).
    A two-cutoff ladder cannot fit p; its bar is the remainder of the slowest exponent measured on
    the reachable cutoffs, p = 2/3 (``two_rung_power``; 2+2 at c = 8-16, ``DriftingPowerLaw``).

    Effective interaction: the series in h = c^(-1/2) without its first two terms (``GuardedHalfPowerSeries``).
    """
    if interaction == "effective":
        return GuardedHalfPowerSeries()
    if interaction == "renormalized":
        return GuardedPowerLaw()
    return PolynomialModel(powers=(1.0, 2.0), exponent=-0.5, minimum_points=3, two_rung_power=0.5)


# Ladders beyond four particles. A two-cutoff ladder's bar (``two_rung_power``) rests on laws measured up to 2+2 (2+1
# at cutoffs 6-8, tests; 2+2 at 8-16, ``cutoff_model``); a three-cutoff ladder fits its power law exactly, without
# the check on the change of E_inf that needs four cutoffs (``GuardedPowerLaw.change_factor``); and that model's
# guards were measured on ladders of the default step 4. At 4+4 the running coupling's ladders still wander or have
# not yet turned around at the cutoffs reachable there, and against lattice-dmrg (map store, 2026-12-05) two-cutoff
# ladders missed by 2.3 and 4.1 bars (mass ratio 20/3, g = 2, cutoffs 4-6 and 6-8), a three-cutoff ladder by 3.8
# (equal masses, g = -2, cutoffs 8-12), and four-cutoff ladders of step 2 in 4 of 18 levels (by up to 9.7 bars: mass
# ratio 2, g = -2, cutoffs 10-16, 6.5068 +- 0.0027 against 6.4805 +- 0.0022), where the same 18 levels on ladders of
# step 4 ending at 14, 16 and 20 all lie within 1.6 bars (``bench/benchmarks/bench_oscillator_results.md``). Refused
# there: at least four cutoffs, step at least 4. The bare contact's law (c^(-1/2), variational) is not limited, and
# one cutoff claims no bar.
ANY_LADDER_MAX_PARTICLES = 4
MEASURED_LADDER = (4, 4)  # (cutoffs, step) at least, beyond ANY_LADDER_MAX_PARTICLES


@dataclass(frozen=True)
class GuardedPowerLaw:
    """``DriftingPowerLaw`` with two guards for a renormalized ladder not yet in its asymptotic regime.

    Measured on 2+1 with the pair heavy (mass ratio 20/3, g = 0.5 ... 20, trap orbitals, c = 16-28,
    against the three-body backend): some levels rise monotonically but will turn around later, and the
    fitted exponent then sits at the top of the scan (p -> 6, ``extrapolate_power_law``): the three
    points follow no power law, so the bar is at least twice the total variation along the ladder (once until
    version 16; ``top_factor``, measured below with the sixth guard). Levels
    that already turned around (``DriftingPowerLaw`` returns the last value and the total variation)
    missed by 2.2-2.4 times that variation: two error terms of opposite sign are both still active and
    the remainder is not bounded by the excursion so far; the bar is twice the total variation.

    Third guard, at the other end of the scan: a running coupling removes the bare contact's c^(-1/2) error
    term, so a fitted exponent below 1/2 (``power_floor``) is no power law either -- the ladder is still
    nearly linear in c and the fit extrapolates far beyond it. The bar is then at least the whole
    correction |E_last - E_inf|. Measured (2+1, pair mass ratio 20/3, g = 2, orbitals of optimized lengths,
    cutoffs 16-28, first excited level): successive changes -5.2e-5, -5.4e-5, -4.9e-5, p = 0.2, E_inf
    1.5e-3 below the last value with a bar of 5.3e-4 (from the change of E_inf); the true level lies
    1.2e-3 below E_inf's fit, inside the correction.

    Fourth: the fit's own bar moves the exponent by ``exponent_shift`` = 25 % either way (``extrapolate_power_law``).
    On ladders that reach cutoff ``asymptotic_cutoff`` = 32 the exponent is settled to about 10 % (2+2, g = 2: p = 1.76
    at c = 24-32, 1.67 at 36-44), and the shift is ``asymptotic_shift`` = 0.1. Measured with
    ``bench/benchmarks/bench_oscillator_bars.py`` against ``three-body`` (2+1 grid, three levels, version 10 defaults,
    cutoffs 32-44): 0.25 gave 88/88 graded levels within 2 bars and a median bar 22.8x the true error; 0.1 gives
    88/88 and 7.6x (smallest ratio 0.85); 0.05 would miss 1. On the 1393 stored ladders of earlier versions (cutoffs
    up to 28; N = 3 to 12) a 0.1 shift on every ladder would have missed 7 N = 3 levels (the first excited level of the
    20/3 trimer on cutoffs 16-28) and 5 levels at N = 6 and 8 against the combined bars; with the cutoff condition
    none of those ladders changes.

    Fifth, a ladder that turned around (``turn_remainder``): its asymptotic part is at most the segment since the
    turn, too short to fit, so the bar is also at least the remainder a c^(-2/3) law implies for the last change
    (``two_rung_power``, ``ladder.last_change_bar``: 9.2 times that change from 24 to 28). Measured (3+2, the heavy
    pair in the minority, mass ratio 3/20, g = 20, trap orbitals): the ground state along c = 16, 20, 24, 28 is
    9.725300, 9.726282, 9.726283, 9.725707 and it keeps falling (9.724882, 9.723999 at 32, 36); twice the variation,
    3.1e-3, left lattice-dmrg's 9.716720 +- 7.6e-4 2.9 bars away (the effective interaction's ladder to c = 36 gives
    9.71810 +- 1.1e-3); the remainder, 5.3e-3, puts it 1.7 bars away. On the stored default and map ladders
    (``bench/benchmarks/bench_oscillator_bars.py``, 1587 levels, N = 3 to 8) the guard widens 23 bars (N = 4 to 8;
    median factor 1.4, at most 2.1); of the levels with a reference none changes its verdict but this one: N = 5
    within twice the combined bars 116 -> 117 of 118.

    Sixth, a fitted exponent of at least ``steep_power`` = 2.2, a tenth above the steepest exponent (2.03) of the
    default 2+1 ladders with the pair heavier that neither turned around, nor reached a guard, nor missed (mass ratios
    2-28.8, g = -5 ... 100): steeper ladders have two terms of opposite sign both active, the ladder will turn, and
    at p = 2.33-2.72 the fit's limit was 0.02-0.38 of the extrapolation away from the truth; the bar is at least the
    whole correction |E_last - E_inf|. Measured with defaults against ``three-body`` (2+1, pair/third mass ratios 2,
    4, 20/3, 8.83, 10, 15, 28.8 at g = -3, -1, 0.5, 2, 5, 20, and 2 and 20/3 at g = -5, -4, 30, 50, 100; three
    levels; 2026-12-05): at 20/3, g = -4, the second excited level (p = 2.37) lay 2.4 bars off, 0.34 of its
    extrapolation (so 0.34 bars with the guard); the pair at 8.83 (53Cr/6Li), g = -1, ground state, p = 2.72, was
    1.5e-5 below its last cutoff by the fit and 5.8e-6 from the truth with a bar of 2.2e-6 (2.6 bars); at 28.8
    (173Yb/6Li), g >= 2, the second excited level has p at the top of the scan and lay 1.75-2.29 times its
    variation away; the bound trimer
    (20/3, g = -3, ground state) has p = 3.4-3.9 on every window of four cutoffs from 32-44 to 52-64, and without the
    guard the windows ending at 56, 60, 64 missed ``three-body`` by 2.3, 3.1, 3.8 bars (with it: 0.33, 0.43, 0.54;
    the default window's bar grows from 2.7e-5 to 1.6e-4 for an error of 6.1e-6). With both guards
    the 90 levels up to mass ratio 10 all lie within twice their bars (89 before; median bar / error 4.7 -> 5.0),
    125 of the 126 with 15 and 28.8 (the miss below, ``heavy_pair_beyond_measured``), the 30 at g = -5 ... 100 all
    (29 before; 4.1 -> 5.1); on the 1527 stored default and map
    ladders (N = 3 to 12, ``bench/benchmarks/bench_oscillator_bars.py --steep --top-factor``) no graded level
    changes its verdict; the median bar / error moves from 8.1 to 8.6 at N = 3 and from 5.7 to 6.2 at N = 6.

    ``change_factor`` (``DriftingPowerLaw``: the bar is at least this times the change of E_inf between the
    fits to the last three and the three cutoffs before) stays 2. Measured with
    ``bench/benchmarks/bench_oscillator_bars.py`` on default ladders against other methods: a factor 1 would
    narrow the N = 4 bars from a median 11.7x to 5.4x the true error (against lattice-dmrg, all within one
    bar), but out of that sample, on 3+3 (mass ratio 2, g = 2) the bar became 0.0069 for an error of 0.0185
    against lattice-dmrg (2.7 bars), and 3+3 and 4+4 with mass ratio 20/3 missed by 1.6-1.8 bars.
    """

    minimum_points: int = 3
    change_factor: float = 2.0
    power_ceiling: float = 5.4  # 90 % of the exponent scan's upper end (6)
    power_floor: float = 0.5  # the bare contact's exponent (see above)
    exponent_shift: float = 0.25  # DriftingPowerLaw's, on ladders that end below asymptotic_cutoff
    asymptotic_cutoff: float = 32.0  # see above
    asymptotic_shift: float = 0.1
    two_rung_power: float = 2.0 / 3.0  # see cutoff_model
    turn_remainder: bool = True  # see above (a turned-around ladder)
    steep_power: float | None = 2.2  # see above (sixth guard); None: off
    top_factor: float = 2.0  # the first guard's multiple of the total variation (sixth guard's measurement)

    def __call__(self, steps, values) -> Extrapolation:
        shift = self.asymptotic_shift if float(steps[-1]) >= self.asymptotic_cutoff else self.exponent_shift
        fit = DriftingPowerLaw(change_factor=self.change_factor, exponent_shift=shift)(steps, values)
        variation = float(np.sum(np.abs(np.diff(np.asarray(values, dtype=float)))))
        if fit.warning:  # turned around
            error = max(fit.error, 2.0 * variation)
            if self.turn_remainder:
                last = abs(float(values[-1]) - float(values[-2]))
                error = max(error, last_change_bar(self, steps, last))
            return replace(fit, error=error)
        power = fit.parameters["power"]  # set on every fit that did not turn around
        if power >= self.power_ceiling:
            return replace(
                fit,
                error=max(fit.error, self.top_factor * variation),
                warning="the fitted exponent reached the top of its scan (no power law yet): error bar >="
                f" {self.top_factor:g} x the total variation",
            )
        correction = abs(float(values[-1]) - fit.value)
        if self.steep_power is not None and power >= self.steep_power:
            return replace(
                fit,
                error=max(fit.error, correction),
                warning=f"the fitted exponent {power:.2f} is steeper than a running coupling's"
                f" (>= {self.steep_power:g}): error bar >= the whole extrapolation",
            )
        if power < self.power_floor:
            return replace(
                fit,
                error=max(fit.error, correction),
                warning=f"the fitted exponent {power:.2f} is below the bare contact's 1/2 (no power law yet):"
                " error bar >= the whole extrapolation",
            )
        return fit


@dataclass(frozen=True)
class GuardedHalfPowerSeries:
    """E(c) = E_inf + a c^(-3/2) + b c^(-2) + d c^(-5/2): the effective interaction's ladder model.

    The error of a truncated oscillator expansion of a state with contact cusps is a series in powers of 1 / k_max ~
    c^(-1/2) (the bare contact's leading term c^(-1/2) is measured above; a series in odd powers of 1/Lambda for a
    momentum cutoff Lambda is the effective-field-theory picture of the 1D contact, S. Szpigel and R. J. Perry,
    arXiv:nucl-th/9906031; the odd-power detail from memory). The effective interaction reproduces the two-body
    spectrum in the basis exactly; the working assumption, borne out by the measurements below, is that this removes
    the c^(-1/2) and c^(-1) terms, so what is left starts at c^(-3/2). A fitted single power cannot follow that: the
    local exponent drifts at every reachable cutoff (2+1 against ``three-body``, cutoffs 12-64: 2.11 -> 2.32 at g =
    -3 and 1.71 -> 1.67 at g = 20, equal masses), so a three-cutoff power law overshoots (8.2e-5 at g = -3, cutoffs
    32-44) or stops short. The three known powers are fitted exactly on the last four cutoffs
    (``extrapolation.PolynomialModel`` in h = c^(-1/2), i.e. ``extrapolate_polynomial``: its bar is the largest of
    the change when the highest power is dropped, the change without the least converged cutoff when there are five
    or more, and 5 % of the correction); three cutoffs fit the first two powers.

    Guards: wherever ``GuardedPowerLaw`` (``fallback``: top-of-scan bar once the variation, sixth guard from 2.5)
    warns -- a ladder that turned around, an exponent at either end of its scan or one steeper than the series'
    steepest term c^(-5/2), which its slower terms can follow only by cancelling -- or its fitted exponent is below 1
    (``power_floor``: a term slower than the series' leading c^(-3/2) still dominates), the ladder is not in the
    series' regime and that model's value and bar are returned instead. The steep case was measured on six levels
    (2+1, the pair light, pair/third 3/26.5 = 6Li/53Cr, g = -3, defaults, 2026-12-05): the fifth level, the ground
    state plus two centre-of-mass quanta, has a ladder rising with fitted power 2.84; the series put it 3.1 bars
    from ``three-body`` (4.4e-5 with a bar of 1.4e-5), the power law's guarded bar (the whole extrapolation) 0.64.
    On the 153 stored default ladders of the 2+1 and 1+2 grids and of g = -5 ... 100 the series' fits all have
    fitted powers below 2.5 (95 % below 2.1), so none changes.
    Measured where this matters (2+2, equal masses, g = -2, first excited level, cutoffs 20-32, fitted exponent
    0.76): the series gave 1.7101 +- 2.8e-3, the power law 1.7027 +- 5.5e-2; no reference decides, so the wide bar.
    Nor is a ladder that starts below cutoff 24 (``first_cutoff``): on the quick suite's 2+1 ladders (equal masses,
    cutoffs 8-20 and 12-24) the series missed ``three-body`` by up to 2.7 times the power law's error (g = 20, cutoffs
    12-24: -4.0e-4 against +1.5e-4), and on the 12-64 ladders of ``bench_effective_interaction.py --windows`` it
    gains only in windows from 24 up.
    ``two_rung_power`` (two-cutoff ladders, observables' grids) stays the renormalized ladder's 2/3.

    Measured on the stored default ladders of the 2+1 and 1+2 dataset grids where the pair is not heavier (36
    problems, 108 levels, cutoffs 32-44; ``bench/benchmarks/bench_oscillator_bars.py --interaction effective``): of the
    104 levels ``three-body`` can grade, all lie within twice their bars, the median bar is 7.5 times the error
    (the fitted power's: 4.4) and the smallest 1.15 (0.84); the backend's own sweeps of the grids are in the module
    docstring (version 15): median error of the 2+1 levels 4.3e-6 -> 1.5e-6. On eight 2+1 ladders to cutoff 64
    (``bench_effective_interaction.py --windows``, 56 windows of four cutoffs from 28 up): all within twice their
    bars, median error 3.1e-6 -> 1.7e-6, median bar 3.3 times the error, smallest 1.06. Where a user takes the
    effective interaction for a heavier repelled pair (2+1, mass ratios 2 and 20/3, g = 0.5 ... 20, default ladders,
    24 levels; a one-off check against ``three-body``) every level lay within 1.2 bars, the series' errors no better
    than the power law's at mass ratio 2. Not used for the energies' scalars: <V_trap> and dE/dg follow other
    exponents (fitted 1.0-1.8 and 0.7-2.2 on the 18 effective 2+1 grid problems) and the series was not measured on
    them, so they keep ``GuardedPowerLaw``.
    """

    powers: tuple[float, ...] = (3.0, 4.0, 5.0)  # in h = c^(-1/2)
    minimum_points: int = 3
    two_rung_power: float = 2.0 / 3.0  # see cutoff_model
    power_floor: float = 1.0  # below it the ladder is not yet in the series' regime (see above)
    first_cutoff: float = 24.0  # a ladder starting below it is not either (see above)
    # the power law's guards as measured with this model (version 15; the doubled top-of-scan bar was measured on
    # running-coupling ladders only), its sixth guard from the series' steepest term c^(-5/2) on (see above)
    fallback: GuardedPowerLaw = GuardedPowerLaw(steep_power=2.5, top_factor=1.0)

    def __call__(self, steps, values) -> Extrapolation:
        guarded = self.fallback(steps, values)
        if (
            guarded.warning
            or guarded.parameters.get("power", 0.0) < self.power_floor
            or float(np.min(steps)) < self.first_cutoff
        ):
            return guarded
        fit = PolynomialModel(powers=self.powers, exponent=-0.5)(steps, values)
        return replace(
            fit,
            model="E(c) = E_inf + " + " + ".join(f"a{p:g} c^-{p / 2:g}" for p in fit.parameters["powers"]),
            steps=tuple(float(c) for c in steps),
            values=tuple(float(v) for v in values),
        )


def derived_scalar_errors(problem: Problem, energy_error, trap_error, delta_error, suffix: str) -> dict[str, float]:
    """Error bars of <V_trap>, dE/dg and of the scalars derived from them and E.

    kinetic = E - <V_trap> - g dE/dg and contact = (2 mu)^2 g^2 dE/dg, so their bars are
    dE + d<V_trap> + |g| d(dE/dg) and (2 mu)^2 g^2 d(dE/dg) (linear propagation, errors added).
    """
    g = problem.coupling
    errors = {}
    if trap_error is not None:
        errors["trap_energy" + suffix] = trap_error
    if delta_error is not None:
        errors["delta" + suffix] = delta_error
        errors["contact" + suffix] = (2 * problem.reduced_mass()) ** 2 * g**2 * delta_error
        if trap_error is not None and energy_error is not None:
            errors["kinetic_energy" + suffix] = energy_error + trap_error + abs(g) * delta_error
    return errors


# ----------------------------------------------------------------------------- backend


class OscillatorEDBackend(Backend):
    name = "oscillator-ed"
    version = "16"
    summary = (
        "Exact diagonalization in harmonic-oscillator Slater determinants (energy or orbital cutoff,"
        " exact Gauss-Hermite contact elements, optional two-body renormalized g, cutoff extrapolation)"
    )
    # 6+6 (g = 2, one core): cutoff 16 in 23 CPU s, 20 in 146-164 s, 24 in 736 s and 872 MiB (ladders of four cutoffs);
    # beyond 12 particles the determinant basis grows too fast at a useful cutoff: a lattice method is the tool
    capabilities = Capabilities(
        max_particles=12,
        observables=("density", "momentum", "obdm", "pair_position", "pair_momentum", "noise", "contact", "trap_energy"),
        error_bars=True,
        # the running coupling and the effective interaction are fitted to Busch's two-body spectrum, which
        # they reproduce at 1+1 by construction (declared for every interaction choice, 'bare' included)
        built_on=("busch-roots",),
        calibrated_on=((1, 1),),
    )
    check_params = {"cutoff": 12, "ladder": 3}
    preload = ("trapbench.backends.oscillator_warmup",)
    parameters = (
        Parameter("truncation", str, "energy", "basis cutoff: 'energy' (E <= E_0 + cutoff) or 'orbital'", choices=("energy", "orbital")),
        Parameter(
            "cutoff",
            int,
            None,
            "largest cutoff: excitation energy in hbar*omega_ref ('energy') or orbitals per species ('orbital');"
            " default chosen from the particle number",
            minimum=0,
            allow_none=True,
        ),
        Parameter("renormalized", bool, True, "replace g by g_eff(cutoff) fixed by the exact 1+1 energy (read when interaction = 'auto')"),
        Parameter(
            "interaction",
            str,
            "auto",
            "two-body interaction: 'bare' (g delta), 'renormalized' (running g_eff(cutoff)), 'effective' (Okubo /"
            " Lee-Suzuki, centre-of-mass aware, exact 1+1 spectrum in the basis; equal frequencies, energy"
            " truncation, trap orbitals) or 'auto' (as the flag 'renormalized' says, but 'effective' for 2+1 and 1+2"
            " whose pair is not heavier than the third particle)",
            choices=("auto", "bare", "renormalized", "effective"),
        ),
        Parameter(
            "basis_lengths",
            str,
            "auto",
            "orbital length per species: 'trap' (each species' trap length; refused for a ladder with the running"
            " coupling where a heavy-heavy-light trimer can bind), 'optimize' (lowest bare energy at"
            " the ladder's first cutoff, for bound pairs) or 'auto' (optimize when g < 0 and a heavy-heavy-light"
            " trimer or two pairs can bind, and for g > 0 up to four particles when two or more fermions are the"
            " heavier species)",
            choices=("auto", "trap", "optimize"),
        ),
        Parameter("ladder", int, 4, "number of cutoffs solved (>= 3 extrapolates; 2 bounds the rest by the slowest"
                  " measured law; 1 gives no error bar; beyond four particles at least 4 unless the contact is bare)",
                  minimum=1),
        Parameter("ladder_step", int, 4, "spacing between successive cutoffs of the ladder (beyond four particles at"
                  " least 4 unless the contact is bare or ladder = 1)", minimum=1),
        Parameter(
            "extra_states",
            int,
            2,
            "levels computed per parity sector beyond the requested ones; degeneracies are counted among the"
            " computed levels, so raise it for large multiplets (strong coupling, g = 0)",
            minimum=0,
        ),
        Parameter("tolerance", float, 1e-10, "Lanczos (eigsh) relative tolerance", minimum=0.0),
        Parameter("degeneracy_tolerance", float, 1e-6, "levels closer than this count as degenerate", minimum=0.0),
        Parameter(
            "observable_states",
            int,
            1,
            "scalars and observables for this many of the lowest reported states (names of state k > 0 end in @k)",
            minimum=1,
        ),
    )

    def default_cutoff(self, problem: Problem, truncation: str) -> int:
        """Largest cutoff of the default ladder: a few seconds to about 20 s of CPU per problem up to four particles
        (see the module docstring and benchmarks)."""
        n = problem.n_particles
        if truncation == "orbital":
            return {2: 30, 3: 24, 4: 18, 5: 14, 6: 12}.get(n, 10)
        return {2: 32, 3: 44, 4: 32, 5: 28, 6: 24, 7: 14, 11: 16, 12: 16}.get(n, 12)

    def cutoff_ladder(self, problem: Problem, params: dict[str, Any]) -> list[int]:
        """The cutoffs solved, ascending: ``cutoff``, ``cutoff - ladder_step``, ... (``ladder`` of them)."""
        kind = params["truncation"]
        cutoff = params["cutoff"]
        if cutoff is None:  # the default ladder must start at a meaningful cutoff
            lowest = max(problem.up.count, problem.down.count, 1) if kind == "orbital" else 2
            cutoff = max(self.default_cutoff(problem, kind), lowest + params["ladder_step"] * (params["ladder"] - 1))
        return [cutoff - params["ladder_step"] * i for i in range(params["ladder"])][::-1]

    def supports(self, problem: Problem, params: dict[str, Any] | None = None) -> Support:
        """A ladder below the smallest meaningful cutoff is a parameter error (SpecError naming param.cutoff),
        raised before any work and when a suite is loaded."""
        params = self.resolve_params(params or {})
        cutoffs = self.cutoff_ladder(problem, params)
        lowest = max(problem.up.count, problem.down.count, 1) if params["truncation"] == "orbital" else 1
        if cutoffs[0] < lowest:
            raise SpecError("param.cutoff", f"the ladder {cutoffs} goes below the smallest meaningful cutoff {lowest};"
                                            " raise cutoff or lower ladder/ladder_step")
        if (params["ladder"] > 1 and problem.n_particles > ANY_LADDER_MAX_PARTICLES
                and self.interaction_kind(problem, params) != "bare"):
            rungs, step = MEASURED_LADDER
            if params["ladder"] < rungs or params["ladder_step"] < step:
                field = "param.ladder" if params["ladder"] < rungs else "param.ladder_step"
                raise SpecError(
                    field,
                    f"error bars of {problem.n_particles} particles were measured on ladders of at least {rungs}"
                    f" cutoffs {step} apart (shorter or denser ladders missed 4+4 against lattice-dmrg by up to 9.7"
                    f" bars): give ladder >= {rungs} and ladder_step >= {step}, or ladder = 1 for no error bar",
                )
        if params["interaction"] == "effective":
            refusal = effective_refusal(problem, params["truncation"], params["basis_lengths"])
            if refusal:
                return Support.no(refusal)
        if (params["basis_lengths"] == "trap" and params["ladder"] > 1 and heavy_light_trimer_possible(problem)
                and self.interaction_kind(problem, params) == "renormalized"):
            return Support.no(TRAP_ORBITALS_TRIMER_REFUSAL)
        return Support.yes()

    @staticmethod
    def interaction_kind(problem: Problem, params: dict[str, Any]) -> str:
        """'bare', 'renormalized' or 'effective': the ``interaction`` parameter, with 'auto' read from the
        flag ``renormalized`` (its meaning before the parameter existed), except that with the flag set three
        particles whose pair is not heavier than the third take the effective interaction
        (``effective_by_default``); g = 0 is always bare."""
        kind = params["interaction"]
        if kind == "auto":
            kind = "renormalized" if params["renormalized"] else "bare"
            if kind == "renormalized" and effective_by_default(problem, params["truncation"], params["basis_lengths"]):
                kind = "effective"
        return "bare" if problem.g[0] == 0.0 else kind

    def compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        """Solve with the BLAS thread count the caller set (trapbench's executor: ``--blas-threads``, default 1)."""
        return self._compute(problem, params)

    def _compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        kind = params["truncation"]
        cutoffs = self.cutoff_ladder(problem, params)
        interaction = self.interaction_kind(problem, params)
        warnings = []
        if interaction == "renormalized" and not problem.equal_frequencies:
            interaction = "bare"
            warnings.append("renormalized interaction needs equal trap frequencies; the bare g was used")
        effective = interaction == "effective"
        g = problem.coupling
        wanted = problem.targets.states
        k = wanted + params["extra_states"]
        parities = {"any": (+1, -1), "even": (+1,), "odd": (-1,)}[problem.targets.parity]

        if params["basis_lengths"] == "trap" and heavy_light_trimer_possible(problem):
            warnings.append(
                "a heavy-heavy-light trimer may bind here and the trap orbitals describe it poorly;"
                " basis_lengths = 'auto' chooses narrower orbitals"
            )
        if heavy_pair_beyond_measured(problem):
            warnings.append(
                f"a fermion pair more than {HEAVY_PAIR_MEASURED_RATIO:g} times heavier than its partner: error bars"
                " not verified there (2+1 at mass ratio 15, g = 5: an excited level 2.9 bars off); check against"
                " another method"
            )
        search_cutoff = min(cutoffs[0], length_search_cutoff(problem))
        # the effective interaction is built in the trap orbitals ('auto' means them here; it binds pairs itself)
        length_choice = "trap" if effective else params["basis_lengths"]
        lengths, length_search = basis_lengths(problem, length_choice, kind, search_cutoff, parities)
        nested = None if effective else NestedSectors(problem, Truncation(kind, cutoffs[-1]), lengths, ASSEMBLE_LIMIT)

        def solve_rung(c: int, final: bool) -> Rung:
            trunc = Truncation(kind, c)
            factors, derivative = None, None
            if effective:
                factors = effective_factors(problem, trunc, g)
                derivative = lambda trunc=trunc: effective_derivative_factors(problem, trunc, g)  # noqa: E731
            g_used, slope = effective_coupling(problem, trunc, g, lengths) if interaction == "renormalized" else (g, 1.0)
            levels, diag = solve_cutoff(
                problem, trunc, 1.0 if effective else g_used, k, parities, params["tolerance"], lengths, factors, nested
            )
            diag["g_used"] = g_used
            # degeneracy: size of the cluster (spacings < tolerance) among every level of this cutoff
            clusters = fock_ed.degeneracies([lv.energy for lv in levels], params["degeneracy_tolerance"])
            found = {}
            for key, lv, cluster in zip(rank_keys([lv.parity for lv in levels]), levels, clusters):
                found[key] = RungLevel(
                    energy=lv.energy,
                    labels={"parity": lv.parity, "degeneracy": cluster, "com": None},
                    scalars=lambda lv=lv: dict(
                        zip(("trap_energy", "delta"), self._expectations(problem, lv, g_used, slope, derivative))
                    ),
                    payload=lv,
                )
            return Rung(c, found, diag)

        # levels are followed by (parity sector, rank within the sector): level order across sectors
        # can change with the cutoff, order within a sector cannot. <V_trap> and dE/dg take the energy's model
        # (the power law with the effective interaction, see GuardedHalfPowerSeries); dg_eff/dg comes from a
        # central difference of the exact pair energy (step 1e-4 g), good to about 1e-8 relative: their error floor.
        model = cutoff_model(interaction)
        ladder = run_ladder(
            cutoffs,
            solve_rung,
            model,
            keep=wanted,
            scalar_model=cutoff_model("renormalized") if interaction == "effective" else None,
            scalar_states=params["observable_states"],
            floor=max(params["tolerance"], 1e-12),
            scalar_floor=SCALAR_ERROR_FLOOR,
        )
        warnings += ladder.warnings
        count = len(ladder.keys)
        chosen = [ladder.final.levels[key].payload for key in ladder.keys]
        states = ladder.states
        for state, lv in zip(states, chosen):
            state["com"] = com_label(problem, lv)
        energies, energy_errors, copies = list(ladder.energies), ladder.energy_errors, []
        if energy_errors is not None and com_separates_exactly(problem, kind, interaction, lengths):
            # a copy counts only if the ladder followed it on every cutoff (the level under a key may change);
            # the final cutoff's labels are the states' own
            steady = [all(com_label(problem, rung.levels[key].payload) == state["com"] for rung in ladder.rungs[:-1])
                      for key, state in zip(ladder.keys, states)]
            energies, energy_errors, copies = com_copies(energies, energy_errors, states, steady)

        observables, scalars, scalar_errors, virial = {}, {}, {}, []
        for index in range(min(params["observable_states"], count)):
            suffix = "" if index == 0 else f"@{index}"
            trap_delta = (ladder.scalars["trap_energy" + suffix], ladder.scalars["delta" + suffix])
            energy = energies[index]
            obs, sca, vir = self._state_observables(problem, chosen[index], energy, trap_delta)
            if obs and len(ladder.rungs) >= 2:  # the grids' error bars: their change from the cutoff before
                before = ladder.rungs[-2].levels[ladder.keys[index]].payload
                previous, _ = self._grids(problem, before)
                steps = [rung.step for rung in ladder.rungs]
                for name, observable in obs.items():
                    observable.error = grid_error(model, steps, observable.values, previous[name].values)
            for name, observable in obs.items():
                observable.state = index
                observables[name + suffix] = observable
            scalars.update({name + suffix: value for name, value in sca.items()})
            scalar_errors.update(
                derived_scalar_errors(
                    problem,
                    None if energy_errors is None else energy_errors[index],
                    ladder.scalar_errors.get("trap_energy" + suffix),
                    ladder.scalar_errors.get("delta" + suffix),
                    suffix,
                )
            )
            virial.append(vir)
        if count < wanted:
            warnings.append(f"the basis holds only {count} states in the requested sector(s)")
        diagnostics = {
            "interaction": interaction,
            "truncation": kind,
            "cutoffs": cutoffs,
            **ladder.diagnostics(),
            "g_used": [rung.diagnostics["g_used"] for rung in ladder.rungs],
            "dimensions": [rung.diagnostics["dimension"] for rung in ladder.rungs],
            "matvecs": [rung.diagnostics["matvecs"] for rung in ladder.rungs],
            "n_orbitals": list(chosen[0].sector.n_orbitals),
            "basis_lengths": list(lengths),
            "basis_length_search": length_search,
            "virial_residual": virial[0],
            "virial_residuals": virial,
            "com_copies": copies,
        }
        return Solution(
            energies=[float(e) for e in energies],
            states=states,
            observables=observables,
            scalars=scalars,
            scalar_errors=scalar_errors,
            error_estimate=None if energy_errors is None else float(max(energy_errors)),
            energy_errors=energy_errors,
            diagnostics=diagnostics,
            warnings=warnings,
        )

    # ------------------------------------------------------------------ observables
    @staticmethod
    def _expectations(problem: Problem, level: Level, g_used: float, slope: float, derivative=None) -> tuple[float, float]:
        """(<V_trap>, dE/dg) of one level at one cutoff.

        <sum delta> in the basis is <psi|H(g=1) - H(g=0)|psi> (one matvec instead of the pair tensor);
        dE/dg = <sum delta>_trunc dg_eff/dg for the renormalized energy (slope = 1 for bare g). With the
        effective interaction (``derivative`` returns the factors of dV_eff/dg) dE/dg = <psi|dV_eff/dg|psi>
        (Hellmann-Feynman in the truncated space).
        """
        m_u, m_d = level.sector.n_orbitals
        rho_u, rho_d = fock_ed.one_body_density_matrices(level.sector.basis, level.vector)
        vector = level.vector
        if derivative is None and level.contact is not None:
            delta_trunc = level.contact
        elif derivative is None:
            delta_trunc = float(
                vector @ hamiltonian(problem, level.sector, 1.0).matvec(vector)
                - vector @ hamiltonian(problem, level.sector, 0.0).matvec(vector)
            )
        else:
            zero_u, zero_d = np.zeros((m_u, m_u)), np.zeros((m_d, m_d))
            dv = fock_ed.ProductHamiltonian(level.sector.basis, zero_u, zero_d, 1.0, derivative(), assemble_limit=ASSEMBLE_LIMIT)
            delta_trunc = float(vector @ dv.matvec(vector))
        b_u, b_d = level.sector.lengths
        trap = fock_ed.one_body_expectation(rho_u, trap_potential_matrix(problem.up, m_u, b_u)) + fock_ed.one_body_expectation(
            rho_d, trap_potential_matrix(problem.down, m_d, b_d)
        )
        return trap, delta_trunc * slope

    def _state_observables(self, problem: Problem, level: Level, energy: float, trap_delta: tuple[float, float]):
        """Scalars (always) and the requested observables on grids of one state.

        ``trap_delta`` = (<V_trap>, dE/dg), extrapolated along the cutoff ladder like the energy, so
        that the virial residual E - 2<V> - (g/2) dE/dg (virial theorem) tests converged quantities and
        the kinetic energy is E - <V> - g dE/dg; grids come from the largest cutoff's eigenvector.
        """
        observables, (rho_u, rho_d, gamma) = self._grids(problem, level)
        trap, delta = (float(v) for v in trap_delta)
        g = problem.coupling
        mu = problem.reduced_mass()
        scalars = {
            "trap_energy": trap,
            "kinetic_energy": energy - trap - g * delta,
            "delta": delta,
            "contact": (2 * mu) ** 2 * g**2 * delta,
        }
        virial = energy - 2 * trap - 0.5 * g * delta
        if "noise" in problem.targets.observables:
            scalars["noise_integral"] = self.noise_integral(gamma, rho_u, rho_d, level.sector.n_orbitals, level.sector.lengths)
        return observables, scalars, virial

    @staticmethod
    def _grids(problem: Problem, level: Level) -> tuple[dict[str, Observable], tuple]:
        """The requested observables on grids of one state, and (rho_up, rho_down, pair tensor or None) behind them."""
        basis = level.sector.basis
        m_u, m_d = level.sector.n_orbitals
        rho_u, rho_d = fock_ed.one_body_density_matrices(basis, level.vector)
        wanted = set(problem.targets.observables)
        gamma = fock_ed.pair_tensor(basis, level.vector) if wanted & {"pair_position", "pair_momentum", "noise"} else None
        observables: dict[str, Observable] = {}
        x_max, p_max = problem.extent()
        x = np.linspace(-x_max, x_max, problem.targets.grid_points)
        p = np.linspace(-p_max, p_max, problem.targets.grid_points)
        b_u, b_d = level.sector.lengths
        phi_u, phi_d = ob.position_orbitals(m_u, x, b_u), ob.position_orbitals(m_d, x, b_d)
        mom_u, mom_d = ob.momentum_orbitals(m_u, p, b_u), ob.momentum_orbitals(m_d, p, b_d)
        length, momentum = "1/length", "1/momentum"
        if "density" in wanted:
            for name, rho, phi in (("up", rho_u, phi_u), ("down", rho_d, phi_d)):
                observables[f"density_{name}"] = Observable(
                    fock_ed.density_on_grid(rho, phi), {"x": x}, length, f"integral dx = N_{name}"
                )
        if "momentum" in wanted:
            for name, rho, phi in (("up", rho_u, mom_u), ("down", rho_d, mom_d)):
                observables[f"momentum_{name}"] = Observable(
                    fock_ed.density_on_grid(rho, phi), {"p": p}, momentum, f"integral dp = N_{name}"
                )
        if "obdm" in wanted:
            for name, rho, phi in (("up", rho_u, phi_u), ("down", rho_d, phi_d)):
                observables[f"obdm_{name}"] = Observable(
                    fock_ed.obdm_on_grid(rho, phi).real, {"x": x, "x'": x}, length, f"trace = N_{name}"
                )
        if "pair_position" in wanted:
            observables["pair_position"] = Observable(
                fock_ed.pair_on_grid(gamma, phi_u, phi_d), {"x_up": x, "x_down": x}, "1/length^2",
                "integral = N_up N_down",
            )
        if "pair_momentum" in wanted:
            observables["pair_momentum"] = Observable(
                fock_ed.pair_on_grid(gamma, mom_u, mom_d), {"p_up": p, "p_down": p}, "1/momentum^2",
                "integral = N_up N_down",
            )
        if "noise" in wanted:
            observables["noise"] = Observable(
                fock_ed.noise_on_grid(gamma, rho_u, rho_d, mom_u, mom_d), {"p_up": p, "p_down": p}, "1/momentum^2",
                "integral = 0",
            )
        return observables, (rho_u, rho_d, gamma)

    @staticmethod
    def noise_integral(gamma, rho_u, rho_d, n_orbitals, lengths) -> float:
        """integral dp1 dp2 C(p1, p2)^2, exact by Gauss-Hermite in each momentum (C^2 in p_s is a
        polynomial of degree <= 4(M_s - 1) times exp(-2 b_s^2 p^2))."""
        m_u, m_d = n_orbitals
        b_u, b_d = lengths
        p_u, w_u = ob.gauss_hermite_grid(2 * m_u, 1 / (math.sqrt(2) * b_u))
        p_d, w_d = ob.gauss_hermite_grid(2 * m_d, 1 / (math.sqrt(2) * b_d))
        return fock_ed.noise_integral(
            gamma, rho_u, rho_d, ob.momentum_orbitals(m_u, p_u, b_u), w_u, ob.momentum_orbitals(m_d, p_d, b_d), w_d
        )
