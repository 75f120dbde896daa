"""What a backend returns: energies, state labels, observables, timing and provenance.

Units (hbar = omega_ref = 1, masses in m0): energies in hbar omega_ref, lengths in
sqrt(hbar/(m0 omega_ref)), momenta in sqrt(hbar m0 omega_ref), g in sqrt(hbar^3 omega_ref/m0).
Results round-trip losslessly through JSON (floats are written with repr) and flatten to a tidy
pandas DataFrame with one row per state.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

# Names every backend uses for the same physical quantity (suffix "@k" for state k > 0, e.g.
# "density_up@1"). Scalars:
SCALAR_NAMES = {
    "trap_energy": "<sum_i V_s(x_i)>, hbar*omega_ref",
    "kinetic_energy": "<sum_i p_i^2/(2 m_s)>, hbar*omega_ref",
    "delta": "<sum_{i in up, j in down} delta(x_i - x_j)> = dE/dg (Hellmann-Feynman), 1/length",
    "contact": "Tan contact C = (2 mu)^2 g^2 <sum delta>, so that n_s(k) -> C/k^4 with"
    " integral dk/(2 pi) n_s(k) = N_s; mu = reduced mass in m0",
    "noise_integral": "integral dp1 dp2 C(p1, p2)^2 of the noise correlation map",
}
# Observables (arrays on grids):
OBSERVABLE_NAMES = {
    "density_up": "n_up(x), integral dx = N_up",
    "density_down": "n_down(x), integral dx = N_down",
    "momentum_up": "n_up(p), integral dp = N_up",
    "momentum_down": "n_down(p), integral dp = N_down",
    "obdm_up": "rho_up(x, x') = <psi+_up(x) psi_up(x')>, trace = N_up",
    "obdm_down": "rho_down(x, x'), trace = N_down",
    "pair_position": "G(x1, x2) = <n_up(x1) n_down(x2)>, integral = N_up N_down",
    "pair_momentum": "G(p1, p2) = <n_up(p1) n_down(p2)>, integral = N_up N_down",
    "noise": "C(p1, p2) = G(p1, p2) - n_up(p1) n_down(p2), integral = 0",
}

UNITS = {
    "energy": "hbar*omega_ref",
    "length": "sqrt(hbar/(m0*omega_ref))",
    "momentum": "sqrt(hbar*m0*omega_ref)",
    "g": "sqrt(hbar^3*omega_ref/m0)",
    "mass": "m0",
    "time": "s (wall and CPU)",
    "memory": "bytes",
}


@dataclass
class Observable:
    """An array on named grids, e.g. a density n_up(x) or a map C(p_up, p_down).

    ``axes`` maps each axis name to its grid, in the order of the array's dimensions;
    ``normalization`` states what the values integrate to; ``state`` is the index of the level;
    ``error`` bounds the largest deviation from the exact values over the grid, max |values - exact|,
    in ``units`` (None where the backend does not estimate it; how it is formed is the backend's
    docstring, e.g. ``backends/ladder.py`` for a convergence ladder).
    """

    values: np.ndarray
    axes: dict[str, np.ndarray]
    units: str
    normalization: str
    state: int = 0
    error: float | None = None

    def to_json_dict(self) -> dict:
        return {
            "values": _encode_array(self.values),
            "axes": {k: _encode_array(v) for k, v in self.axes.items()},
            "units": self.units,
            "normalization": self.normalization,
            "state": self.state,
            "error": self.error,
        }

    @classmethod
    def from_json_dict(cls, data: dict) -> Observable:
        return cls(
            values=_decode_array(data["values"]),
            axes={k: _decode_array(v) for k, v in data["axes"].items()},
            units=data["units"],
            normalization=data["normalization"],
            state=data["state"],
            error=data.get("error"),
        )


@dataclass
class Solution:
    """What a backend's ``compute`` produces for one value of g (the base class adds the rest).

    ``states`` holds one dict of quantum numbers per energy (keys such as ``parity`` (+1/-1),
    ``com`` (centre-of-mass excitation), ``degeneracy``); ``scalars`` holds single numbers such as
    ``contact`` or ``trap_energy`` with their meaning documented by the backend, and
    ``scalar_errors`` error bars for those of them the backend can bound;
    ``error_estimate`` bounds |E - E_exact| for the reported energies (None when unknown).
    """

    energies: list[float]
    states: list[dict[str, Any]] = field(default_factory=list)
    observables: dict[str, Observable] = field(default_factory=dict)
    scalars: dict[str, float] = field(default_factory=dict)
    error_estimate: float | None = None
    energy_errors: list[float] | None = None
    diagnostics: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    scalar_errors: dict[str, float] = field(default_factory=dict)  # last: keeps positional construction


@dataclass
class Result:
    """A backend's answer to one single-g problem, with everything needed to reproduce it."""

    backend: str
    backend_version: str
    problem: dict
    problem_key: str
    g: float
    energies: list[float]
    states: list[dict[str, Any]]
    observables: dict[str, Observable]
    scalars: dict[str, float]
    params: dict[str, Any]
    error_estimate: float | None
    energy_errors: list[float] | None
    wall_time_s: float
    cpu_time_s: float
    provenance: dict[str, Any]
    diagnostics: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    units: dict[str, str] = field(default_factory=lambda: dict(UNITS))
    scalar_errors: dict[str, float] = field(default_factory=dict)

    @property
    def ground_energy(self) -> float:
        return self.energies[0]

    # ------------------------------------------------------------------ JSON
    def to_json_dict(self) -> dict:
        data = {k: v for k, v in asdict(self).items() if k != "observables"}
        data["observables"] = {k: v.to_json_dict() for k, v in self.observables.items()}
        return _plain(data)

    def to_json(self, indent: int | None = None) -> str:
        return json.dumps(self.to_json_dict(), indent=indent, allow_nan=False)

    @classmethod
    def from_json_dict(cls, data: dict) -> Result:
        data = dict(data)
        data["observables"] = {k: Observable.from_json_dict(v) for k, v in data["observables"].items()}
        return cls(**data)

    @classmethod
    def from_json(cls, text: str) -> Result:
        return cls.from_json_dict(json.loads(text))

    # ------------------------------------------------------------------ tables
    def to_rows(self) -> list[dict[str, Any]]:
        """Tidy rows, one per state, with the problem's defining numbers."""
        up, down = self.problem["up"], self.problem["down"]
        rows = []
        for i, energy in enumerate(self.energies):
            labels = self.states[i] if i < len(self.states) else {}
            rows.append(
                {
                    "backend": self.backend,
                    "problem_key": self.problem_key,
                    "n_up": up["count"],
                    "n_down": down["count"],
                    "mass_up": up.get("mass", 1.0),
                    "mass_down": down.get("mass", 1.0),
                    "g": self.g,
                    "state": i,
                    "energy": energy,
                    "energy_error": None if self.energy_errors is None else self.energy_errors[i],
                    "parity": labels.get("parity"),
                    "com": labels.get("com"),
                    "degeneracy": labels.get("degeneracy"),
                    "error_estimate": self.error_estimate,
                    "wall_time_s": self.wall_time_s,
                    "cpu_time_s": self.cpu_time_s,
                }
            )
        return rows

    def to_dataframe(self):
        import pandas as pd

        return pd.DataFrame(self.to_rows())


def results_to_dataframe(results: list[Result]):
    """One tidy DataFrame for many results (e.g. a scan over g)."""
    import pandas as pd

    return pd.DataFrame([row for r in results for row in r.to_rows()])


# ----------------------------------------------------------------------------- encoding


def _encode_array(array: np.ndarray) -> dict:
    array = np.asarray(array)
    if np.iscomplexobj(array):
        return {
            "dtype": str(array.dtype),
            "shape": list(array.shape),
            "real": array.real.ravel().tolist(),
            "imag": array.imag.ravel().tolist(),
        }
    return {"dtype": str(array.dtype), "shape": list(array.shape), "data": array.ravel().tolist()}


def _decode_array(data: dict) -> np.ndarray:
    if "real" in data:
        flat = np.asarray(data["real"]) + 1j * np.asarray(data["imag"])
    else:
        flat = np.asarray(data["data"])
    return flat.astype(data["dtype"]).reshape(data["shape"])


def _plain(value: Any) -> Any:
    """Convert numpy scalars/arrays inside plain containers to JSON-ready Python objects."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return _encode_array(value)
    if isinstance(value, np.generic):
        return value.item()
    return value
