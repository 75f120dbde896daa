"""An explicit sparse (CSR) matrix of a two-species Hamiltonian on a truncated product basis.

``fock_ed.ProductHamiltonian`` applies H = sum_k s_k O_up(k) (x) O_down(k) matrix-free, which keeps the
memory of large bases bounded. For small bases an explicit matrix is far faster per product: on 2+1 in
the energy-truncated oscillator basis (cutoff 40, dimension 3311, 1.76e6 nonzeros) a scipy CSR product
took 1.9 ms against 17.6 ms for the matrix-free kernels (one core, measured with
``bench/benchmarks/bench_assembly.py``). The entries are

    H[(i, j), (i', j')] = sum_k s_k O_up(k)[i, i'] O_down(k)[j, j']        (i: up, j: down configuration)

for both configurations pairs inside the basis. The species with more configurations is the *outer*
one: its operators are grouped by configuration pair (o, o') over all terms; the other species' operators
are stacked densely, so each group fills its block of (basis entries of o) x (basis entries of o') by a
short sum over the group's terms (compiled with numba). Where the dense stack of all terms would exceed
``DENSE_STACK_LIMIT`` the terms are taken a range at a time and the ranges' matrices summed: the effective
interaction of 2+2 (about a thousand terms on 2-fermion configurations) is then assembled too, and its
ladder to cutoff 32 takes 6.4 instead of 20.1 CPU s (one core, 2026-12-05; energies equal to 1e-14).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

DENSE_STACK_LIMIT = 2.5e7  # bound on terms x inner configurations^2 (8 bytes each) for the dense inner stack


def assemble(basis, terms, limit: float) -> sp.csr_matrix | None:
    """The CSR matrix of sum_k s_k O_up(k) (x) O_down(k) on ``basis`` (a ``fock_ed.ProductBasis``).

    ``terms``: (s_k, O_up(k), O_down(k)) with sparse or dense real operators on each species' Fock space.
    Returns None (the caller then stays matrix-free) when there are more than ``limit`` nonzeros,
    a single term's dense inner operator would exceed ``DENSE_STACK_LIMIT``, or an operator is complex.
    """
    up_is_outer = outer_is_up(basis)
    n_inner = inner_dimension(basis)

    def parts(start: int, stop: int):
        rows, cols, term_index, values = [], [], [], []
        inner_stack = np.zeros((stop - start, n_inner, n_inner))
        for k, (scale, op_up, op_down) in enumerate(terms[start:stop]):
            outer_op, inner_op = (op_up, op_down) if up_is_outer else (op_down, op_up)
            coo = sp.coo_matrix(outer_op)
            dense = inner_op.toarray() if sp.issparse(inner_op) else np.asarray(inner_op)
            if np.iscomplexobj(coo.data) or np.iscomplexobj(dense):
                return None
            keep = coo.data != 0
            rows.append(coo.row[keep])
            cols.append(coo.col[keep])
            term_index.append(np.full(int(keep.sum()), k))
            values.append(scale * coo.data[keep])
            inner_stack[k] = dense
        entries = (np.concatenate(rows), np.concatenate(cols), np.concatenate(term_index), np.concatenate(values))
        return entries, inner_stack

    return assemble_in_ranges(basis, len(terms), parts, limit)


def assemble_in_ranges(basis, count: int, parts, limit: float) -> sp.csr_matrix | None:
    """The sum over consecutive ranges of the ``count`` terms of ``assemble_stacked(basis, *parts(start, stop),
    limit)``: each range's dense inner stack (terms x inner configurations^2) stays within ``DENSE_STACK_LIMIT``.
    ``parts(start, stop)`` gives that range's (outer entries, inner stack), term indices counted from ``start``,
    or None (e.g. a complex operator). None when a single term does not fit, a range gives None, or the sum
    has more than ``limit`` nonzeros."""
    n_inner = inner_dimension(basis)
    per_range = int(DENSE_STACK_LIMIT // max(1, n_inner * n_inner))
    if per_range < 1:
        return None
    total = None
    for start in range(0, count, per_range):
        found = parts(start, min(count, start + per_range))
        matrix = None if found is None else assemble_stacked(basis, *found, limit)
        if matrix is None:
            return None
        total = matrix if total is None else (total + matrix).tocsr()
        if total.nnz > limit:
            return None
    return total


def outer_is_up(basis) -> bool:
    """Whether the up species is the outer one (module docstring): the one with more configurations."""
    n_u, n_d = basis.shape
    return n_u >= n_d


def inner_dimension(basis) -> int:
    """The number of configurations of the inner species (the one ``outer_is_up`` does not pick)."""
    return basis.shape[1] if outer_is_up(basis) else basis.shape[0]


def assemble_stacked(basis, outer_entries, inner_stack: np.ndarray, limit: float) -> sp.csr_matrix | None:
    """The CSR matrix of sum_k O_outer(k) (x) O_inner(k) on ``basis`` from the terms' operators given whole:
    ``outer_entries`` = (row, column, term k, value) of the outer species' operators (``outer_is_up``; scales
    folded into the values; entries repeated on one (row, column, k) are summed), ``inner_stack`` the inner
    species' operators as a dense K x n_inner x n_inner array. None when there are more than ``limit`` nonzeros."""
    n_u, n_d = basis.shape
    up_is_outer = outer_is_up(basis)
    n_outer = n_u if up_is_outer else n_d
    rows, cols, term_index, values = outer_entries
    rows, cols = np.asarray(rows).astype(np.int64), np.asarray(cols).astype(np.int64)
    term_index, values = np.asarray(term_index).astype(np.int64), np.asarray(values, dtype=float)

    # basis entries of each outer configuration: their inner configuration and position in the basis
    flat = basis.flat
    outer, inner = (flat // n_d, flat % n_d) if up_is_outer else (flat % n_d, flat // n_d)
    order = np.lexsort((inner, outer))
    entry_ptr = np.zeros(n_outer + 1, np.int64)
    np.cumsum(np.bincount(outer, minlength=n_outer), out=entry_ptr[1:])
    entry_inner, entry_position = inner[order].astype(np.int64), order.astype(np.int64)

    # groups: all terms' entries of one outer configuration pair (o, o')
    key = rows * n_outer + cols
    by_key = np.argsort(key, kind="stable")
    key, term_index, values = key[by_key], term_index[by_key], values[by_key]
    starts = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
    group_ptr = np.r_[starts, len(key)].astype(np.int64)
    group_rows, group_cols = key[starts] // n_outer, key[starts] % n_outer
    # at most every pair of the groups' blocks is nonzero; the inner operators' zeros (configurations more
    # than one hop apart) usually leave far fewer, so the buffers get the limit and the filler stops there
    sizes = np.diff(entry_ptr)
    capacity = int(min(np.sum(sizes[group_rows] * sizes[group_cols]), limit))
    out_rows = np.empty(capacity, np.int64)  # untouched pages of np.empty cost no memory
    out_cols = np.empty(capacity, np.int64)
    out_values = np.empty(capacity)
    # inner pairs (x, y) that any term connects, per x (sorted), and whether each outer configuration's
    # entries are a contiguous run of inner configurations (then y finds its entry without a search)
    pattern = sp.csr_matrix(np.any(inner_stack != 0, axis=0))
    pattern.sort_indices()
    filled = sizes > 0
    contiguous = np.ones(n_outer, bool)
    span = entry_inner[entry_ptr[1:][filled] - 1] - entry_inner[entry_ptr[:-1][filled]] + 1
    contiguous[filled] = span == sizes[filled]
    count = _fill()(group_ptr, group_rows, group_cols, term_index, values, inner_stack, entry_ptr, entry_inner,
                    entry_position, pattern.indptr.astype(np.int64), pattern.indices.astype(np.int64),
                    contiguous, out_rows, out_cols, out_values)
    if count < 0:
        return None
    return sp.csr_matrix(
        (out_values[:count], (out_rows[:count], out_cols[:count])), shape=(basis.dim, basis.dim)
    )


_FILL = None


def _fill():
    """The compiled block filler (numba, compiled once and cached): for each group (o, o') and each pair of
    basis entries (a of o, b of o'), value = sum over the group's terms of value_t inner_stack[k_t, x_a, x_b];
    nonzero values are written as (position a, position b, value). Returns the count written, or -1 when
    the buffers (the nonzero limit) are full."""
    global _FILL
    if _FILL is None:
        import numba

        @numba.njit(cache=True)
        def fill(group_ptr, group_rows, group_cols, term_index, values, inner_stack, entry_ptr, entry_inner,
                 entry_position, pattern_ptr, pattern_index, contiguous, out_rows, out_cols, out_values):
            count = 0
            for grp in range(len(group_rows)):
                o, o2 = group_rows[grp], group_cols[grp]
                t0, t1 = group_ptr[grp], group_ptr[grp + 1]
                b0, b1 = entry_ptr[o2], entry_ptr[o2 + 1]
                if b0 == b1:
                    continue
                for a in range(entry_ptr[o], entry_ptr[o + 1]):
                    x = entry_inner[a]
                    if contiguous[o2]:  # the entries of o2 are inner configurations y0 .. y0 + size - 1
                        y0 = entry_inner[b0]
                        first, stop = pattern_ptr[x], pattern_ptr[x + 1]
                    else:  # every entry of o2
                        first, stop = b0, b1
                    for p in range(first, stop):
                        if contiguous[o2]:
                            y = pattern_index[p]
                            if y < y0 or y >= y0 + (b1 - b0):
                                continue
                            b = b0 + y - y0
                        else:
                            b = p
                            y = entry_inner[b]
                        s = 0.0
                        for t in range(t0, t1):
                            s += values[t] * inner_stack[term_index[t], x, y]
                        if s != 0.0:
                            if count == len(out_values):
                                return -1
                            out_rows[count] = entry_position[a]
                            out_cols[count] = entry_position[b]
                            out_values[count] = s
                            count += 1
            return count

        _FILL = fill
    return _FILL
