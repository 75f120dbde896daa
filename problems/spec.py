"""The problem specification: plain, immutable, validated data.

A problem is two species of fermions (each with a particle count, a mass in units of the reference
mass m0 and a trap frequency in units of omega_ref) in a one-dimensional trap, with a contact
interaction g between unlike species (one value or a scan), and targets (how many states, which
parity sector, which observables). Units: hbar = omega_ref = 1; lengths in sqrt(hbar/(m0 omega_ref)),
g in sqrt(hbar^3 omega_ref / m0). The Hamiltonian is

    H = sum_s sum_i [p_i^2 / (2 m_s) + V_s(x_i)] + g sum_{i in up, j in down} delta(x_i - x_j)

with V_s(x) = m_s omega_s^2 x^2 / 2 for the harmonic trap (see ``Trap`` for the other shapes).

``Problem.from_dict`` is the single entry point for untrusted input: every malformed field gives a
``SpecError`` naming the field; nothing deeper in trapbench re-validates.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from .errors import SpecError, reject_unknown_keys, show
from .units import CouplingConversion, olshanii_coupling

TRAP_SHAPES = ("harmonic", "harmonic+gaussian", "box")
PARITY_SECTORS = ("any", "even", "odd")
OBSERVABLES = (
    "density",  # n_s(x), normalized to N_s
    "momentum",  # n_s(p), normalized to N_s (integral dp)
    "obdm",  # one-body density matrix rho_s(x, x')
    "pair_position",  # G(x_up, x_down) = <n_up(x1) n_down(x2)>
    "pair_momentum",  # G(p_up, p_down)
    "noise",  # C(p1, p2) = G(p1, p2) - n_up(p1) n_down(p2) and its integral of C^2
    "contact",  # <sum delta(x_up - x_down)> and Tan's contact
    "trap_energy",  # <V_trap>
)
MAX_STATES = 1000


# ----------------------------------------------------------------------------- field readers


def _number(value: Any, field: str, *, positive: bool = False, nonnegative: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        kind = "a string" if isinstance(value, str) else type(value).__name__
        raise SpecError(field, f"got {show(value)} ({kind}); give a real number")
    value = float(value)
    if not math.isfinite(value):
        raise SpecError(field, f"got {show(value)}; give a finite real number (NaN and inf are not allowed)")
    if positive and value <= 0:
        raise SpecError(field, f"got {show(value)}; must be > 0")
    if nonnegative and value < 0:
        raise SpecError(field, f"got {show(value)}; must be >= 0")
    return value


def _count(value: Any, field: str, *, minimum: int = 0, maximum: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise SpecError(field, f"got {show(value)}; give a whole number >= {minimum}")
    if value < minimum or (maximum is not None and value > maximum):
        upper = f" and <= {maximum}" if maximum is not None else ""
        raise SpecError(field, f"got {value}; must be >= {minimum}{upper}")
    return value


def _table(value: Any, field: str) -> Mapping:
    if not isinstance(value, Mapping):
        raise SpecError(field, f"got {show(value)}; expected a table of keys")
    return value


def _number_list(value: Any, field: str) -> tuple[float, ...]:
    values = value if isinstance(value, (list, tuple)) else [value]
    if not values:
        raise SpecError(field, "got an empty list; give at least one value")
    return tuple(_number(v, f"{field}[{i}]" if len(values) > 1 else field) for i, v in enumerate(values))


# ----------------------------------------------------------------------------- components


@dataclass(frozen=True)
class Species:
    """One species: ``count`` identical fermions of mass ``mass`` (units of m0), trap frequency ``omega``."""

    name: str
    count: int
    mass: float = 1.0
    omega: float = 1.0

    @property
    def oscillator_length(self) -> float:
        """b = sqrt(hbar / (m omega)) in units of sqrt(hbar/(m0 omega_ref))."""
        return 1.0 / math.sqrt(self.mass * self.omega)

    @classmethod
    def from_dict(cls, data: Any, where: str) -> Species:
        data = _table(data, where)
        reject_unknown_keys(data, ("name", "count", "mass", "omega"), where)
        if "count" not in data:
            raise SpecError(f"{where}.count", "missing; give the number of particles of this species")
        name = data.get("name", where)
        if not isinstance(name, str) or not name.strip():
            raise SpecError(f"{where}.name", f"got {show(name)}; give a non-empty string")
        return cls(
            name=name,
            count=_count(data["count"], f"{where}.count"),
            mass=_number(data.get("mass", 1.0), f"{where}.mass", positive=True),
            omega=_number(data.get("omega", 1.0), f"{where}.omega", positive=True),
        )

    def to_dict(self) -> dict:
        return {"name": self.name, "count": self.count, "mass": self.mass, "omega": self.omega}


@dataclass(frozen=True)
class Trap:
    """The one-body potential V_s(x) felt by species s (energies in hbar omega_ref).

    - ``harmonic``: V_s = m_s omega_s^2 x^2 / 2.
    - ``harmonic+gaussian``: harmonic plus a barrier h exp(-(x - c)^2 / (2 w^2)), the same for both species.
    - ``box``: hard walls at |x| = half_width, V = 0 inside (species' omega is ignored).
    """

    shape: str = "harmonic"
    barrier_height: float = 0.0
    barrier_width: float = 1.0
    barrier_center: float = 0.0
    half_width: float = 0.0

    _KEYS = {
        "harmonic": ("shape",),
        "harmonic+gaussian": ("shape", "barrier_height", "barrier_width", "barrier_center"),
        "box": ("shape", "half_width"),
    }

    @classmethod
    def from_dict(cls, data: Any, where: str = "trap") -> Trap:
        data = _table(data, where)
        shape = data.get("shape", "harmonic")
        if shape not in TRAP_SHAPES:
            raise SpecError(f"{where}.shape", f"got {show(shape)}; allowed: {', '.join(TRAP_SHAPES)}")
        reject_unknown_keys(data, cls._KEYS[shape], where)
        if shape == "harmonic+gaussian":
            for key in ("barrier_height", "barrier_width"):
                if key not in data:
                    raise SpecError(f"{where}.{key}", "missing; the harmonic+gaussian trap needs it")
            return cls(
                shape=shape,
                barrier_height=_number(data["barrier_height"], f"{where}.barrier_height"),
                barrier_width=_number(data["barrier_width"], f"{where}.barrier_width", positive=True),
                barrier_center=_number(data.get("barrier_center", 0.0), f"{where}.barrier_center"),
            )
        if shape == "box":
            if "half_width" not in data:
                raise SpecError(f"{where}.half_width", "missing; the box trap needs its half width")
            return cls(shape=shape, half_width=_number(data["half_width"], f"{where}.half_width", positive=True))
        return cls()

    def to_dict(self) -> dict:
        return {key: getattr(self, key) for key in self._KEYS[self.shape]}

    @property
    def is_harmonic(self) -> bool:
        return self.shape == "harmonic"

    @property
    def is_symmetric(self) -> bool:
        """True when V(x) = V(-x), so that parity is a good quantum number."""
        return self.shape != "harmonic+gaussian" or self.barrier_center == 0.0

    def potential(self, x: np.ndarray, species: Species) -> np.ndarray:
        """V_s(x) on an array of positions; +inf outside a box."""
        x = np.asarray(x, dtype=float)
        if self.shape == "box":
            return np.where(np.abs(x) < self.half_width, 0.0, np.inf)
        v = 0.5 * species.mass * species.omega**2 * x**2
        if self.shape == "harmonic+gaussian":
            v = v + self.barrier_height * np.exp(-((x - self.barrier_center) ** 2) / (2 * self.barrier_width**2))
        return v


@dataclass(frozen=True)
class Targets:
    """What to compute: the ``states`` lowest levels (in a parity sector), and observables.

    Observables are evaluated on a uniform grid of ``grid_points`` points over [-x_max, x_max]
    (positions) and [-p_max, p_max] (momenta, units of sqrt(hbar m0 omega_ref)); ``None`` extents
    are chosen from the problem by ``Problem.extent``.
    """

    states: int = 1
    parity: str = "any"
    observables: tuple[str, ...] = ()
    grid_points: int = 201
    x_max: float | None = None
    p_max: float | None = None

    @classmethod
    def from_dict(cls, data: Any, where: str = "targets") -> Targets:
        data = _table(data, where)
        reject_unknown_keys(data, ("states", "parity", "observables", "grid_points", "x_max", "p_max"), where)
        parity = data.get("parity", "any")
        if parity not in PARITY_SECTORS:
            raise SpecError(f"{where}.parity", f"got {show(parity)}; allowed: {', '.join(PARITY_SECTORS)}")
        observables = data.get("observables", [])
        if isinstance(observables, str) or not isinstance(observables, (list, tuple)):
            raise SpecError(f"{where}.observables", f"got {show(observables)}; give a list of names")
        for i, name in enumerate(observables):
            if name not in OBSERVABLES:
                raise SpecError(f"{where}.observables[{i}]", f"got {show(name)}; allowed: {', '.join(OBSERVABLES)}")
        extents = {}
        for key in ("x_max", "p_max"):
            if data.get(key) is not None:
                extents[key] = _number(data[key], f"{where}.{key}", positive=True)
        return cls(
            states=_count(data.get("states", 1), f"{where}.states", minimum=1, maximum=MAX_STATES),
            parity=parity,
            observables=tuple(dict.fromkeys(observables)),
            grid_points=_count(data.get("grid_points", 201), f"{where}.grid_points", minimum=16, maximum=100_000),
            **extents,
        )

    def to_dict(self) -> dict:
        data = {
            "states": self.states,
            "parity": self.parity,
            "observables": list(self.observables),
            "grid_points": self.grid_points,
        }
        data.update({k: getattr(self, k) for k in ("x_max", "p_max") if getattr(self, k) is not None})
        return data


@dataclass(frozen=True)
class PhysicalUnits:
    """Laboratory parameters from which masses and g are derived (see ``problems.units``)."""

    mass_up_u: float
    mass_down_u: float
    axial_frequency_hz: float
    transverse_frequency_hz: float
    scattering_length_bohr: tuple[float, ...]
    reference_mass_u: float | None = None

    _REQUIRED = ("mass_up_u", "mass_down_u", "axial_frequency_hz", "transverse_frequency_hz", "scattering_length_bohr")

    @classmethod
    def from_dict(cls, data: Any, where: str = "physical") -> PhysicalUnits:
        data = _table(data, where)
        reject_unknown_keys(data, cls._REQUIRED + ("reference_mass_u",), where)
        for key in cls._REQUIRED:
            if key not in data:
                raise SpecError(f"{where}.{key}", "missing; the physical-units block needs all of " + ", ".join(cls._REQUIRED))
        ref = data.get("reference_mass_u")
        return cls(
            mass_up_u=_number(data["mass_up_u"], f"{where}.mass_up_u", positive=True),
            mass_down_u=_number(data["mass_down_u"], f"{where}.mass_down_u", positive=True),
            axial_frequency_hz=_number(data["axial_frequency_hz"], f"{where}.axial_frequency_hz", positive=True),
            transverse_frequency_hz=_number(
                data["transverse_frequency_hz"], f"{where}.transverse_frequency_hz", positive=True
            ),
            scattering_length_bohr=_number_list(data["scattering_length_bohr"], f"{where}.scattering_length_bohr"),
            reference_mass_u=None if ref is None else _number(ref, f"{where}.reference_mass_u", positive=True),
        )

    def to_dict(self) -> dict:
        data = {key: getattr(self, key) for key in self._REQUIRED}
        data["scattering_length_bohr"] = list(self.scattering_length_bohr)
        if self.reference_mass_u is not None:
            data["reference_mass_u"] = self.reference_mass_u
        return data

    def conversions(self) -> list[CouplingConversion]:
        return [
            olshanii_coupling(
                self.mass_up_u,
                self.mass_down_u,
                self.axial_frequency_hz,
                self.transverse_frequency_hz,
                a,
                self.reference_mass_u,
            )
            for a in self.scattering_length_bohr
        ]


# ----------------------------------------------------------------------------- the problem

TOP_LEVEL_KEYS = ("label", "up", "down", "trap", "interaction", "targets", "physical")


@dataclass(frozen=True)
class Problem:
    """A complete, validated problem. Build it with ``Problem.from_dict`` or ``Problem.create``."""

    up: Species
    down: Species
    g: tuple[float, ...]
    trap: Trap = field(default_factory=Trap)
    targets: Targets = field(default_factory=Targets)
    physical: PhysicalUnits | None = None
    label: str = ""

    # ------------------------------------------------------------------ construction
    @classmethod
    def from_dict(cls, data: Any) -> Problem:
        """Validate a plain mapping (as read from TOML or JSON) into a Problem."""
        data = _table(data, "problem")
        reject_unknown_keys(data, TOP_LEVEL_KEYS, "")
        for key in ("up", "down"):
            if key not in data:
                raise SpecError(key, f"missing; give the species table [{key}] with at least 'count'")
        up = Species.from_dict(data["up"], "up")
        down = Species.from_dict(data["down"], "down")
        if up.count + down.count < 1:
            raise SpecError("up.count", "both counts are 0; a problem needs at least one particle")
        label = data.get("label", "")
        if not isinstance(label, str):
            raise SpecError("label", f"got {show(label)}; give a string")
        trap = Trap.from_dict(data.get("trap", {}))
        targets = Targets.from_dict(data.get("targets", {}))
        physical = None
        if "physical" in data:
            physical = PhysicalUnits.from_dict(data["physical"])
            if "interaction" in data:
                raise SpecError(
                    "interaction.g",
                    "given together with physical.scattering_length_bohr; give one of them, not both",
                )
            conversions = physical.conversions()
            g = tuple(c.g for c in conversions)
            for given, derived, key in ((up, conversions[0].mass_up, "up"), (down, conversions[0].mass_down, "down")):
                if "mass" in data[key] and not math.isclose(given.mass, derived, rel_tol=1e-9):
                    raise SpecError(
                        f"{key}.mass",
                        f"got {given.mass:g} but physical gives {derived:.10g}; omit {key}.mass or make it agree",
                    )
            up = replace(up, mass=conversions[0].mass_up)
            down = replace(down, mass=conversions[0].mass_down)
            for i, value in enumerate(g):
                if not math.isfinite(value):
                    raise SpecError(
                        f"physical.scattering_length_bohr[{i}]",
                        "sits exactly on the confinement-induced resonance (g infinite); move it off resonance",
                    )
        else:
            interaction = _table(data.get("interaction", {}), "interaction")
            reject_unknown_keys(interaction, ("g",), "interaction")
            if "g" not in interaction:
                raise SpecError("interaction.g", "missing; give a number or a list of numbers (a scan)")
            g = _number_list(interaction["g"], "interaction.g")
        return cls(up=up, down=down, g=g, trap=trap, targets=targets, physical=physical, label=label)

    @classmethod
    def create(
        cls,
        up: int,
        down: int,
        g: float | Sequence[float],
        *,
        mass_up: float = 1.0,
        mass_down: float = 1.0,
        omega_up: float = 1.0,
        omega_down: float = 1.0,
        states: int = 1,
        parity: str = "any",
        observables: Sequence[str] = (),
        label: str = "",
        **targets: Any,
    ) -> Problem:
        """Convenience constructor from Python; validates exactly like ``from_dict``."""
        return cls.from_dict(
            {
                "label": label,
                "up": {"count": up, "mass": mass_up, "omega": omega_up},
                "down": {"count": down, "mass": mass_down, "omega": omega_down},
                "interaction": {"g": list(g) if isinstance(g, (list, tuple)) else g},
                "targets": {"states": states, "parity": parity, "observables": list(observables), **targets},
            }
        )

    # ------------------------------------------------------------------ serialization
    def to_dict(self) -> dict:
        """A plain mapping that ``from_dict`` turns back into an equal Problem."""
        data: dict[str, Any] = {}
        if self.label:
            data["label"] = self.label
        data["up"] = self.up.to_dict()
        data["down"] = self.down.to_dict()
        data["trap"] = self.trap.to_dict()
        if self.physical is not None:
            data["physical"] = self.physical.to_dict()
            # masses are re-derived from the physical block
            del data["up"]["mass"], data["down"]["mass"]
        else:
            data["interaction"] = {"g": self.g[0] if len(self.g) == 1 else list(self.g)}
        data["targets"] = self.targets.to_dict()
        return data

    def physics_dict(self) -> dict:
        """What determines the numbers: species, trap, g and targets (no label, derived g)."""
        return {
            "up": self.up.to_dict(),
            "down": self.down.to_dict(),
            "trap": self.trap.to_dict(),
            "g": list(self.g),
            "targets": self.targets.to_dict(),
        }

    @property
    def key(self) -> str:
        """Canonical hash (sha256, 16 hex digits) independent of key order and float formatting."""
        text = json.dumps(_canonical(self.physics_dict()), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode()).hexdigest()[:16]

    # ------------------------------------------------------------------ convenience
    @property
    def species(self) -> tuple[Species, Species]:
        return (self.up, self.down)

    @property
    def n_particles(self) -> int:
        return self.up.count + self.down.count

    @property
    def is_scan(self) -> bool:
        return len(self.g) > 1

    @property
    def coupling(self) -> float:
        """The single value of g; a scan must be split with ``points()`` first."""
        if self.is_scan:
            raise ValueError("this problem is a scan over g; iterate over problem.points()")
        return self.g[0]

    def points(self) -> list[Problem]:
        """One single-g problem per value of the scan, in the order given."""
        return [self.at(g) for g in self.g]

    def at(self, g: float) -> Problem:
        """The same problem at one coupling g (the physical block, if any, is dropped)."""
        return replace(self, g=(float(g),), physical=None)

    def with_targets(self, **changes: Any) -> Problem:
        return Problem.from_dict({**self.to_dict(), "targets": {**self.targets.to_dict(), **changes}})

    @property
    def equal_masses(self) -> bool:
        return self.up.mass == self.down.mass

    @property
    def equal_frequencies(self) -> bool:
        return self.up.omega == self.down.omega

    def reduced_mass(self) -> float:
        return self.up.mass * self.down.mass / (self.up.mass + self.down.mass)

    def extent(self) -> tuple[float, float]:
        """(x_max, p_max) for observables: the targets' values, or from the widest occupied orbital.

        The n-th oscillator orbital of width b reaches the classical turning point sqrt(2n+1) b; four
        more widths leave its Gaussian tail below 1e-6. The same in momentum with width 1/b.
        """
        x_max, p_max = self.targets.x_max, self.targets.p_max
        if x_max is None:
            if self.trap.shape == "box":
                x_max = self.trap.half_width
            else:
                x_max = max(math.sqrt(2 * s.count + 1) * s.oscillator_length + 4 * s.oscillator_length for s in self.species)
        if p_max is None:
            p_max = max(math.sqrt(2 * s.count + 1) / s.oscillator_length + 4 / s.oscillator_length for s in self.species)
            p_max = max(p_max, 8.0)  # contact tails need room at any mass
        return float(x_max), float(p_max)

    def describe(self) -> str:
        """A one-line human summary, e.g. '2+2, m = 1:6.667, g = 2'."""
        masses = "equal masses" if self.equal_masses else f"m = {self.up.mass:.4g}:{self.down.mass:.4g}"
        gs = ", ".join(f"{g:.6g}" for g in self.g)
        trap = "" if self.trap.is_harmonic else f", {self.trap.shape} trap"
        return f"{self.up.count}+{self.down.count}, {masses}, g = {gs}{trap}"


def _canonical(value: Any) -> Any:
    """Floats as repr of float (so 2, 2.0 and 2.00 hash alike); containers recursively."""
    if isinstance(value, bool):
        return value
    if isinstance(value, (int, float)):
        return repr(float(value))
    if isinstance(value, Mapping):
        return {str(k): _canonical(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_canonical(v) for v in value]
    return value
