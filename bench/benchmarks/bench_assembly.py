"""Benchmark of the explicit CSR Hamiltonian (``backends/fock_assembly.py``) against the matrix-free product.

Run by hand (not part of the test suite):

    python bench/benchmarks/bench_assembly.py

For energy-truncated oscillator sectors (trap orbitals, renormalized contact; the ground state's parity)
of 2+1, 1+2 and 2+2 at several cutoffs: the dimension, the explicit matrix's nonzeros, the CPU time to
build it and the peak memory traced while building (tracemalloc, numpy's allocations included), and the
CPU time of one product for the explicit and the matrix-free operator. One BLAS thread; the machine may be
shared, so times are indicative.
"""

from __future__ import annotations

import time
import tracemalloc

import numpy as np
from threadpoolctl import threadpool_limits

CASES = [  # (n_up, n_down, mass_up, cutoff)
    (2, 1, 1.0, 28),
    (2, 1, 1.0, 40),
    (2, 1, 1.0, 52),
    (1, 2, 20 / 3, 40),
    (2, 2, 1.0, 12),
    (2, 2, 1.0, 16),
    (2, 2, 1.0, 20),
]


def product_time(ham, v: np.ndarray, reps: int = 10) -> float:
    ham.matvec(v)
    start = time.process_time()
    for _ in range(reps):
        ham.matvec(v)
    return (time.process_time() - start) / reps


def main() -> None:
    from trapbench.backends import oscillator_ed as oe
    from trapbench.problems.spec import Problem

    rng = np.random.default_rng(0)
    print("| system | mass ratio | cutoff | dimension | nonzeros | build CPU s | build peak MiB | CSR product ms | matrix-free product ms | ratio |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    with threadpool_limits(limits=1):
        for n_up, n_down, mass_up, cutoff in CASES:
            problem = Problem.create(n_up, n_down, 2.0, mass_up=mass_up)
            parity = (-1) ** ((n_up * (n_up - 1) + n_down * (n_down - 1)) // 2)  # g = 0 ground parity
            sector = oe.sector_basis(problem, oe.Truncation("energy", cutoff), parity)
            free = oe.hamiltonian(problem, sector, 1.5)
            tracemalloc.start()
            start = time.process_time()
            explicit = oe.hamiltonian(problem, sector, 1.5, assemble_limit=1e9)
            build = time.process_time() - start
            peak = tracemalloc.get_traced_memory()[1] / 2**20
            tracemalloc.stop()
            v = rng.normal(size=sector.basis.dim)
            assert np.allclose(free.matvec(v), explicit.matvec(v), atol=1e-11)
            t_free, t_csr = product_time(free, v), product_time(explicit, v)
            print(
                f"| {n_up}+{n_down} | {mass_up:.3g} | {cutoff} | {sector.basis.dim} | {explicit.matrix.nnz} |"
                f" {build:.2f} | {peak:.0f} | {1e3 * t_csr:.2f} | {1e3 * t_free:.2f} | {t_free / t_csr:.1f} |",
                flush=True,
            )


if __name__ == "__main__":
    main()
