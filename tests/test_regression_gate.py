"""The project's own regression gate: the quick suite, run afresh, against the committed baseline.

Every task of the built-in `quick` suite (every backend on small problems) must reproduce the energies of
tests/baselines/quick.json within the suite's per-quantity tolerances, and succeed where it succeeded.
After an intended change of numbers (a backend's version bump), regenerate the baseline with

    trapbench check quick --baseline tests/baselines/quick.json --update-baseline

and say why in the commit message.
"""

from pathlib import Path

from trapbench.bench.gate import assert_no_regression

BASELINE = Path(__file__).parent / "baselines" / "quick.json"


def test_quick_suite_matches_the_committed_baseline(tmp_path):
    result = assert_no_regression("quick", BASELINE, tmp_path / "gate.sqlite")
    assert result.passed and not result.compared_nothing
