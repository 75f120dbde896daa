"""Conversion of laboratory parameters to trapbench's dimensionless units.

trapbench works in units hbar = omega_ref = 1 with masses in units of a reference mass m0, so that
lengths are in l = sqrt(hbar / (m0 omega_ref)), energies in hbar omega_ref and the contact coupling
g in hbar omega_ref l = sqrt(hbar^3 omega_ref / m0).

The effective 1D coupling of two atoms (reduced mass mu) in a transverse harmonic guide of angular
frequency omega_perp with 3D s-wave scattering length a is Olshanii's result (M. Olshanii, Phys. Rev.
Lett. 81, 938 (1998); the formula is recalled from memory, not re-read from the paper), written here in
relative coordinates:

    g_1D = (2 hbar^2 a / (mu a_perp^2)) / (1 - C a / a_perp),   a_perp = sqrt(hbar / (mu omega_perp)),
    C = |zeta(1/2)| = 1.4603545088...

For equal masses (mu = m/2) this is the familiar g_1D = 2 hbar omega_perp a / (1 - C' a / a_perp'),
a_perp' = sqrt(hbar / (m omega_perp)), C' = C / sqrt(2). The unequal-mass form was derived by analogy
(the relative-coordinate problem of two particles in one transverse guide, valid when both species feel
the same omega_perp) and has not been checked against a paper. g_1D diverges at the
confinement-induced resonance a = a_perp / C. Physical constants: scipy.constants (CODATA).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import mpmath
from scipy import constants

# CODATA values as shipped with scipy.constants (SI).
HBAR = constants.hbar  # J s
ATOMIC_MASS_UNIT = constants.physical_constants["atomic mass constant"][0]  # kg
BOHR_RADIUS = constants.physical_constants["Bohr radius"][0]  # m
ZETA_HALF = -float(mpmath.zeta(0.5))  # |zeta(1/2)|
# |1 - C a / a_perp| below this counts as "near the confinement-induced resonance".
RESONANCE_WARNING_MARGIN = 0.2
# omega_perp / omega_axial below this makes the quasi-1D description questionable.
QUASI_1D_MIN_ASPECT = 10.0


@dataclass(frozen=True)
class CouplingConversion:
    """The outcome of converting laboratory parameters, with every intermediate quantity in SI."""

    g: float  # dimensionless, units of sqrt(hbar^3 omega_ref / m0)
    mass_up: float  # in units of m0
    mass_down: float  # in units of m0
    reduced_mass_kg: float
    reference_mass_kg: float
    oscillator_length_m: float  # l = sqrt(hbar / (m0 omega_ref))
    transverse_length_m: float  # a_perp = sqrt(hbar / (mu omega_perp))
    scattering_length_m: float
    resonance_scattering_length_bohr: float  # a at which g_1D diverges
    g_1d_si: float  # J m
    resonance_factor: float  # 1 - C a / a_perp
    warnings: tuple[str, ...]

    def as_dict(self) -> dict:
        data = asdict(self)
        data["warnings"] = list(self.warnings)
        return data

    def explain(self) -> str:
        """A human-readable account of the conversion, step by step."""
        lines = [
            f"m_up = {self.mass_up:.10g} m0, m_down = {self.mass_down:.10g} m0,"
            f" m0 = {self.reference_mass_kg:.6e} kg",
            f"reduced mass mu = {self.reduced_mass_kg:.6e} kg",
            f"l = sqrt(hbar/(m0 omega_axial)) = {self.oscillator_length_m:.6e} m",
            f"a_perp = sqrt(hbar/(mu omega_perp)) = {self.transverse_length_m:.6e} m",
            f"a_3D = {self.scattering_length_m:.6e} m,"
            f" 1 - C a/a_perp = {self.resonance_factor:.6g} (C = |zeta(1/2)| = {ZETA_HALF:.10f})",
            f"confinement-induced resonance at a_3D = {self.resonance_scattering_length_bohr:.6g} a_0",
            f"g_1D = {self.g_1d_si:.6e} J m  ->  g = {self.g:.10g} (units of hbar omega l)",
        ]
        lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)


def olshanii_coupling(
    mass_up_u: float,
    mass_down_u: float,
    axial_frequency_hz: float,
    transverse_frequency_hz: float,
    scattering_length_bohr: float,
    reference_mass_u: float | None = None,
) -> CouplingConversion:
    """Dimensionless g from atomic masses (u), trap frequencies (Hz, not angular) and a_3D (Bohr).

    The reference mass m0 defaults to the mass of the "up" species.
    """
    m_up = mass_up_u * ATOMIC_MASS_UNIT
    m_down = mass_down_u * ATOMIC_MASS_UNIT
    m_ref = (reference_mass_u if reference_mass_u is not None else mass_up_u) * ATOMIC_MASS_UNIT
    mu = m_up * m_down / (m_up + m_down)
    omega_ax = 2.0 * math.pi * axial_frequency_hz
    omega_perp = 2.0 * math.pi * transverse_frequency_hz
    a = scattering_length_bohr * BOHR_RADIUS
    a_perp = math.sqrt(HBAR / (mu * omega_perp))
    length = math.sqrt(HBAR / (m_ref * omega_ax))
    factor = 1.0 - ZETA_HALF * a / a_perp
    warnings = []
    if factor == 0.0:
        g_si = math.inf
    else:
        g_si = (2.0 * HBAR**2 * a / (mu * a_perp**2)) / factor
    if abs(factor) < RESONANCE_WARNING_MARGIN:
        warnings.append(
            f"a_3D is within {RESONANCE_WARNING_MARGIN:.0%} of the confinement-induced resonance"
            f" (1 - C a/a_perp = {factor:.3g}); g is very sensitive to a_3D here"
        )
    if transverse_frequency_hz < QUASI_1D_MIN_ASPECT * axial_frequency_hz:
        warnings.append(
            f"transverse/axial frequency ratio {transverse_frequency_hz / axial_frequency_hz:.3g}"
            f" is below {QUASI_1D_MIN_ASPECT:g}: the 1D description may not hold"
        )
    g = g_si / (HBAR * omega_ax * length)
    return CouplingConversion(
        g=g,
        mass_up=m_up / m_ref,
        mass_down=m_down / m_ref,
        reduced_mass_kg=mu,
        reference_mass_kg=m_ref,
        oscillator_length_m=length,
        transverse_length_m=a_perp,
        scattering_length_m=a,
        resonance_scattering_length_bohr=a_perp / ZETA_HALF / BOHR_RADIUS,
        g_1d_si=g_si,
        resonance_factor=factor,
        warnings=tuple(warnings),
    )
