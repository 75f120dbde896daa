"""pytest configuration of the source tree (the test session only; not used by the installed package).

The repository root is the ``trapbench`` package itself (``pyproject.toml`` maps it), so it holds an
``__init__.py``, and pytest would collect the root as a test package: it imports that file under the
checkout folder's name, which fails when the name is not a Python identifier (a clone in ``ci-clone``).
The root is collected as a plain directory instead; the tests import the installed ``trapbench``.
"""

from pathlib import Path

import pytest

SOURCE_ROOT = Path(__file__).resolve().parent


class _RootAsDirectory:
    """Collects the source root with pytest's plain directory collector (not as a package)."""

    @pytest.hookimpl(tryfirst=True)
    def pytest_collect_directory(self, path: Path, parent: pytest.Collector) -> pytest.Collector | None:
        if path.resolve() == SOURCE_ROOT:
            return pytest.Dir.from_parent(parent, path=path)
        return None


def pytest_configure(config: pytest.Config) -> None:
    config.pluginmanager.register(_RootAsDirectory(), "trapbench-source-root")
