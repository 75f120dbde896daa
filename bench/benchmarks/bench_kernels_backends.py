"""Micro-benchmarks of backend kernels through stable entry points (pytest-benchmark; not in the test run).

Run by hand:  python -m pytest bench/benchmarks/bench_kernels_backends.py --benchmark-only

- the exact 1+1 relative level (Brent root of the Busch et al. equation) at repulsive and attractive g;
- a finite-difference one-body matrix (L = 2001) times a block of 64 vectors (the CSR kernel that
  dominates lattice eigensolvers);
- complete small solves (oscillator-ed 2+2 at a fixed cutoff, two-body 1+1 with observables), the
  cost a suite pays per task once the process is running.
BLAS is pinned to one thread (threadpoolctl) so timings compare across loads.
"""

from __future__ import annotations

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from trapbench.problems.spec import Problem


@pytest.fixture(autouse=True)
def one_blas_thread():
    with threadpool_limits(limits=1):
        yield


@pytest.mark.parametrize("lam", [3.0, -3.0])
def test_two_body_relative_level(benchmark, lam):
    two_body = pytest.importorskip("trapbench.problems.exact.busch")
    e = benchmark(two_body.even_relative_level, lam, 0)
    assert (e > 0.5) == (lam > 0)


def test_lattice_one_body_matvec(benchmark):
    lattice = pytest.importorskip("trapbench.backends.lattice")
    problem = Problem.create(1, 1, 0.0)
    grid = lattice.make_grid(problem, 0.007, 7.0)
    h = lattice.one_body_matrix(problem, problem.up, grid)
    block = np.random.default_rng(0).standard_normal((grid.sites, 64))
    out = benchmark(h.dot, block)
    assert out.shape == block.shape


@pytest.mark.parametrize("backend, problem, params", [
    ("two-body", Problem.create(1, 1, 2.0, states=3), {}),
    ("oscillator-ed", Problem.create(2, 2, 2.0), {"cutoff": 16}),
])
def test_small_solve(benchmark, backend, problem, params):
    from trapbench.backends import registry

    if backend not in registry.names():
        pytest.skip(f"{backend} is not installed")
    solver = registry.get(backend)
    result = benchmark.pedantic(solver.solve, args=(problem,), kwargs=params, rounds=3, iterations=1)
    assert result.energies[0] > 0
