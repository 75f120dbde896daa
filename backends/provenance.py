"""Where a number came from: software versions, source revision, machine and time."""

from __future__ import annotations

import datetime as _dt
import functools
import platform
import subprocess
from importlib import metadata
from pathlib import Path

CORE_LIBRARIES = ("numpy", "scipy")
_DISTRIBUTIONS = {"tenpy": "physics-tenpy"}


def library_version(name: str) -> str | None:
    try:
        return metadata.version(_DISTRIBUTIONS.get(name, name))
    except metadata.PackageNotFoundError:
        return None


@functools.cache
def source_revision() -> dict:
    """The git commit of trapbench's source tree (None outside a checkout) and whether it is modified."""
    here = Path(__file__).resolve().parent
    try:
        commit = subprocess.run(
            ["git", "-C", str(here), "rev-parse", "HEAD"], capture_output=True, text=True, timeout=5
        )
        if commit.returncode != 0:
            return {"commit": None, "dirty": None}
        status = subprocess.run(
            ["git", "-C", str(here), "status", "--porcelain", "--untracked-files=no"],
            capture_output=True,
            text=True,
            timeout=5,
        )
        return {"commit": commit.stdout.strip(), "dirty": bool(status.stdout.strip())}
    except (OSError, subprocess.SubprocessError):
        return {"commit": None, "dirty": None}


@functools.cache
def machine() -> dict:
    """Host name, CPU model, core count and operating system."""
    cpu = platform.processor() or ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    import os

    return {
        "host": platform.node(),
        "cpu": cpu,
        "cores": os.cpu_count(),
        "system": f"{platform.system()} {platform.release()}",
        "python": platform.python_version(),
    }


def provenance(backend: str, backend_version: str, libraries: tuple[str, ...] = ()) -> dict:
    """Everything needed to say which code on which machine produced a result, and when."""
    versions = {"trapbench": library_version("trapbench")}
    versions.update({name: library_version(name) for name in CORE_LIBRARIES + tuple(libraries)})
    return {
        "backend": backend,
        "backend_version": backend_version,
        "versions": versions,
        **source_revision(),
        **machine(),
        "timestamp_utc": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
    }
