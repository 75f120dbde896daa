"""Finding backends: the built-in table plus any package's ``trapbench.backends`` entry points.

A third-party package exposes its backend class (or a ready instance) with

    [project.entry-points."trapbench.backends"]
    my-solver = "my_package.module:MySolver"

and ``trapbench backends`` lists it after ``pip install``. Built-in modules are imported only when
their backend is asked for, so listing backends does not import quspin or tenpy.
"""

from __future__ import annotations

import importlib
from importlib import metadata

from ..problems.errors import did_you_mean

ENTRY_POINT_GROUP = "trapbench.backends"

BUILTIN = {
    "two-body": "trapbench.backends.two_body:TwoBodyBackend",
    "perturbative": "trapbench.backends.perturbative:PerturbativeBackend",
    "oscillator-ed": "trapbench.backends.oscillator_ed:OscillatorEDBackend",
    "lattice-ed": "trapbench.backends.lattice_ed:LatticeEDBackend",
    "lattice-dmrg": "trapbench.backends.lattice_dmrg:LatticeDMRGBackend",
    "strong-coupling": "trapbench.backends.strong_coupling:StrongCouplingBackend",
    "three-body": "trapbench.backends.three_body:ThreeBodyBackend",
}


class UnknownBackend(KeyError):
    def __str__(self) -> str:
        return self.args[0]


def _targets() -> dict[str, str]:
    """name -> "module:attribute" for every backend that is installed."""
    found = {}
    for name, target in BUILTIN.items():
        module = target.split(":")[0]
        if importlib.util.find_spec(module) is not None:
            found[name] = target
    for entry in metadata.entry_points(group=ENTRY_POINT_GROUP):
        if entry.name in found and found[entry.name] != entry.value:
            raise RuntimeError(
                f"backend name '{entry.name}' from entry point {entry.value} clashes with {found[entry.name]};"
                " rename one of them"
            )
        found[entry.name] = entry.value
    return found


def names() -> list[str]:
    """Names of all installed backends, built-in first, in a stable order."""
    return list(_targets())


def get(name: str):
    """An instance of the backend called ``name``."""
    targets = _targets()
    if name not in targets:
        hint = did_you_mean(name, targets, otherwise="installed: " + ", ".join(targets), cutoff=0.4)
        raise UnknownBackend(f"backend: no backend named '{name}'; {hint}")
    module_name, attribute = targets[name].split(":")
    obj = getattr(importlib.import_module(module_name), attribute)
    backend = obj() if isinstance(obj, type) else obj
    for required in ("name", "supports", "solve"):
        if not hasattr(backend, required):
            raise TypeError(f"backend '{name}' ({targets[name]}) lacks '{required}' of the backend protocol")
    return backend


def all_backends() -> list:
    return [get(name) for name in names()]
