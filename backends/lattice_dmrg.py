"""``lattice-dmrg``: two-site DMRG (tenpy) on the lattice discretization, extrapolated to the continuum.

Method: the lattice Hamiltonian of ``backends/lattice.py`` (``lattice.terms``, the description
lattice-ed uses too: species-dependent hopping t_s = 1/(2 m_s a^2), on-site 2 t_s + V_s(x_j), U = g/a
on n_up n_down, open chain) as a matrix-product operator on tenpy's ``SpinHalfFermionSite`` with N_up and N_down conserved separately; the ground
state by two-site DMRG (S. R. White, Phys. Rev. Lett. 69, 2863 (1992)) and excited states by DMRG
orthogonal to the lower ones. Each state is converged at every bond dimension of a ladder
chi_1 < chi_2 < ..., restarting from the previous MPS, until it converges without truncation
(``settled``); the energy is extrapolated linearly in the discarded weight of the last sweep (``extrapolation.DiscardedWeightLinear``, common practice) with an
error bar, which is the lattice energy's solver error in the continuum limit over the spacing ladder
(``lattice.solve_continuum_ladder``, the shared convergence ladder). The default spacing ladder is
fitted to ``max_sites`` as ``lattice.fit_to_budget`` describes. Energies in hbar omega_ref.

Guard against a stuck level: an excited level can stop in a state that is not an eigenstate and still
count as converged (its energy no longer moves). Seen once, 3+1 with mass ratio 1/2 at g = -3: the third
level on a 68-site lattice came out 49.24 where the finer lattices gave 1.94-1.96 (the continuum fit then
reported 17.99 +- 16). So each level's final MPS has its energy spread sigma = sqrt(<H^2> - <H>^2)
measured (``energy_spread``, stored as ``spread`` in ``diagnostics['per_rung']``); above ``SPREAD_LIMIT``
the level is run again from a scrambled start with the mixer and the run with the smaller spread kept.
A level still above the limit is reported and its spread (Weinstein's bound) added to its error.

A level whose run stops at ``max_sweeps`` before its energy converges carries the geometric tail of its
sweep energies in its error (``sweep_tail``), not just the last change, which under-covers where DMRG
creeps down slowly (a near-degenerate pair at strong coupling).

Not computed (not in its declared capabilities, so refused before computing): momentum-pair correlations and noise maps (they need
four-point functions at all site quadruples), and parity sectors (the MPS carries no reflection
quantum number).
"""

from __future__ import annotations

import contextlib

import logging
import math
from typing import Any

import numpy as np
from threadpoolctl import threadpool_limits

from ..problems.errors import SpecError
from ..problems.spec import Problem
from . import lattice, lattice_observables
from .base import Backend, Capabilities, Parameter, Support
from .extrapolation import DiscardedWeightLinear, GeometricTail
from .lattice import LADDER_PARAMETERS, Budget, LatticeLevels
from .result import Solution

# Default ladder of spacings (fractions of lattice.length_scale): coarser than lattice-ed's, because
# the bond dimension DMRG needs grows with the number of sites. Measured (bench_lattice_results.md):
# 6+6 at g = 2 over these five spacings gives a relative error bar of 2e-4 in 5 CPU minutes; a ladder
# starting at a = 0.5 is not yet asymptotic for N = 12 (its limit moved by 1.5e-3).
SPACING_FRACTIONS = (0.4, 0.32, 0.25, 0.2, 0.16)
# Discarded weights below this count as no truncation at all.
NO_TRUNCATION = 1e-14
TRUNCATION_MODEL = DiscardedWeightLinear(no_truncation=NO_TRUNCATION)
# Sites of the finest lattice; the default ladder is fitted within it. The largest lattices measured
# (bench_lattice_results.md) have 95 sites (6+6, 5 CPU minutes for the ladder); a sweep's cost grows
# linearly with the sites, so 300 keeps a default ladder within tens of CPU minutes.
DEFAULT_MAX_SITES = 300
# A level's energy spread sqrt(<H^2> - <H>^2) above this (hbar omega_ref, one trap quantum / 2) means
# the MPS is not one eigenstate. Measured: converged levels have spreads of 2e-7 to 2e-4 (2+1 on 55
# sites, 3+1 on 68); 6+6 on 47 sites at chi 64 (discarded weight 2e-5) 0.15; the product start states
# 20-32. The stuck level of the module docstring (49.24 on 68 sites) lay between its start state (90.3)
# and the true level (1.96); its spread was not measured.
SPREAD_LIMIT = 0.5
# Seed of the scrambled start of a rerun (offset by the level), so that reruns are reproducible.
RETRY_SEED = 20_001


def _tenpy():
    """Import tenpy lazily (it is slow to import) and quiet its log."""
    import tenpy
    from tenpy.algorithms import dmrg
    from tenpy.models.model import CouplingMPOModel
    from tenpy.networks.mps import MPS
    from tenpy.networks.site import SpinHalfFermionSite

    # tenpy logs every sweep, and warns when the final MPS is not canonical to 1e-5; each MPS is
    # brought to canonical form right after its run here, so only errors are passed on
    logging.getLogger("tenpy").setLevel(logging.ERROR)
    return tenpy, dmrg, CouplingMPOModel, MPS, SpinHalfFermionSite


def lattice_model(problem: Problem, grid: lattice.Grid, constant: float = 0.0):
    """The tenpy model of the lattice Hamiltonian on ``grid`` (an open chain of ``grid.sites`` sites).

    ``constant`` is added to H (spread evenly over the sites): orthogonal DMRG projects the lower
    states out to energy zero, so the wanted excited state must lie below zero.
    """
    _, _, CouplingMPOModel, _, SpinHalfFermionSite = _tenpy()

    class TrappedLatticeModel(CouplingMPOModel):
        def init_sites(self, model_params):
            return SpinHalfFermionSite(cons_N="N", cons_Sz="Sz")

        def init_terms(self, model_params):
            terms = lattice.terms(problem, grid)
            for species, number, create, annihilate in ((0, "Nu", "Cdu", "Cu"), (1, "Nd", "Cdd", "Cd")):
                self.add_onsite(terms.onsite[species], 0, number)
                self.add_coupling(-terms.hopping[species], 0, create, 0, annihilate, 1, plus_hc=True)
            self.add_onsite(terms.interaction, 0, "NuNd")
            if constant:
                self.add_onsite(constant / grid.sites, 0, "Id")

    return TrappedLatticeModel({"L": grid.sites, "lattice": "Chain", "bc_MPS": "finite", "bc_x": "open"})


def initial_occupations(problem: Problem, grid: lattice.Grid) -> list[str]:
    """A product state with the particles spread over the trap, the species offset by half a spacing.

    Species s puts its N_s particles at evenly spaced points inside its classical region
    |x| < sqrt(2 N_s + 1) b_s (a quarter of a particle spacing to either side for up and down).
    """
    up, down = set(), set()
    for species, taken, shift in ((problem.up, up, -0.25), (problem.down, down, 0.25)):
        n = species.count
        if n == 0:
            continue
        reach = min(math.sqrt(2 * n + 1) * species.oscillator_length, grid.x[-1])
        points = reach * (2 * (np.arange(n) + 0.5 + shift) / n - 1)
        for x in points:
            j = int(np.argmin(np.abs(grid.x - x)))
            while j in taken:
                j = (j + 1) % grid.sites
            taken.add(j)
    names = {(False, False): "empty", (True, False): "up", (False, True): "down", (True, True): "full"}
    return [names[(j in up, j in down)] for j in range(grid.sites)]


def settled(stage: dict) -> bool:
    """A level done at this bond dimension: converged in sweeps with a discarded weight of at most
    ``NO_TRUNCATION``. A larger chi gives the same state (only weights below that are left to keep),
    so the ladder stops for it. Measured on 3+1 at mass ratio 2, g = 2, three levels, 52-127 sites:
    chi 64 discards at most 3e-13, yet every level went on to chi 128 and 256 (bonds up to 256) before
    this rule, 2314 CPU s in all; with it, 3+1 at mass ratio 1/2, g = 2, the same ladders, settles
    every level at chi 64 in 456 CPU s."""
    return stage["converged"] and stage["truncation_error"] <= NO_TRUNCATION


def sweep_tail(stage: dict) -> float:
    """What is left of a level's energy after a run stopped by ``max_sweeps``: the geometric tail of its
    sweep energies (``GeometricTail.bound`` of the last two changes: the last change when they halve, else
    2 d / (1 - r), or 10 x the larger change when they do not shrink); ten times the last change when only
    one change was measured. Measured, 3+1 at mass ratio 2, g = 20, 52 sites, chi 64: the energy crept down
    ~2e-5 per sweep for 20 sweeps, then by a ratio of 0.85-1.0 per sweep; the last change 8.5e-7 after 40
    sweeps, while 41 more sweeps at chi 128 went on 6.8e-6 further (this bound: 5.5e-5)."""
    last, previous = stage["last_change"], stage.get("previous_change")
    if previous is None:
        return 10 * last
    return GeometricTail.bound(last, previous, 0.0)[0]


def extrapolate_truncation(stages: list[dict]) -> tuple[float, float]:
    """(E, error) at zero discarded weight from the chi ladder of one state (``TRUNCATION_MODEL``)."""
    weights = [s["truncation_error"] for s in stages]
    if len(stages) == 1 and weights[0] > NO_TRUNCATION:
        raise SpecError(
            "param.chi",
            f"a single bond dimension {stages[0]['chi']} truncates (discarded weight {weights[0]:.2e});"
            " give a ladder of at least two so that the truncation error can be estimated",
        )
    fit = TRUNCATION_MODEL(weights, [s["energy"] for s in stages])
    return fit.value, fit.error


class LatticeDMRGBackend(Backend):
    name = "lattice-dmrg"
    version = "3"  # 3: densities extrapolated to the continuum with a bar (energies as in 2)
    summary = "Two-site DMRG (tenpy) on a finite-difference lattice, extrapolated in discarded weight and spacing"
    libraries = ("tenpy",)
    parameters = (
        *LADDER_PARAMETERS,
        Parameter("chi", tuple, (64, 128, 256), "ladder of bond dimensions, ascending"),
        Parameter("max_sweeps", int, 40, "sweep limit per bond dimension", minimum=2),
        Parameter("tolerance", float, 1e-10, "stop sweeping when |dE| / max(|E|, 1) falls below this", minimum=0.0),
        Parameter("mixer", bool, False, "subspace expansion (slows convergence on fine grids)"),
        Parameter(
            "threads",
            int,
            None,
            "BLAS threads inside the solve; default: the run's limit (--blas-threads, 1 unless raised)",
            minimum=1,
        ),
        Parameter(
            "max_sites",
            int,
            DEFAULT_MAX_SITES,
            "most sites of the finest lattice: the default ladder is fitted within it; given spacings beyond it are refused",
            minimum=4,
        ),
    )

    # momentum pair maps and noise need four-point functions over all site quadruples, and the MPS does
    # not resolve parity sectors: lattice-ed does both
    capabilities = Capabilities(
        trap_shapes=("harmonic", "harmonic+gaussian", "box"),
        parity_sectors=False,
        observables=("density", "momentum", "obdm", "pair_position", "contact", "trap_energy"),
        error_bars=True,
    )
    check_params = {"spacings": (0.6, 0.45), "chi": (8, 16), "max_sweeps": 4}

    def supports(self, problem: Problem, params: dict[str, Any] | None = None) -> Support:
        """Yes when a useful spacing ladder fits ``max_sites`` (the default ladder is coarsened to fit)."""
        params = self.resolve_params(params or {})
        return lattice.ladder_support(lambda: self.ladder(problem, params), "max_sites")

    def ladder(self, problem: Problem, params: dict[str, Any]) -> lattice.SpacingLadder:
        budget = Budget("max_sites", params["max_sites"], float, "sites")
        return lattice.resolve_ladder(
            problem, params["spacings"], params["x_max"], SPACING_FRACTIONS, budget, params["continuum_order"]
        )

    def compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        chis = tuple(int(c) for c in params["chi"])
        if not chis or any(c < 1 for c in chis) or list(chis) != sorted(set(chis)):
            raise SpecError("param.chi", f"got {list(params['chi'])}; give distinct positive bond dimensions, ascending")
        # the executor already limits the pools to the run's --blas-threads; only an explicit value overrides it
        limit = threadpool_limits(params["threads"]) if params["threads"] else contextlib.nullcontext()
        with limit, unchecked_tensors():
            return lattice.solve_continuum_ladder(
                problem,
                self.ladder(problem, params),
                lambda grid, final: solve_on_grid(problem, grid, final, chis, params),
                keep=problem.targets.states,
            )


def unchecked_tensors():
    """tenpy's optimization level ``skip_arg_checks`` for the solve: its tensors skip their
    per-construction sanity checks. Measured, identical energies: 2+1 on 46 and 57 sites at chi 16
    then 32, 26.1 against 34.1 CPU s; 2+2, g = 2, default spacings, chi 16 then 32, 112 against
    128 CPU s; at chi 32 then 64 (3+2) the gain is a few per cent, the contractions dominate."""
    from tenpy.tools.optimization import OptimizationFlag, temporary_level

    return temporary_level(OptimizationFlag.skip_arg_checks)


def solve_on_grid(problem: Problem, grid: lattice.Grid, final: bool, chis, params) -> LatticeLevels:
    """The k lowest levels on one lattice, each converged over the chi ladder (observables if ``final``)."""
    _, _, _, MPS, _ = _tenpy()
    model = lattice_model(problem, grid)
    start = MPS.from_product_state(
        model.lat.mps_sites(), initial_occupations(problem, grid), bc="finite", unit_cell_width=grid.sites
    )
    n_states = problem.targets.states
    found: list = []  # MPS of the lower levels at the current chi
    stages: list[list[dict]] = [[] for _ in range(n_states)]
    warnings: list[str] = []
    previous = [start.copy() for _ in range(n_states)]
    shift, shifted = 0.0, None
    for chi in chis:
        found = []
        for level in range(n_states):
            if stages[level] and settled(stages[level][-1]):
                found.append(previous[level].copy())  # a larger chi gives the same state
                continue
            if level == 1 and shifted is None:
                # put every wanted level below zero, where the projected-out ones sit
                shift = 2 * abs(stages[0][-1]["energy"]) + 50.0 * n_states
                shifted = lattice_model(problem, grid, constant=-shift)
            hamiltonian, offset = (shifted, shift) if level else (model, 0.0)
            psi, stage = _run_level(previous[level], hamiltonian, offset, chi, found, params, params["mixer"])
            if settled(stage) or chi == chis[-1]:
                psi, stage = _checked_level(model, psi, stage, start, hamiltonian, offset, found, params, level)
            stages[level].append(stage)
            found.append(psi)
            previous[level] = psi.copy()
        if all(settled(stage[-1]) for stage in stages):
            break

    energies, errors = [], []
    for level in range(n_states):
        value, error = extrapolate_truncation(stages[level])
        last = stages[level][-1]
        if not last["converged"]:
            warnings.append(
                f"DMRG did not converge: level {level}, L = {grid.sites}, chi = {last['chi']}: energy still moved"
                f" {last['last_change']:.2e} in the last of {last['sweeps']} sweeps (max_sweeps = {params['max_sweeps']});"
                f" {sweep_tail(last):.2e} added to its error for the sweeps not done"
            )
        if last["spread"] > SPREAD_LIMIT:
            warnings.append(
                f"DMRG level {level}, L = {grid.sites}, chi = {last['chi']}: not an eigenstate (energy spread"
                f" {last['spread']:.3g} > {SPREAD_LIMIT} hbar omega, also after a retry); its spread is added to the error"
            )
        energies.append(value)
        errors.append(
            error
            + (0.0 if last["converged"] else sweep_tail(last))
            + (last["spread"] if last["spread"] > SPREAD_LIMIT else 0.0)
        )

    sites = [_expectations(problem, psi, final) for psi in found]
    levels = LatticeLevels(
        energies=energies,
        solver_errors=errors,
        states=[{"level": k} for k in range(n_states)],
        scalars=[
            lattice_observables.scalars(problem, grid, site, stage[-1]["energy"])
            for site, stage in zip(sites, stages)
        ],
        site_densities=[site.densities for site in sites],
        diagnostics={"sites": grid.sites, "spacing": grid.spacing, "chi_ladder": stages},
        warnings=warnings,
    )
    if final:
        levels.observe = lambda level, rank: lattice_observables.observables(problem, grid, sites[level], rank)
    return levels


def _run_level(psi, hamiltonian, offset: float, chi: int, found: list, params, mixer: bool):
    """One two-site DMRG run at bond dimension ``chi`` from ``psi``, orthogonal to ``found``.

    Returns the canonical MPS and its stage record (energy in hbar omega_ref with ``offset`` undone,
    discarded weight of the last sweep, sweeps, last energy change, convergence, largest bond).
    """
    _, dmrg, _, _, _ = _tenpy()
    options = {
        "trunc_params": {"chi_max": chi, "svd_min": 1e-14},
        "mixer": mixer,
        "max_E_err": params["tolerance"],
        "max_S_err": 1.0,
        "min_sweeps": 2,
        "max_sweeps": params["max_sweeps"],
        "combine": True,
        "max_trunc_err": None,
        "P_tol_to_trunc": None,
        "lanczos_params": {"P_tol": 1e-14, "E_tol": 1e-15},
    }
    engine = dmrg.TwoSiteDMRGEngine(psi, hamiltonian, options, orthogonal_to=list(found))
    energy, psi = engine.run()
    energy += offset
    stats = engine.sweep_stats
    change = abs(stats["E"][-1] - stats["E"][-2]) if len(stats["E"]) > 1 else math.inf
    previous_change = abs(stats["E"][-2] - stats["E"][-3]) if len(stats["E"]) > 2 else None
    max_bond = int(max(psi.chi))
    psi.canonical_form()
    return psi, {
        "chi": chi,
        "energy": float(energy),
        "truncation_error": float(stats["max_trunc_err"][-1]),
        "sweeps": int(stats["sweep"][-1]),
        "last_change": float(change),
        "previous_change": None if previous_change is None else float(previous_change),
        "converged": bool(change <= params["tolerance"] * max(abs(energy), 1.0)),
        "max_bond": max_bond,
    }


def energy_spread(model, psi) -> float:
    """sigma = sqrt(<H^2> - <H>^2) of the MPS under the lattice Hamiltonian, in hbar omega_ref.

    Weinstein's bound (D. H. Weinstein, Proc. Natl. Acad. Sci. USA 20, 529 (1934); cited from
    memory): some eigenvalue of H lies within sigma of <H>. Costs one MPO-MPO contraction
    (0.2-0.5 CPU s on 55-68 sites at chi 64).
    """
    return math.sqrt(max(float(np.real(model.H_MPO.variance(psi))), 0.0))


def _checked_level(model, psi, stage, start, hamiltonian, offset, found, params, level):
    """The level's final MPS, run again if it is not an eigenstate (energy spread above ``SPREAD_LIMIT``).

    The rerun starts from the product state scrambled by a seeded random unitary evolution and uses
    the mixer; of the two runs the one with the smaller spread is kept, the other is recorded in
    ``stage['retry']``.
    """
    stage = {**stage, "spread": energy_spread(model, psi)}
    if stage["spread"] <= SPREAD_LIMIT:
        return psi, stage
    fresh = start.copy()
    saved = np.random.get_state()
    try:
        np.random.seed(RETRY_SEED + level)
        fresh.perturb({"N_steps": 10, "trunc_params": {"chi_max": stage["chi"]}}, close_1=False)
    finally:
        np.random.set_state(saved)
    again, retry = _run_level(fresh, hamiltonian, offset, stage["chi"], found, params, mixer=True)
    retry["spread"] = energy_spread(model, again)
    if retry["spread"] < stage["spread"]:
        return again, {**retry, "retry": {"replaced": stage}}
    return psi, {**stage, "retry": {"discarded": retry}}


def _expectations(problem: Problem, psi, final: bool) -> lattice_observables.SiteExpectations:
    want_obdm = final and lattice_observables.needs_obdm(problem)
    want_pair = final and lattice_observables.needs_pair(problem)
    return lattice_observables.SiteExpectations(
        densities=(np.real(psi.expectation_value("Nu")), np.real(psi.expectation_value("Nd"))),
        double_occupancy=np.real(psi.expectation_value("NuNd")),
        obdm=(
            (np.real(psi.correlation_function("Cdu", "Cu")), np.real(psi.correlation_function("Cdd", "Cd")))
            if want_obdm
            else None
        ),
        pair=np.real(psi.correlation_function("Nu", "Nd")) if want_pair else None,
    )
