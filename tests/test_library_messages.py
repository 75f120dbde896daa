"""Warnings and log records of libraries during a solve land in the result's diagnostics, never on the terminal."""

import logging
import warnings

from trapbench.backends import get
from trapbench.bench.cli import main
from trapbench.backends.two_body import TwoBodyBackend
from trapbench.problems.spec import Problem


class ChattyToy(TwoBodyBackend):
    """The exact two-body solution, with a library that warns twice and logs once on every solve."""

    name = "toy-chatty"

    def compute(self, problem, params):
        for _ in range(2):
            warnings.warn("an option was not used", UserWarning)
        logging.getLogger("somelibrary.solver").warning("truncation error above the requested limit")
        logging.getLogger("somelibrary.solver").info("sweep 3 done")  # below WARNING: not kept
        return super().compute(problem, params)


def test_messages_are_captured_counted_and_not_printed(capfd):
    result = ChattyToy().solve(Problem.create(1, 1, 1.0))
    out, err = capfd.readouterr()
    assert out == "" and err == ""
    messages = result.diagnostics["library_messages"]
    assert "UserWarning: an option was not used (x2)" in messages
    assert "somelibrary.solver: truncation error above the requested limit" in messages
    assert not any("sweep 3" in m for m in messages)
    # the capture ends with the solve: warnings raised afterwards behave as usual
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        warnings.warn("after the solve")
    assert len(caught) == 1


def test_dmrg_solve_prints_no_library_warning(capfd):
    # tenpy warns about unused options of its Lanczos configuration on every run
    result = get("lattice-dmrg").solve(Problem.create(1, 1, 1.0), spacings=[0.6, 0.45], chi=[4, 8], max_sweeps=4)
    _, err = capfd.readouterr()
    assert err == ""
    assert any("unused options" in m for m in result.diagnostics.get("library_messages", []))


def test_solve_verbose_shows_them(capsys, monkeypatch):
    from trapbench.backends import registry

    monkeypatch.setitem(registry.BUILTIN, "toy-chatty", f"{__name__}:ChattyToy")
    assert main(["solve", "--up", "1", "--down", "1", "--g", "1", "-b", "toy-chatty"]) == 0
    assert "library:" not in capsys.readouterr().out
    assert main(["solve", "--up", "1", "--down", "1", "--g", "1", "-b", "toy-chatty", "-v"]) == 0
    assert "library: UserWarning: an option was not used (x2)" in capsys.readouterr().out
