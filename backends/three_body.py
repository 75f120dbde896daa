"""Backend ``three-body``: precision solver for 2+1 (and 1+2) fermions in a common harmonic trap.

Method. With one trap frequency omega the centre of mass separates exactly (E = omega (n_cm + 1/2)
+ E_rel). The relative motion of two identical fermions and a third particle, in mass-scaled Jacobi
coordinates, is a 2D isotropic oscillator whose contact interactions sit on the two coincidence
lines of the odd particle with the pair; the pair's antisymmetry and the parity reduce it to a quarter
plane with one contact ray (``jacobi_plane``, where the geometry is derived). That problem is solved
by Galerkin spectral elements in polar coordinates (element boundary on the ray, so the contact
condition enters exactly through the weak form and convergence in the polynomial order p is
exponential; hp-FEM as in C. Schwab, "p- and hp-Finite Element Methods", Oxford 1998 [reference from memory]). Units:
hbar = omega = 1 inside; a common omega rescales E(g, omega) = omega E(g / sqrt(omega), 1).

The mesh adapts to g: radial elements graded geometrically toward rho = 0 below rho ~ 1/|lambda|
(lambda = g sqrt(mu), mu the pair-odd reduced mass), the scale on which the contact changes the
angular shape, up to R where the highest wanted level's Gaussian tail is below 1e-18; for g < 0 the
angular mesh is graded around the ray on the bound pair's width 1/(3 |lambda|) (at rho ~ 3).

Error bars. The mesh is fixed and p runs over a ladder (order - (ladder - 1) step, ..., order), solved
by the shared convergence ladder (``ladder.run_ladder``, levels followed by relative parity and rank)
with the ``extrapolation.GeometricTail`` model: the
spaces are nested, so each level decreases monotonically to its limit (min-max principle). With
differences d_prev, d_last of the last three rungs, convergence at a ratio r = d_last/d_prev <= 1/2
leaves at most d_last r/(1 - r) <= d_last below the finest value: the bar is d_last; slower
convergence gets 2 d_last / (1 - r) (r < 1) or 10 max(d) with a warning. A floor of 1e-12 max(1, |E|)
covers rounding (measured scatter ~1e-13). The step is even: odd and even degrees converge at
different rates, and a step-1 ladder's bar missed 8 % of the levels of a coverage study where the even
steps missed none (bench_three_body_results.md). Scalars are Hellmann-Feynman derivatives of the same Ritz
values (dE/dg = <sum delta>, dE/d(omega^2) ~ <rho^2>), with bars by the same rule.

Scalars (result.SCALAR_NAMES; state k > 0 with suffix @k): ``delta`` = <sum_ij delta(x_i - x_j)> =
dE/dg, ``contact`` = (2 mu)^2 g^2 <sum delta>, ``trap_energy`` = <sum V_trap> = omega ((n_cm + 1/2)/2
+ <rho^2>/2) and ``kinetic_energy`` = E - trap_energy - g delta. The virial theorem
E = 2 <V_trap> + (g/2) <sum delta> holds for the exact states; its residual is in diagnostics.
Observables: ``density`` (density_up, density_down of the first reported state, normalized to N_s) by
quadrature of |psi|^2 over the plane (see ``densities``), with an error bar from the same geometric-tail
rule applied to the largest change over the grid between the last three orders; the others are refused.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..problems.exact.oscillator import hermite_function
from ..problems.spec import Problem
from .base import Backend, Capabilities, Parameter, SolverError, Support
from .extrapolation import GeometricTail
from .jacobi_plane import QuarterPlane, RelativeSolution, angular_nodes, jacobi_angle, radial_nodes
from .ladder import Rung, RungLevel, run_ladder
from .result import Observable, Solution

ROUNDING_FLOOR = 1e-12  # relative to max(1, |value|): scatter of converged Ritz values, measured ~1e-13
TAIL_EXPONENT = 41.0  # R solves (2E + 2) ln R - R^2 = -41: the level's Gaussian tail below 1e-18 at R
RELATIVE_PARITIES = (-1, +1)
DENSITY_CHUNK = 4096  # quadrature points per block when summing the density kernels (memory ~ grid x chunk)


@dataclass
class RelativeLevel:
    energy: float  # E_rel in units of omega
    error: float
    parity: int  # relative parity (x -> -x)
    ray_density: float  # int psi^2 d rho on the ray (quarter-plane normalization)
    ray_density_error: float
    rho_squared: float
    rho_squared_error: float
    converged: bool
    plane: QuarterPlane  # finest discretization and its solution, for observables
    solution: RelativeSolution
    index: int
    earlier: tuple = ()  # (plane, solution, index) of the two rungs before, for the observables' error bars


def outer_radius(energy: float) -> float:
    """R with (2E + 2) ln R - R^2 <= -TAIL_EXPONENT: the level's Gaussian tail is negligible beyond it."""
    radius = 6.0
    while (2 * max(energy, 0.0) + 2) * math.log(radius) - radius**2 > -TAIL_EXPONENT:
        radius += 0.25
    return radius


class ThreeBodyBackend(Backend):
    name = "three-body"
    version = "2"
    summary = (
        "2+1 / 1+2 in a common harmonic trap: Galerkin spectral elements in the mass-scaled Jacobi plane"
        " (contact rays on element boundaries), p-ladder error bars; any masses, any g"
    )
    capabilities = Capabilities(
        particle_counts=((2, 1), (1, 2)),
        unequal_frequencies=False,  # the centre of mass separates only with one trap frequency
        observables=("density", "contact", "trap_energy"),
        error_bars=True,
    )
    check_params = {"order": 10}  # ladder 6, 8, 10: ~1e-10 on the check suite's problems, a few times cheaper
    parameters = (
        Parameter("order", int, 14, "polynomial degree of the finest rung, in rho and in phi", minimum=4),
        Parameter("ladder", int, 3, "rungs of the p-ladder (3 are needed to check geometric convergence)", minimum=3),
        Parameter(
            "step",
            int,
            2,
            "degree increment between rungs; even, since odd and even degrees converge at different rates"
            " (with step 1 the bar missed 8% of levels, with 2 or 4 none; bench_three_body_results.md)",
            choices=(2, 4),
        ),
        Parameter(
            "radius",
            float,
            None,
            "outer radius R of the relative plane (oscillator lengths); default from the highest wanted level",
            minimum=3.0,
            allow_none=True,
        ),
    )

    def supports(self, problem: Problem, params: dict[str, Any] | None = None) -> Support:
        if sorted((problem.up.count, problem.down.count)) != [1, 2]:
            return Support.no(
                f"solves two identical fermions plus one other particle, 2+1 or 1+2 (got {problem.up.count}+{problem.down.count})"
            )
        if not problem.trap.is_harmonic:
            return Support.no(f"needs a harmonic trap (got '{problem.trap.shape}')")
        if not problem.equal_frequencies:
            return Support.no(
                "needs one trap frequency for both species: only then does the centre of mass separate"
                f" (got omega_up = {problem.up.omega:g}, omega_down = {problem.down.omega:g})"
            )
        if params is not None:
            lowest = params["order"] - (params["ladder"] - 1) * params["step"]
            if lowest < 2:
                return Support.no(
                    f"the p-ladder reaches degree {lowest}; raise param.order or lower param.ladder / param.step"
                )
        return Support.yes()

    # ------------------------------------------------------------------ relative problem
    def relative_levels(self, problem: Problem, params: dict[str, Any], count: int) -> tuple[list[RelativeLevel], dict]:
        """The ``count`` lowest relative levels of each relative parity, in units of omega, with error bars."""
        pair, odd = (problem.up, problem.down) if problem.up.count == 2 else (problem.down, problem.up)
        omega = pair.omega
        mu = pair.mass * odd.mass / (pair.mass + odd.mass)
        alpha = jacobi_angle(pair.mass, odd.mass)
        lam = problem.coupling / math.sqrt(omega) * math.sqrt(mu)
        core = 1.0 / max(1.0, abs(lam))
        radius = params["radius"] or outer_radius(6.0 + 2.0 * count)
        radial = radial_nodes(radius, core)
        angular = angular_nodes(alpha, 1.0 / (3.0 * abs(lam)) if lam < 0 else None)
        # lowest levels: >= 2 (relative parity -1) and >= 3 (+1) at g >= 0; for g < 0 each of the two
        # contact lines binds at most -mu g^2 with half the kinetic energy, so E_rel >= -2 lambda^2
        sigma = 1.5 if lam >= 0 else -2.0 * lam * lam - 1.0
        orders = [params["order"] - k * params["step"] for k in range(params["ladder"] - 1, -1, -1)]
        model = GeometricTail(rounding=ROUNDING_FLOOR)
        levels: list[RelativeLevel] = []
        dimensions = []
        ladders = {}
        for parity in RELATIVE_PARITIES:
            runs: list[RelativeSolution] = []

            def solve_rung(order: float, final: bool, parity: int = parity, runs: list = runs) -> Rung:
                plane = QuarterPlane(alpha, lam, parity, int(order), radial, angular)
                shift = sigma
                if len(runs) >= 2:
                    # a shift close below the levels makes shift-invert converge in few iterations; the
                    # next rung lies below this one (nested spaces) by less than the last change, which
                    # shrinks geometrically: four times it (and a quarter of |E|) keeps the shift below
                    lowest, change = runs[-1].energies[0], runs[-2].energies[0] - runs[-1].energies[0]
                    shift = max(sigma, lowest - max(0.25 * max(1.0, abs(lowest)), 4 * abs(change)))
                run = plane.lowest(count, shift)
                if run.energies[0] < shift:  # a level below the shift: the guess failed, use the bound
                    run = plane.lowest(count, sigma)
                runs.append(run)
                return Rung(
                    step=order,
                    levels={
                        k: RungLevel(
                            energy=float(run.energies[k]),
                            scalars={"ray_density": float(run.ray_density[k]), "rho_squared": float(run.rho_squared[k])},
                            payload=(plane, run, k),
                        )
                        for k in range(len(run.energies))
                    },
                    diagnostics={"dimension": run.dimension},
                )

            ladder = run_ladder(orders, solve_rung, model, keep=count, floor=ROUNDING_FLOOR, scalar_floor=ROUNDING_FLOOR)
            dimensions.append(ladder.final.diagnostics["dimension"])
            energies = np.array(ladder.diagnostics()["raw_energies"])  # [rung][level], coarse -> fine
            ladders[f"relative_parity_{parity:+d}"] = energies.T.tolist()
            if np.any(np.diff(energies, axis=0) > 1e-9 * np.maximum(1.0, np.abs(energies[1:]))):
                raise SolverError(
                    f"{self.name}: a level rose with the polynomial order (min-max principle violated);"
                    f" energies along the ladder {energies.tolist()}"
                )
            for rank, key in enumerate(ladder.keys):
                suffix = "" if rank == 0 else f"@{rank}"
                plane, solution, index = ladder.final.levels[key].payload
                levels.append(
                    RelativeLevel(
                        energy=ladder.energies[rank],
                        error=ladder.energy_errors[rank],
                        parity=parity,
                        ray_density=ladder.scalars["ray_density" + suffix],
                        ray_density_error=ladder.scalar_errors["ray_density" + suffix],
                        rho_squared=ladder.scalars["rho_squared" + suffix],
                        rho_squared_error=ladder.scalar_errors["rho_squared" + suffix],
                        converged=ladder.energy_fits[rank].get("warning") is None,
                        plane=plane,
                        solution=solution,
                        index=index,
                        earlier=tuple(rung.levels[key].payload for rung in ladder.rungs[-3:-1]),
                    )
                )
        info = {
            "alpha": alpha,
            "lambda": lam,
            "radius": radius,
            "orders": orders,
            "radial_elements": len(radial) - 1,
            "angular_elements": len(angular) - 1,
            "dimension_per_sector": dimensions,
            "ladder_relative_energies": ladders,
        }
        return levels, info

    # ------------------------------------------------------------------ full spectrum
    def compute(self, problem: Problem, params: dict[str, Any]) -> Solution:
        wanted = problem.targets.states
        omega, g = problem.up.omega, problem.coupling
        pair, odd = (problem.up, problem.down) if problem.up.count == 2 else (problem.down, problem.up)
        mu = pair.mass * odd.mass / (pair.mass + odd.mass)
        relative, info = self.relative_levels(problem, params, wanted)
        # every total level: relative level x centre-of-mass excitation n; parity = p_rel (-1)^n.
        # ``wanted`` relative levels per relative parity contain the lowest ``wanted`` total levels of
        # either total parity (a relative level beyond them comes after its lower siblings at the same n).
        spectrum = []
        for level in relative:
            for n in range(wanted + 1):
                spectrum.append((omega * (level.energy + n + 0.5), level, n, level.parity * (-1) ** n))
        spectrum.sort(key=lambda item: item[0])
        sector = {"any": None, "even": 1, "odd": -1}[problem.targets.parity]
        chosen = [item for item in spectrum if sector is None or item[3] == sector][:wanted]
        energies, errors, states, warnings = [], [], [], []
        scalars: dict[str, float] = {}
        scalar_errors: dict[str, float] = {}
        virial = []
        for k, (energy, level, n, parity) in enumerate(chosen):
            error = omega * level.error
            degeneracy = sum(
                1
                for other in spectrum
                if abs(other[0] - energy) <= max(2 * (error + omega * other[1].error), 1e-9 * max(1.0, abs(energy)))
            )
            energies.append(energy)
            errors.append(error)
            states.append({"parity": parity, "com": n, "degeneracy": degeneracy, "relative_parity": level.parity})
            if not level.converged:
                warnings.append(f"state {k}: the p-ladder did not converge geometrically; its error bar is widened")
            suffix = "" if k == 0 else f"@{k}"
            delta = math.sqrt(omega) * math.sqrt(mu) * level.ray_density
            delta_error = math.sqrt(omega) * math.sqrt(mu) * level.ray_density_error
            trap = omega * ((n + 0.5) / 2 + level.rho_squared / 2)
            trap_error = omega * level.rho_squared_error / 2
            scalars[f"delta{suffix}"] = delta
            scalars[f"contact{suffix}"] = (2 * mu) ** 2 * g * g * delta
            scalars[f"trap_energy{suffix}"] = trap
            scalars[f"kinetic_energy{suffix}"] = energy - trap - g * delta
            scalar_errors[f"delta{suffix}"] = delta_error
            scalar_errors[f"contact{suffix}"] = (2 * mu) ** 2 * g * g * delta_error
            scalar_errors[f"trap_energy{suffix}"] = trap_error
            scalar_errors[f"kinetic_energy{suffix}"] = error + trap_error + abs(g) * delta_error
            virial.append(energy - 2 * trap - 0.5 * g * delta)
        info["virial_residuals"] = virial
        observables = {}
        if "density" in problem.targets.observables:
            observables = self.densities(problem, chosen[0][1], chosen[0][2])
        return Solution(
            energies=energies,
            states=states,
            observables=observables,
            scalars=scalars,
            scalar_errors=scalar_errors,
            error_estimate=max(errors),
            energy_errors=errors,
            diagnostics=info,
            warnings=warnings,
        )

    # ------------------------------------------------------------------ observables of state 0
    def densities(self, problem: Problem, level: RelativeLevel, n_cm: int) -> dict[str, Observable]:
        """n_s(x) of the first reported state, normalized to N_s (oscillator units inside, omega = 1).

        In mass-scaled coordinates q = Q u_0 + r_x e_x + r_y e_y (u_0 the centre-of-mass direction,
        e_x along the pair's line x_1 = x_2 in the plane, e_y its normal), so x_i = Q/sqrt(M) + s_i(r)
        with s_i(r) = (r . e_i)/sqrt(m_i), and

            n_i(x) = int d^2r |psi(r)|^2 sqrt(M) h_n(sqrt(M) (x - s_i(r)))^2

        (h_n the unit-width oscillator function of the COM excitation). |psi|^2 on the plane is the
        quarter's, repeated on its four images (x, +-y), (-x, +-y) (exchange and parity), each with 1/4.
        """
        pair_label, odd_label = ("up", "down") if problem.up.count == 2 else ("down", "up")
        pair, odd = (problem.up, problem.down) if problem.up.count == 2 else (problem.down, problem.up)
        omega = pair.omega
        masses = np.array([pair.mass, pair.mass, odd.mass])
        total = masses.sum()
        com = np.sqrt(masses / total)
        e_y = np.array([1.0, -1.0, 0.0]) / math.sqrt(2)  # normal of x_1 = x_2 (equal pair masses)
        e_x = np.cross(e_y, com)  # in the plane, along the pair's line
        x_max, _ = problem.extent()
        x = np.linspace(-x_max, x_max, problem.targets.grid_points)
        scaled = x * math.sqrt(omega)

        def pair_and_odd(plane: QuarterPlane, solution: RelativeSolution, index: int) -> tuple[np.ndarray, np.ndarray]:
            rho, phi, weights = plane.density_on_grid(solution.vectors[index])
            rx, ry, w = (rho * np.cos(phi)).ravel(), (rho * np.sin(phi)).ravel(), weights.ravel() / 4
            images_x = np.concatenate([rx, rx, -rx, -rx])
            images_y = np.concatenate([ry, -ry, ry, -ry])
            images_w = np.concatenate([w, w, w, w])

            def particle_density(i: int) -> np.ndarray:
                shift = (images_x * e_x[i] + images_y * e_y[i]) / math.sqrt(masses[i])
                density = np.zeros_like(scaled)
                for start in range(0, shift.size, DENSITY_CHUNK):
                    block = slice(start, start + DENSITY_CHUNK)
                    kernel = hermite_function(n_cm, math.sqrt(total) * (scaled[:, None] - shift[None, block])) ** 2
                    density += math.sqrt(total) * kernel @ images_w[block]
                return math.sqrt(omega) * density

            return particle_density(0) + particle_density(1), particle_density(2)

        finest = pair_and_odd(level.plane, level.solution, level.index)
        errors: list[float | None] = [None, None]
        if len(level.earlier) == 2:  # the geometric-tail rule of the energies, on sup-norm distances
            first, second = (pair_and_odd(*payload) for payload in level.earlier)
            for s in range(2):
                last, previous = np.max(np.abs(finest[s] - second[s])), np.max(np.abs(second[s] - first[s]))
                floor = ROUNDING_FLOOR * max(1.0, float(np.max(np.abs(finest[s]))))
                errors[s] = float(max(GeometricTail.bound(float(last), float(previous), floor)[0], floor))
        return {
            f"density_{pair_label}": Observable(
                finest[0], {"x": x}, "1/length", f"integral dx = 2 (the {pair_label} pair)", error=errors[0]
            ),
            f"density_{odd_label}": Observable(
                finest[1], {"x": x}, "1/length", f"integral dx = 1 (one {odd_label} particle)", error=errors[1]
            ),
        }
