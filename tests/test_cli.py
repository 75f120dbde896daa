"""The command line: listing, solving, converting, and one-line errors with non-zero exit codes."""

import json
import subprocess
import sys

import pytest

from trapbench.bench.cli import main


def run_cli(*args):
    return subprocess.run([sys.executable, "-m", "trapbench.bench.cli", *args], capture_output=True, text=True, timeout=300)


def test_solve_json_gives_energies_and_error_estimate(capsys):
    assert main(["solve", "--up", "1", "--down", "1", "--g", "1", "--states", "2", "-b", "two-body", "--json"]) == 0
    document = json.loads(capsys.readouterr().out)
    # Busch et al., Found. Phys. 28, 549 (1998): E0(g = 1) = 1.306745541231 (root computed with mpmath,
    # re-derived by ODE shooting in tests/test_two_body.py); the next level is the odd relative state E = 2
    assert document["energies"] == pytest.approx([1.306745541231, 2.0], abs=1e-11)
    assert isinstance(document["error_estimate"], float)
    assert document["units"]["energy"] == "hbar*omega_ref"
    assert document["provenance"]["versions"]["numpy"]


def test_solve_spec_file_with_every_capable_backend(tmp_path, capsys):
    spec = tmp_path / "pair.toml"
    spec.write_text('[up]\ncount = 1\n[down]\ncount = 1\nmass = 6.666666666666667\n[interaction]\ng = [-2, 2]\n')
    assert main(["solve", str(spec), "-b", "two-body", "-b", "perturbative", "--json"]) == 0
    results = json.loads(capsys.readouterr().out)["results"]
    assert {r["backend"] for r in results} == {"two-body", "perturbative"}
    exact = {r["g"]: r["energies"][0] for r in results if r["backend"] == "two-body"}
    # Busch et al. (1998) roots with lambda = g sqrt(mu), kappa = 20/3 (mpmath; ODE shooting in test_references.py)
    assert exact[-2.0] == pytest.approx(-1.17412483472, abs=1e-10)
    assert exact[2.0] == pytest.approx(1.56467480944, abs=1e-10)


def test_negative_scan_values_parse(capsys):
    assert main(["solve", "--up", "1", "--down", "1", "--g", "-1,0.5", "-b", "two-body"]) == 0
    out = capsys.readouterr().out
    assert "0.4703549363" in out  # Busch et al. (1998) root at g = -1 (mpmath; ODE shooting in test_two_body.py)


def test_solve_table_names_each_observable_with_its_error_bar(capsys):
    assert main(["solve", "--up", "2", "--down", "1", "--g", "2", "-b", "three-body", "--observables", "density"]) == 0
    lines = [line.strip() for line in capsys.readouterr().out.splitlines()]
    rows = {line.split(":")[0]: line for line in lines if line.startswith("density_")}
    assert set(rows) == {"density_up", "density_down"}
    for row in rows.values():  # three-body's grids carry a bar (its p-ladder), printed with the units
        assert " x points, error " in row and "1/length" in row and "not estimated" not in row


def test_backends_lists_and_explains(capsys):
    assert main(["backends", "--up", "2", "--down", "1", "--g", "1"]) == 0
    out = capsys.readouterr().out
    assert "two-body" in out and "needs exactly 1+1" in out


def test_convert_prints_g(capsys):
    args = ["convert", "--mass-up-u", "6.0151223", "--mass-down-u", "6.0151223", "--axial-hz", "100",
            "--transverse-hz", "20000", "--a-bohr", "1000", "--json"]
    assert main(args) == 0
    (conversion,) = json.loads(capsys.readouterr().out)
    assert conversion["g"] > 0 and conversion["mass_down"] == 1.0


@pytest.mark.parametrize(
    "args, field",
    [
        (["solve", "--up", "1", "--down", "-1", "--g", "1"], "down.count"),
        (["solve", "--up", "1", "--down", "1", "--g", "abc"], "--g"),
        (["solve", "--up", "1", "--down", "1", "--g", "1", "-b", "two-bdy"], "two-body"),
        (["solve", "--up", "2", "--down", "1", "--g", "1", "-b", "two-body"], "1+1"),
        (["solve", "--up", "1", "--down", "1", "--g", "1", "-b", "two-body", "-p", "relative_point=3"], "param.relative_point"),
        (["solve", "--up", "1", "--down", "1", "--g", "1", "-b", "two-body", "-p", "relative_points=many"], "param.relative_points"),
        (["convert", "--mass-up-u", "6", "--mass-down-u", "6", "--axial-hz", "-1", "--transverse-hz", "1e4", "--a-bohr", "10"], "axial_frequency_hz"),
    ],
)
def test_bad_input_exits_2_with_one_line(args, field):
    completed = run_cli(*args)
    assert completed.returncode == 2
    lines = completed.stderr.strip().splitlines()
    assert len(lines) == 1 and field in lines[0]
    assert "Traceback" not in completed.stderr


def test_the_command_runs_from_a_thread_other_than_the_main_one(capsys):
    """An application may call ``main`` from a worker thread; only the main thread may install the SIGTERM
    handler (Python's ``signal.signal`` raises ValueError elsewhere), so there it is left alone."""
    import threading

    codes = []
    worker = threading.Thread(target=lambda: codes.append(main(["backends"])))
    worker.start()
    worker.join()
    assert codes == [0]
    assert "oscillator-ed" in capsys.readouterr().out
