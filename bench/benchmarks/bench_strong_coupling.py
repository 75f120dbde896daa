"""Benchmarks of the strong-coupling kernels and of a validation run (pytest-benchmark; not in the test run).

Run by hand:  python -m pytest bench/benchmarks/bench_strong_coupling.py --benchmark-only

- exchange coefficients J_k for N = 8 and N = 12 from scratch (the 1D reduction with Gauss-Legendre
  node doubling to 1e-12; the cache is cleared each round);
- the 6+6 spin chain (924 orderings) including J_k;
- the default validation problems with the exact two-body backend (the fixed cost of
  ``trapbench validate`` for a fast backend).
BLAS is pinned to one thread (threadpoolctl) so timings compare across loads.
"""

from __future__ import annotations

import pytest
from threadpoolctl import threadpool_limits

from trapbench.backends import spin_chain


@pytest.fixture(autouse=True)
def one_blas_thread():
    with threadpool_limits(limits=1):
        yield


def _fresh_exchange(n: int):
    spin_chain.exchange_coefficients.cache_clear()
    return spin_chain.exchange_coefficients(n)


@pytest.mark.parametrize("n", [8, 12])
def test_exchange_coefficients(benchmark, n):
    result = benchmark(_fresh_exchange, n)
    assert result.convergence < 1e-12


def _fresh_chain():
    spin_chain.exchange_coefficients.cache_clear()
    spin_chain.spin_chain_spectrum.cache_clear()
    return spin_chain.spin_chain_spectrum(6, 6)


def test_spin_chain_six_plus_six(benchmark):
    spectrum = benchmark(_fresh_chain)
    assert len(spectrum.k_values) == 924


def test_validation_two_body(benchmark):
    from trapbench.backends.registry import get
    from trapbench.bench.check_suite import validate

    verdicts = benchmark.pedantic(validate, args=(get("two-body"),), kwargs={"catalogue_max_particles": 2},
                                  rounds=2, iterations=1)
    assert not any(v.failed for v in verdicts)
