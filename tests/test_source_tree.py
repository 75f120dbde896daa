"""The test suite runs from a checkout in any folder, whatever its name (common practice, no source).

The repository root is the ``trapbench`` package (``pyproject.toml`` maps it), so it holds an
``__init__.py``; ``conftest.py`` keeps pytest from importing that file as a test package named after
the folder, which failed for names that are not Python identifiers (a downloaded ``trapbench-main``).
"""

import shutil
import subprocess
import sys
from pathlib import Path

SOURCE_ROOT = Path(__file__).resolve().parents[1]


def _tracked_files() -> list[str]:
    listing = subprocess.run(
        ["git", "ls-files"], cwd=SOURCE_ROOT, capture_output=True, text=True, check=False
    )
    if listing.returncode == 0 and listing.stdout.strip():
        return listing.stdout.split()
    return ["__init__.py", "conftest.py", "pyproject.toml", "tests/test_units.py"]


def test_tests_run_from_a_folder_whose_name_is_not_an_identifier(tmp_path):
    checkout = tmp_path / "trapbench-main"
    for name in _tracked_files():
        if name.startswith(("reports/", "tests/")) and name != "tests/test_units.py":
            continue
        target = checkout / name
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(SOURCE_ROOT / name, target)
    run = subprocess.run(
        [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "-p", "no:xdist", "tests/test_units.py"],
        cwd=checkout, capture_output=True, text=True, timeout=300,
    )
    assert run.returncode == 0, run.stdout[-3000:] + run.stderr[-2000:]
    assert " passed" in run.stdout
