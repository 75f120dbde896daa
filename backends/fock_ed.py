"""Shared exact-diagonalization engine for two species of fermions in any orbital basis.

The model (units of ``problems.spec``): species s in {up, down} has orbitals a = 0..M_s-1 and a
one-body Hamiltonian h_s (an M_s x M_s matrix); the contact interaction is supplied in factorized
form through quadrature points x_q with weights w_q and orbital values phi_a(x_q):

    H = sum_s sum_ab (h_s)_ab c+_{s,a} c_{s,b}  +  g sum_q w_q rho_up(x_q) rho_down(x_q),
    rho_s(x) = sum_ab conj(phi_a(x)) phi_b(x) c+_{s,a} c_{s,b}.

This is exact for g delta(x_up - x_down) whenever the quadrature integrates every product
phi_a phi_b chi_c chi_d exactly (Gauss-Hermite for oscillator orbitals), and it is the lattice
interaction U sum_i n_{i,up} n_{i,down} (U = g/a) with points = sites, w_q = a and
phi_a(x_q) = delta_aq / sqrt(a).

Any other up-down two-body operator (e.g. an effective interaction tensor V[a, b, c, d], up c -> a,
down d -> b) enters as interaction factors (``InteractionFactors``): V = sum_k O_up(A_k) O_down(B_k)
with orbital matrices A_k, B_k (by SVD of V reshaped to (ac), (bd)); the same kernels apply
g sum_k O_up(A_k) Psi O_down(B_k)^T, the quadrature form being the case A_q = w_q phi(x_q) phi(x_q)^T.

Building blocks (all vectorised over configurations; loops run at most over orbital pairs,
quadrature points or basis blocks):

- ``FockSpace``: N fermions in M orbitals, configurations as sorted occupied-orbital lists ranked
  by the combinatorial number system (no 64-orbital limit); vectorised index lookup;
  ``hops`` gives c+_a c_b with fermion signs; ``one_body`` builds sum_ab h_ab c+_a c_b as CSR;
  ``transform`` applies an orbital map with phases (parity) including the reordering sign.
- ``ProductBasis``: up configurations x down configurations, either the full product or a union of
  rectangles (up range x down range) with disjoint up ranges. An energy-truncated basis with up
  configurations grouped by energy and down configurations sorted by energy is such a union
  ("staircase"); so is one parity sector when orbitals have definite parity.
- ``ProductHamiltonian``: H acting on the padded coefficient matrix Psi[i_up, i_down] (or, for small bases
  on request, an explicit CSR matrix, ``fock_assembly``):
  H Psi = h_up Psi + Psi h_down^T + g sum_q w_q D_up(q) Psi D_down(q)^T (masked to the basis), or
  with ``InteractionFactors`` g sum_k O_up(A_k) Psi O_down(B_k)^T,
  with a diagonal fast path when every D(q) is diagonal (lattice) and parity folding of the points
  q, -q when orbitals have definite parity. ``as_linear_operator``, ``to_dense``.
- ``parity_isometry``: the sector +-1 of a parity given as an orbital map with phases, for bases
  where parity is not diagonal (lattice reflection i -> L-1-i).
- ``lowest_eigenpairs``: scipy ``eigsh`` (which='SA', one BLAS thread) or dense ``eigh`` for small
  dimensions; ``degeneracies`` groups levels closer than a tolerance.
- Observables of a state: ``one_body_density_matrices`` rho_ab = <c+_a c_b>, ``pair_tensor``
  Gamma_{ab,cd} = <c+_a c_b d+_c d_d>, and their evaluation on grids of (possibly complex) orbital
  values in position or momentum: densities, one-body density matrices, pair correlations,
  noise correlation C = G - n_up n_down and its integral of C^2, <sum delta> and <V_trap>.

Fermion ordering convention: all up modes precede all down modes; one-body operators of either
species are even, so no sign crosses species.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from itertools import combinations

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator, eigsh
from scipy.special import comb

from . import fock_assembly

DENSE_LIMIT = 120  # below this dimension the dense eigensolver is used (robust; cheap at this size)
SCRATCH_ELEMENTS = 2.5e7  # bound on intermediate arrays of the matvec (8 bytes each)
# an explicit matrix is tried only up to this dimension (its terms are then built all at once; 2e7 nonzeros,
# the oscillator backend's limit, are 1.25 % of such a matrix; measured fill of energy-truncated oscillator
# sectors: 2+1 13-22 %, 2+2 4-11 %, 3+3 at cutoff 28 1.4 %)
ASSEMBLY_MAX_DIM = 40000


# ----------------------------------------------------------------------------- single species


def _ranks(occupied: np.ndarray) -> np.ndarray:
    """Combinatorial-number-system rank sum_k C(o_k, k+1) of sorted occupied lists (one per row)."""
    occupied = np.asarray(occupied, dtype=np.int64)
    if occupied.shape[1] == 0:
        return np.zeros(occupied.shape[0], dtype=np.int64)
    ranks = np.zeros(occupied.shape[0], dtype=np.int64)
    for k in range(occupied.shape[1]):
        ranks += comb(occupied[:, k], k + 1, exact=False).round().astype(np.int64)
    return ranks


def all_configurations(n_orbitals: int, n_particles: int) -> np.ndarray:
    """Every sorted occupied list of ``n_particles`` among ``n_orbitals`` (rows, lexicographic)."""
    if n_particles > n_orbitals:
        raise ValueError(f"{n_particles} fermions do not fit in {n_orbitals} orbitals")
    count = math.comb(n_orbitals, n_particles)
    flat = np.fromiter(
        (o for combo in combinations(range(n_orbitals), n_particles) for o in combo),
        dtype=np.int32,
        count=count * n_particles,
    )
    return flat.reshape(count, n_particles)


@dataclass(frozen=True)
class Hops:
    """All nonzero c+_a c_b |source> = sign |target> within one Fock space (flat arrays)."""

    target: np.ndarray
    source: np.ndarray
    sign: np.ndarray
    a: np.ndarray
    b: np.ndarray


class FockSpace:
    """N fermions in M orbitals; configuration i is the sorted occupied list ``occupied[i]``.

    The order of configurations is the caller's (e.g. sorted by energy); ``index`` maps any
    occupied lists to positions (-1 when a configuration is not in this, possibly truncated, space).
    """

    def __init__(self, n_orbitals: int, n_particles: int, occupied: np.ndarray | None = None):
        self.n_orbitals = int(n_orbitals)
        self.n_particles = int(n_particles)
        if occupied is None:
            occupied = all_configurations(self.n_orbitals, self.n_particles)
        occupied = np.asarray(occupied, dtype=np.int32)
        if occupied.ndim != 2:
            occupied = occupied.reshape(-1, self.n_particles)
        if occupied.size and (occupied.min() < 0 or occupied.max() >= self.n_orbitals):
            raise ValueError("occupied orbitals out of range")
        if self.n_particles > 1 and np.any(np.diff(occupied, axis=1) <= 0):
            raise ValueError("each configuration must list distinct orbitals in ascending order")
        self.occupied = occupied
        self.ranks = _ranks(occupied)
        self._order = np.argsort(self.ranks, kind="stable")
        self._sorted_ranks = self.ranks[self._order]
        if np.any(np.diff(self._sorted_ranks) == 0):
            raise ValueError("duplicate configurations")
        self._hops: dict[tuple[int, ...] | None, Hops] = {}

    @property
    def dim(self) -> int:
        return self.occupied.shape[0]

    @property
    def occupations(self) -> np.ndarray:
        """n[i, a] in {0, 1} as float (dim x M)."""
        n = np.zeros((self.dim, self.n_orbitals))
        np.put_along_axis(n, self.occupied.astype(np.int64), 1.0, axis=1)
        return n

    def index(self, occupied: np.ndarray) -> np.ndarray:
        """Positions of sorted occupied lists (rows) in this space; -1 where absent."""
        occupied = np.asarray(occupied)
        ranks = _ranks(occupied if occupied.ndim == 2 else occupied.reshape(-1, self.n_particles))
        pos = np.searchsorted(self._sorted_ranks, ranks)
        pos = np.minimum(pos, max(self.dim - 1, 0))
        found = self._sorted_ranks[pos] == ranks if self.dim else np.zeros(len(ranks), bool)
        return np.where(found, self._order[pos], -1)

    def hops(self, pairs: np.ndarray | None = None) -> Hops:
        """Every c+_a c_b acting inside the space, restricted to orbital ``pairs`` (k x 2) if given.

        Sign: (-1)^(number of occupied orbitals strictly between a and b), the Jordan-Wigner
        string of moving one fermion from b to a in the ordered product of creation operators.
        """
        key = None if pairs is None else tuple(np.asarray(pairs).ravel().tolist())
        if key in self._hops:
            return self._hops[key]
        M, N, dim = self.n_orbitals, self.n_particles, self.dim
        occ = self.occupations
        below = np.zeros((dim, M + 1))
        np.cumsum(occ, axis=1, out=below[:, 1:])
        allowed = np.ones((M, M), bool)
        if pairs is not None:
            allowed[:] = False
            pairs = np.asarray(pairs, dtype=np.int64).reshape(-1, 2)
            allowed[pairs[:, 0], pairs[:, 1]] = True
        pieces = []
        for k in range(N):
            b = self.occupied[:, k].astype(np.int64)
            for a in range(M):
                ok = allowed[a, b] & ((occ[:, a] == 0) | (b == a))
                src = np.nonzero(ok)[0]
                if not len(src):
                    continue
                bb = b[src]
                lo, hi = np.minimum(a, bb), np.maximum(a, bb)
                between = below[src, hi] - below[src, np.minimum(lo + 1, hi)]
                new = self.occupied[src].copy()
                new[:, k] = a
                new.sort(axis=1)
                tgt = self.index(new)
                keep = tgt >= 0
                pieces.append(
                    (tgt[keep], src[keep], 1.0 - 2.0 * (between[keep] % 2), np.full(keep.sum(), a), bb[keep])
                )
        if pieces:
            arrays = [np.concatenate([p[i] for p in pieces]) for i in range(5)]
        else:
            arrays = [np.zeros(0, np.int64)] * 2 + [np.zeros(0)] + [np.zeros(0, np.int64)] * 2
        result = Hops(arrays[0].astype(np.int64), arrays[1].astype(np.int64), arrays[2], arrays[3], arrays[4])
        self._hops[key] = result
        return result

    def one_body(self, matrix: np.ndarray, hops: Hops | None = None) -> sp.csr_matrix:
        """sum_ab matrix[a, b] c+_a c_b as a CSR matrix on this space (pairs with zero entries skipped).

        ``hops``: every hop of the space (``hops()``), given when many operators are built on it, so that
        no per-pattern hop list is computed and cached for each."""
        matrix = np.asarray(matrix)
        if hops is None:
            hops = self.hops(np.argwhere(matrix != 0))
        data = hops.sign * matrix[hops.a, hops.b]
        keep = data != 0
        return sp.csr_matrix((data[keep], (hops.target[keep], hops.source[keep])), shape=(self.dim, self.dim))

    def one_body_entries(self, matrices: np.ndarray, hops: Hops) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The entries of O(A_k) = sum_ab A_k[a, b] c+_a c_b for a whole stack A (K x M x M) at once, as flat arrays
        (term k, target, source, value); ``hops``: every hop of the space (``hops()``). Entries several hops put on
        one (target, source) -- the diagonal, sum_a A_k[a, a] n_a -- are listed apart, to be summed by the
        consumer. The same operators as ``one_body`` per matrix, without building K sparse matrices."""
        matrices = np.asarray(matrices, dtype=float)
        code = hops.a.astype(np.int64) * self.n_orbitals + hops.b
        order = np.argsort(code, kind="stable")
        sorted_code = code[order]
        term, a, b = np.nonzero(matrices)
        wanted = a.astype(np.int64) * self.n_orbitals + b
        start = np.searchsorted(sorted_code, wanted, "left")
        counts = np.searchsorted(sorted_code, wanted, "right") - start
        offsets = np.cumsum(counts) - counts
        hop = order[np.repeat(start - offsets, counts) + np.arange(int(counts.sum()))]
        value = np.repeat(matrices[term, a, b], counts) * hops.sign[hop]
        return np.repeat(term, counts), hops.target[hop], hops.source[hop], value

    def transform(self, orbital_map: Sequence[int], orbital_phase: Sequence[float]) -> tuple[np.ndarray, np.ndarray]:
        """U c+_a U^-1 = phase[a] c+_{map[a]}: returns (target index, sign) for every configuration.

        The sign is the product of phases times the parity of the permutation that re-sorts the
        mapped creation operators; target is -1 when the image leaves a truncated space.
        """
        orbital_map = np.asarray(orbital_map, dtype=np.int64)
        phase = np.asarray(orbital_phase, dtype=float)
        mapped = orbital_map[self.occupied]
        inversions = np.zeros(self.dim, dtype=np.int64)
        for k in range(self.n_particles):
            for m in range(k + 1, self.n_particles):
                inversions += mapped[:, k] > mapped[:, m]
        sign = np.prod(phase[self.occupied], axis=1) * (1.0 - 2.0 * (inversions % 2))
        return self.index(np.sort(mapped, axis=1)), sign


# ----------------------------------------------------------------------------- product basis


@dataclass
class ProductBasis:
    """States |i_up> |i_down> kept in rectangles rows [r0, r1) x columns [c0, c1) of the padded
    coefficient matrix Psi (dim_up x dim_down); row ranges of different rectangles are disjoint.

    The coefficient vector lists the rectangles one after another, each row-major.
    """

    up: FockSpace
    down: FockSpace
    rectangles: np.ndarray  # (n_rect, 4) int: r0, r1, c0, c1
    flat: np.ndarray = field(init=False)

    def __post_init__(self):
        rect = np.asarray(self.rectangles, dtype=np.int64).reshape(-1, 4)
        rect = rect[(rect[:, 1] > rect[:, 0]) & (rect[:, 3] > rect[:, 2])]
        self.rectangles = rect
        rows = np.zeros(self.up.dim, int)
        for r0, r1, c0, c1 in rect:
            if r0 < 0 or r1 > self.up.dim or c0 < 0 or c1 > self.down.dim:
                raise ValueError("rectangle outside the product space")
            rows[r0:r1] += 1
        if np.any(rows > 1):
            raise ValueError("rectangles must have disjoint row ranges")
        parts = [
            (np.arange(r0, r1)[:, None] * self.down.dim + np.arange(c0, c1)[None, :]).ravel() for r0, r1, c0, c1 in rect
        ]
        self.flat = np.concatenate(parts) if parts else np.zeros(0, np.int64)

    @classmethod
    def full(cls, up: FockSpace, down: FockSpace) -> ProductBasis:
        return cls(up, down, np.array([[0, up.dim, 0, down.dim]]))

    @property
    def dim(self) -> int:
        return len(self.flat)

    @property
    def shape(self) -> tuple[int, int]:
        return (self.up.dim, self.down.dim)

    @property
    def up_index(self) -> np.ndarray:
        return self.flat // self.down.dim

    @property
    def down_index(self) -> np.ndarray:
        return self.flat % self.down.dim

    def to_matrix(self, vector: np.ndarray) -> np.ndarray:
        """Padded coefficient matrix Psi[i_up, i_down] (zeros outside the basis)."""
        psi = np.zeros(self.up.dim * self.down.dim, dtype=np.result_type(vector, float))
        psi[self.flat] = vector
        return psi.reshape(self.shape)

    def from_matrix(self, matrix: np.ndarray) -> np.ndarray:
        return np.asarray(matrix).reshape(-1)[self.flat]

    def positions_in(self, larger: ProductBasis) -> np.ndarray:
        """Where each of this basis' entries sits in ``larger`` (same particle numbers, its orbitals a subset
        of larger's by index); ValueError if an entry is missing there."""
        up = larger.up.index(self.up.occupied)[self.up_index]
        down = larger.down.index(self.down.occupied)[self.down_index]
        order = np.argsort(larger.flat)
        wanted = up * larger.down.dim + down
        found = order[np.minimum(np.searchsorted(larger.flat, wanted, sorter=order), larger.dim - 1)]
        if np.any(up < 0) or np.any(down < 0) or np.any(larger.flat[found] != wanted):
            raise ValueError("this basis is not contained in the larger one")
        return found


# ----------------------------------------------------------------------------- Hamiltonian


@dataclass(frozen=True)
class ContactFactorization:
    """g delta(x_up - x_down) as g sum_q w_q rho_up(x_q) rho_down(x_q).

    ``values_up[q, a]`` = phi_a(x_q) (real); ``parity_up[a]`` = +-1 when orbitals have definite
    parity and the points are symmetric (x_q = -x_{Q-1-q}, equal weights): the engine then folds
    q and -q into terms that conserve parity (half the work).
    """

    points: np.ndarray
    weights: np.ndarray
    values_up: np.ndarray
    values_down: np.ndarray
    parity_up: np.ndarray | None = None
    parity_down: np.ndarray | None = None


@dataclass(frozen=True)
class InteractionFactors:
    """A general up-down two-body operator as a sum of products of one-body operators,

        V = sum_k O_up(A_k) O_down(B_k),   O_s(A) = sum_ac A[a, c] c+_{s,a} c_{s,c},

    i.e. the tensor V[a, b, c, d] = sum_k A_k[a, c] B_k[b, d] (up c -> a, down d -> b). The engine then
    applies g sum_k O_up(A_k) Psi O_down(B_k)^T. ``from_tensor`` factorizes a tensor by SVD.
    """

    up: tuple
    down: tuple

    @classmethod
    def single_hops(cls, tensor: np.ndarray, tolerance: float = 1e-14, species: str = "up") -> InteractionFactors:
        """A_k = the single hop c+_a c_c (one unit entry), B_k = V[a, :, c, :], for every up pair (a, c) with an
        entry above ``tolerance`` x the largest: exact up to those entries, and cheap in the engine, which
        then computes only the scratch rows the hop reads (``_select_scratch_rows``). ``species = "down"``
        puts the single hops on the down species instead (B_k = hop (b, d), A_k = V[:, b, :, d]): the assembly
        is cheapest with the hops on the species of more configurations (``fock_assembly``'s outer one)."""
        if species == "down":
            swapped = cls.single_hops(np.asarray(tensor, dtype=float).transpose(1, 0, 3, 2), tolerance)
            return cls(swapped.down, swapped.up)
        tensor = np.asarray(tensor, dtype=float)
        m_u = tensor.shape[0]
        largest = np.abs(tensor).max() if tensor.size else 0.0
        ups, downs = [], []
        for a in range(m_u):
            for c in range(m_u):
                block = tensor[a, :, c, :]
                if largest and np.abs(block).max() > tolerance * largest:
                    hop = np.zeros((m_u, m_u))
                    hop[a, c] = 1.0
                    ups.append(hop)
                    downs.append(block.copy())
        return cls(tuple(ups), tuple(downs))

    @classmethod
    def from_tensor(
        cls, tensor: np.ndarray, parity_up: np.ndarray | None = None, parity_down: np.ndarray | None = None,
        tolerance: float = 1e-14,
    ) -> InteractionFactors:
        """SVD of X[(a, c), (b, d)] = V[a, b, c, d]; singular values below ``tolerance`` x the largest are
        dropped (the operator-norm error of the dropped part is at most that bound times the number
        dropped). With orbital parities given (V conserving parity: (-1)^(a+c) = (-1)^(b+d), up to entries
        below the same bound, which are dropped), the even and odd blocks are factorized apart so that every factor has definite parity (sparser operators)."""
        tensor = np.asarray(tensor, dtype=float)
        m_u, m_d = tensor.shape[0], tensor.shape[1]
        x = tensor.transpose(0, 2, 1, 3).reshape(m_u * m_u, m_d * m_d)
        largest = np.abs(x).max() if x.size else 0.0
        if parity_up is None or parity_down is None:
            blocks = [(np.ones(m_u * m_u, bool), np.ones(m_d * m_d, bool))]
        else:
            pu = np.outer(parity_up, parity_up).ravel()
            pd = np.outer(parity_down, parity_down).ravel()
            if np.any(np.abs(x[np.not_equal.outer(pu, pd)]) > tolerance * largest):
                raise ValueError("the tensor does not conserve the given parities")
            blocks = [(pu == s, pd == s) for s in (+1, -1)]
        ups, downs = [], []
        for rows, cols in blocks:
            if not largest:
                break
            u, sigma, vt = np.linalg.svd(x[np.ix_(rows, cols)], full_matrices=False)
            for k in np.nonzero(sigma > tolerance * largest)[0]:
                a = np.zeros(m_u * m_u)
                a[rows] = u[:, k] * sigma[k]
                b = np.zeros(m_d * m_d)
                b[cols] = vt[k]
                ups.append(a.reshape(m_u, m_u))
                downs.append(b.reshape(m_d, m_d))
        return cls(tuple(ups), tuple(downs))


def _density_operator(space: FockSpace, values: np.ndarray, pair_parity: np.ndarray | None, sector: int):
    """D(q) = sum_ab phi_a(x_q) phi_b(x_q) c+_a c_b for one point (values = phi(x_q), length M),
    keeping only orbital pairs whose parity product equals ``sector`` when ``pair_parity`` is given.

    Off-diagonal hops (a != b) map each source to a distinct target, so the CSR pattern is fixed;
    the diagonal is n . phi^2.
    """
    M = space.n_orbitals
    allowed = ~np.eye(M, dtype=bool)
    if pair_parity is not None:
        allowed &= np.outer(pair_parity, pair_parity) == sector
    hops = space.hops(np.argwhere(allowed))
    data = hops.sign * values[hops.a] * values[hops.b]
    diag = space.occupations @ (values**2)
    if pair_parity is not None and sector != 1:
        diag = np.zeros(space.dim)
    rows = np.concatenate([hops.target, np.arange(space.dim)])
    cols = np.concatenate([hops.source, np.arange(space.dim)])
    return sp.csr_matrix((np.concatenate([data, diag]), (rows, cols)), shape=(space.dim, space.dim))


class ProductHamiltonian:
    """H on a ``ProductBasis``: one-body matrices per species plus the factorized contact term.

    h_up, h_down: M_s x M_s one-body matrices (kinetic + trap) in the orbital basis.
    ``terms_per_chunk`` bounds the intermediate memory to terms x dim_up x dim_down x 8 bytes
    (default: as many terms as fit in SCRATCH_ELEMENTS).
    ``assemble_limit`` > 0: up to ``ASSEMBLY_MAX_DIM``, H is built as an explicit CSR matrix (``matrix``,
    ``fock_assembly``) when it has at most that many nonzeros; products then use it (a tenth of the
    matrix-free cost on small oscillator bases), otherwise the kernels below.
    """

    def __init__(
        self,
        basis: ProductBasis,
        h_up: np.ndarray,
        h_down: np.ndarray,
        g: float,
        contact: ContactFactorization | InteractionFactors | None,
        terms_per_chunk: int | None = None,
        assemble_limit: float = 0,
    ):
        self.basis = basis
        self.g = float(g)
        n_u, n_d = basis.shape
        self._diag_one_body = _is_diagonal(h_up) and _is_diagonal(h_down)
        if self._diag_one_body:
            e_u = basis.up.occupations @ np.diag(h_up).real
            e_d = basis.down.occupations @ np.diag(h_down).real
            self._one_body_diag = e_u[:, None] + e_d[None, :]
        else:
            self._h_up = basis.up.one_body(h_up)
            self._h_down_t = basis.down.one_body(h_down).T.tocsr()
        self._interaction_diag = None
        self._chunks: list = []
        self.matrix: sp.csr_matrix | None = None
        terms = []
        if isinstance(contact, InteractionFactors) and self.g != 0.0:
            if assemble_limit and basis.dim <= ASSEMBLY_MAX_DIM:
                self.matrix = self._assemble_factors(contact, assemble_limit)
            if self.matrix is None:
                terms = self._factor_terms(contact)
        elif contact is not None and self.g != 0.0:
            terms = self._contact_terms(contact)
        if terms and self.matrix is None and assemble_limit and basis.dim <= ASSEMBLY_MAX_DIM:
            built = [term() for term in terms]
            self.matrix = self._assemble(built, assemble_limit)
            terms = [lambda pair=pair: pair for pair in built]  # the fallback reuses them (small bases only)
        if terms and self.matrix is None:
            self._prepare_terms(terms, terms_per_chunk)
        mask = np.zeros(n_u * n_d, bool)
        mask[basis.flat] = True
        self._mask = mask.reshape(n_u, n_d)
        self.matvec_count = 0

    # -------------------------------------------------------------- setup
    def _assemble(self, terms: list, limit: float) -> sp.csr_matrix | None:
        """The explicit CSR matrix (``fock_assembly``) of one-body part plus g sum_k U_k (x) D_k, or None;
        ``terms``: the built (U_k, D_k)."""
        pairs = [(self.g, up, down) for up, down in terms]
        if not self._diag_one_body:
            pairs += self._one_body_terms()
        matrix = fock_assembly.assemble(self.basis, pairs, limit)
        if matrix is not None and self._diag_one_body:
            matrix = (matrix + self.one_body_matrix()).tocsr()
        return matrix

    def _contact_terms(self, c: ContactFactorization) -> list:
        """The contact's terms (callables returning (up operator, down operator)); none when every D(q) is
        diagonal (lattice): that case is kept as the dense array ``_interaction_diag``."""
        vu, vd, w = np.asarray(c.values_up), np.asarray(c.values_down), np.asarray(c.weights, float)
        if np.iscomplexobj(vu) or np.iscomplexobj(vd):
            raise ValueError("the contact factorization needs real orbital values at the points")
        if np.all(np.count_nonzero(vu, axis=1) <= 1) and np.all(np.count_nonzero(vd, axis=1) <= 1):
            # every D(q) is diagonal: V[i, j] = sum_q w_q (n_up[i] . phi^2(q)) (n_down[j] . chi^2(q))
            du = self.basis.up.occupations @ (vu**2).T
            dd = self.basis.down.occupations @ (vd**2).T
            self._interaction_diag = self.g * (du * w[None, :]) @ dd.T
            return []
        terms = []  # (weight, values_up row, values_down row, parity sector)
        x = np.asarray(c.points, float)
        fold = (
            c.parity_up is not None
            and c.parity_down is not None
            and np.allclose(x, -x[::-1], atol=1e-13)
            and np.allclose(w, w[::-1], rtol=1e-12)
        )
        if fold:
            for q in range(len(x)):
                if x[q] > 0:
                    terms += [(2 * w[q], vu[q], vd[q], +1), (2 * w[q], vu[q], vd[q], -1)]
                elif x[q] == 0:
                    terms.append((w[q], vu[q], vd[q], +1))
        else:
            terms = [(w[q], vu[q], vd[q], 0) for q in range(len(x))]

        def operators(weight, ru, rd, sector):
            pu = c.parity_up if sector else None
            pd = c.parity_down if sector else None
            return (
                weight * _density_operator(self.basis.up, ru, pu, sector),
                _density_operator(self.basis.down, rd, pd, sector),
            )

        return [lambda t=t: operators(*t) for t in terms]

    def _assemble_factors(self, f: InteractionFactors, limit: float) -> sp.csr_matrix | None:
        """The explicit CSR matrix of the one-body part plus g sum_k O_up(A_k) (x) O_down(B_k), or None (too many
        nonzeros; ``fock_assembly.assemble_in_ranges``). The factors' operators come as whole stacks
        (``FockSpace.one_body_entries``), a range of terms at a time: many factors (the effective interaction
        has thousands) then cost no sparse matrix each. ``limit`` bounds the interaction's nonzeros."""
        up_is_outer = fock_assembly.outer_is_up(self.basis)
        outer, inner = (self.basis.up, self.basis.down) if up_is_outer else (self.basis.down, self.basis.up)
        outer_factors, inner_factors = (f.up, f.down) if up_is_outer else (f.down, f.up)
        per_chunk = max(1, int(SCRATCH_ELEMENTS // 10 // max(1, inner.dim**2)))  # bounds the entry lists' memory

        def parts(start: int, stop: int):
            term, rows, cols, values = outer.one_body_entries(np.array(outer_factors[start:stop]), outer.hops())
            inner_stack = np.zeros((stop - start, inner.dim, inner.dim))
            for first in range(start, stop, per_chunk):
                last = min(stop, first + per_chunk)
                k, target, source, entries = inner.one_body_entries(np.array(inner_factors[first:last]), inner.hops())
                np.add.at(inner_stack, (first - start + k, target, source), entries)
            return (rows, cols, term, self.g * values), inner_stack

        matrix = fock_assembly.assemble_in_ranges(self.basis, len(outer_factors), parts, limit)
        if matrix is None:
            return None
        return (matrix + self.one_body_matrix()).tocsr()

    def _factor_terms(self, f: InteractionFactors) -> list:
        """Terms O_up(A_k) (x) O_down(B_k), each a one-body operator of its species (``FockSpace.one_body`` on
        the space's full hop list)."""
        up, down = self.basis.up, self.basis.down
        hops_up, hops_down = up.hops(), down.hops()
        return [lambda a=a, b=b: (up.one_body(a, hops_up), down.one_body(b, hops_down)) for a, b in zip(f.up, f.down)]

    def _prepare_terms(self, terms: list, per_chunk: int | None) -> None:
        """Stack the terms' operators chunk by chunk for the kernels; ``terms`` are callables returning
        (up operator, down operator), built only when their chunk is (bounded memory)."""
        n_u, n_d = self.basis.shape
        if per_chunk is None:
            per_chunk = max(1, min(len(terms), int(SCRATCH_ELEMENTS // max(1, n_u * n_d))))
        for start in range(0, len(terms), per_chunk):
            pairs = [term() for term in terms[start : start + per_chunk]]
            k = len(pairs)
            down_stack = sp.vstack([d for _, d in pairs]).tocsc()  # (K n_d) x n_d: column j holds rows k*n_d + j'
            up_stack = sp.hstack([u for u, _ in pairs]).tocsr()  # n_u x (K n_u): row i holds columns k*n_u + i'
            for m in (down_stack, up_stack):
                m.sum_duplicates()
            # renumber up columns to i'*K + k: the scratch T[i', k*n_d + j] is then read row by row
            up_stack = sp.csr_matrix(
                (up_stack.data, (up_stack.indices % n_u) * k + up_stack.indices // n_u, up_stack.indptr),
                shape=up_stack.shape,
            )
            self._chunks.append(_select_scratch_rows(k, n_u, n_d, down_stack, up_stack))
        rows_c0 = np.zeros(n_u, np.int64)
        rows_c1 = np.zeros(n_u, np.int64)
        for r0, r1, c0, c1 in self.basis.rectangles:
            rows_c0[r0:r1], rows_c1[r0:r1] = c0, c1
        self._row_columns = (rows_c0, rows_c1)

    def one_body_matrix(self) -> sp.csr_matrix:
        """The one-body part sum_s h_s on the basis as an explicit CSR matrix."""
        if self._diag_one_body:
            return sp.diags(self._one_body_diag.reshape(-1)[self.basis.flat]).tocsr()
        return fock_assembly.assemble(self.basis, self._one_body_terms(), np.inf)

    def _one_body_terms(self) -> list:
        """h_up (x) 1 + 1 (x) h_down as assembly terms (s, O_up, O_down), for a one-body part that is not diagonal."""
        n_u, n_d = self.basis.shape
        return [(1.0, self._h_up, sp.identity(n_d, format="csr")), (1.0, sp.identity(n_u, format="csr"), self._h_down_t.T)]

    # -------------------------------------------------------------- action
    def apply_matrix(self, psi: np.ndarray) -> np.ndarray:
        """H acting on padded coefficient matrices psi[i_up, i_down, v] (zeros outside the basis)."""
        if np.iscomplexobj(psi):  # H is real: act on both parts
            return self.apply_matrix(psi.real.copy()) + 1j * self.apply_matrix(psi.imag.copy())
        n_u, n_d, nv = psi.shape
        if self._diag_one_body:
            out = self._one_body_diag[:, :, None] * psi
        else:
            out = (self._h_up @ psi.reshape(n_u, n_d * nv)).reshape(n_u, n_d, nv)
            down = self._h_down_t.T @ psi.transpose(1, 0, 2).reshape(n_d, n_u * nv)
            out += down.reshape(n_d, n_u, nv).transpose(1, 0, 2)
        if self._interaction_diag is not None:
            out += self._interaction_diag[:, :, None] * psi
        if self._chunks:
            step_down, step_up, step_down_selected = _kernels()
            c0, c1 = self._row_columns
            work = np.ascontiguousarray(psi.transpose(2, 0, 1), dtype=float)  # (nv, n_u, n_d)
            result = np.zeros_like(work)
            for k, down_stack, up_stack, selected in self._chunks:
                if selected is None:
                    t = np.zeros((nv, n_u, k * n_d))
                    step_down(work, c0, c1, down_stack.indptr, down_stack.indices, down_stack.data, t)
                    t = t.reshape(nv, n_u * k, n_d)
                else:
                    row_ptr, row_term, term_ptr, rows = selected
                    t = np.zeros((nv, len(row_term), n_d))
                    step_down_selected(work, c0, c1, row_ptr, row_term, term_ptr, rows, down_stack.data, t)
                step_up(t, c0, c1, up_stack.indptr, up_stack.indices, up_stack.data, self.g, result)
            out += result.transpose(1, 2, 0)
        out[~self._mask] = 0.0
        return out

    def matmat(self, vectors: np.ndarray) -> np.ndarray:
        """H applied to columns of ``vectors`` (dim x nv), in batches that bound the scratch memory."""
        vectors = np.asarray(vectors)
        if vectors.ndim == 1:
            vectors = vectors[:, None]
        dim, nv = vectors.shape
        if self.matrix is not None:
            self.matvec_count += nv
            return self.matrix @ vectors
        n_u, n_d = self.basis.shape
        terms = max((k for k, _, _, _ in self._chunks), default=1)
        batch = max(1, int(SCRATCH_ELEMENTS // max(1, terms * n_u * n_d)))
        out = np.empty((dim, nv), dtype=np.result_type(vectors, float))
        for s in range(0, nv, batch):
            part = vectors[:, s : s + batch]
            psi = np.zeros((n_u * n_d, part.shape[1]), dtype=out.dtype)
            psi[self.basis.flat] = part
            result = self.apply_matrix(psi.reshape(n_u, n_d, -1))
            out[:, s : s + batch] = result.reshape(n_u * n_d, -1)[self.basis.flat]
        self.matvec_count += nv
        return out

    def matvec(self, vector: np.ndarray) -> np.ndarray:
        return self.matmat(np.asarray(vector).reshape(-1, 1))[:, 0]

    def as_linear_operator(self, dtype=float) -> LinearOperator:
        return LinearOperator(
            (self.basis.dim, self.basis.dim), matvec=self.matvec, matmat=self.matmat, dtype=dtype
        )

    def multiply_adds(self) -> int:
        """Multiply-adds of the interaction kernels per matvec (the work a CSR matvec would need as
        nonzeros; used to compare throughput with a plain scipy CSR matvec)."""
        c0, c1 = self._row_columns if self._chunks else (None, None)
        total = 0
        for _, down_stack, up_stack, _ in self._chunks:
            per_col = np.diff(down_stack.indptr)
            cum = np.concatenate([[0], np.cumsum(per_col)])
            total += int(np.sum(cum[c1] - cum[c0]))
            total += int(np.sum(np.diff(up_stack.indptr) * (c1 - c0)))
        return total + self.basis.dim

    def to_dense(self) -> np.ndarray:
        """The full matrix (small bases only): H applied to every unit vector."""
        dim = self.basis.dim
        if dim > 20000:
            raise ValueError(f"dimension {dim} is too large for a dense matrix")
        matrix = self.matmat(np.eye(dim))
        return 0.5 * (matrix + matrix.T)


_KERNELS = None


def _kernels():
    """Compiled matvec kernels of the factorized interaction (numba, compiled once and cached).

    step_down: T[v, i, k n_d + j'] = sum_{j in cols(i)} D_k[j', j] psi[v, i, j]  (D stacked, CSC)
    step_up:   out[v, i, j] += g sum_{(k, i')} (w_k U_k)[i, i'] T[v, i' K + k, j], j in cols(i)  (CSR,
               columns renumbered i' K + k)
    step_down_selected: step_down on selected scratch rows only (``_select_scratch_rows``):
               T[v, r, j'] = sum_{j in cols(i')} D_k[j', j] psi[v, i', j] for the rows r of configuration
               i' (term k = row_term[r]); D_k's entries in column j are term_ptr[j, k] .. term_ptr[j, k + 1]
               of the stacked CSC arrays (row j' = index mod n_d).
    Work = nonzeros x columns kept; each configuration's scratch row T[i] stays in cache.
    """
    global _KERNELS
    if _KERNELS is None:
        import numba

        @numba.njit(cache=True)
        def step_down(psi, c0, c1, indptr, indices, data, t):
            for v in range(psi.shape[0]):
                for i in range(psi.shape[1]):
                    for j in range(c0[i], c1[i]):
                        x = psi[v, i, j]
                        if x == 0.0:
                            continue
                        for p in range(indptr[j], indptr[j + 1]):
                            t[v, i, indices[p]] += data[p] * x

        @numba.njit(cache=True)
        def step_up(t, c0, c1, indptr, indices, data, g, out):
            for v in range(out.shape[0]):
                for i in range(out.shape[1]):
                    a, b = c0[i], c1[i]
                    if a == b:
                        continue
                    for p in range(indptr[i], indptr[i + 1]):
                        col = indices[p]
                        val = g * data[p]
                        for j in range(a, b):
                            out[v, i, j] += val * t[v, col, j]

        @numba.njit(cache=True)
        def step_down_selected(psi, c0, c1, row_ptr, row_term, term_ptr, rows, data, t):
            for v in range(psi.shape[0]):
                for i in range(psi.shape[1]):
                    for r in range(row_ptr[i], row_ptr[i + 1]):
                        k = row_term[r]
                        for j in range(c0[i], c1[i]):
                            x = psi[v, i, j]
                            if x == 0.0:
                                continue
                            for p in range(term_ptr[j, k], term_ptr[j, k + 1]):
                                t[v, r, rows[p]] += data[p] * x

        _KERNELS = (step_down, step_up, step_down_selected)
    return _KERNELS


def _select_scratch_rows(k: int, n_u: int, n_d: int, down_stack: sp.csc_matrix, up_stack: sp.csr_matrix):
    """(k, down_stack, up_stack, selection) of one chunk.

    The scratch row T[i', k] = Psi[i', :] D_k^T is needed only where some up operator U_k reads
    configuration i' (column i' K + k of ``up_stack``). When fewer than half of them are (sparse up
    factors, e.g. single hops c+_a c_c), only those rows are stored and computed: ``up_stack`` columns
    are renumbered to the compact row r, and the selection holds, per i', its rows r (row_ptr) with
    their term k (row_term), and per down column j the start of each term's entries (term_ptr[j, k]) and the down row j' of every entry.
    """
    needed = np.unique(up_stack.indices)
    if len(needed) >= 0.5 * n_u * k:
        return k, down_stack, up_stack, None
    up_stack = sp.csr_matrix(
        (up_stack.data, np.searchsorted(needed, up_stack.indices), up_stack.indptr), shape=(n_u, len(needed))
    )
    row_ptr = np.searchsorted(needed // k, np.arange(n_u + 1)).astype(np.int64)
    row_term = (needed % k).astype(np.int64)
    down_stack.sort_indices()
    column = np.repeat(np.arange(n_d), np.diff(down_stack.indptr))
    counts = np.zeros((n_d, k), np.int64)
    np.add.at(counts, (column, down_stack.indices // n_d), 1)
    term_ptr = np.zeros((n_d, k + 1), np.int64)
    term_ptr[:, 0] = down_stack.indptr[:-1]
    term_ptr[:, 1:] = down_stack.indptr[:-1, None] + np.cumsum(counts, axis=1)
    return k, down_stack, up_stack, (row_ptr, row_term, term_ptr, (down_stack.indices % n_d).astype(np.int64))


def _is_diagonal(matrix: np.ndarray) -> bool:
    matrix = np.asarray(matrix)
    return bool(np.all(matrix == np.diag(np.diag(matrix))))


# ----------------------------------------------------------------------------- parity sectors


def parity_isometry(basis: ProductBasis, up: tuple, down: tuple, sector: int) -> sp.csr_matrix:
    """Columns spanning the parity sector ``sector`` (+1/-1) of ``basis``.

    ``up`` and ``down`` are ``FockSpace.transform`` results (target, sign). The product parity is
    P|i, j> = s_up(i) s_down(j) |P i, P j> (no sign between species: each species is mapped onto
    itself). Each orbit {b, P b} gives (|b> + sector * P|b>)/sqrt(2), or |b> when P b = +-b.
    """
    t_u, s_u = up
    t_d, s_d = down
    i, j = basis.up_index, basis.down_index
    if np.any(t_u[i] < 0) or np.any(t_d[j] < 0):
        raise ValueError("the basis is not closed under parity")
    image_flat = t_u[i] * basis.down.dim + t_d[j]
    position = np.full(basis.up.dim * basis.down.dim, -1, dtype=np.int64)
    position[basis.flat] = np.arange(basis.dim)
    image = position[image_flat]
    if np.any(image < 0):
        raise ValueError("the basis is not closed under parity")
    sign = s_u[i] * s_d[j]
    me = np.arange(basis.dim)
    fixed = image == me
    keep_fixed = fixed & (sign == sector)
    pair = (~fixed) & (me < image)
    rows = np.concatenate([me[keep_fixed], me[pair], image[pair]])
    n_fixed, n_pair = int(keep_fixed.sum()), int(pair.sum())
    cols = np.concatenate([np.arange(n_fixed), n_fixed + np.arange(n_pair), n_fixed + np.arange(n_pair)])
    vals = np.concatenate([np.ones(n_fixed), np.full(n_pair, 1 / math.sqrt(2)), sector * sign[pair] / math.sqrt(2)])
    return sp.csr_matrix((vals, (rows, cols)), shape=(basis.dim, n_fixed + n_pair))


def project(operator: LinearOperator, isometry: sp.spmatrix) -> LinearOperator:
    """V^T H V as a LinearOperator (V real, orthonormal columns)."""
    vt = isometry.T.tocsr()
    return LinearOperator(
        (isometry.shape[1], isometry.shape[1]), matvec=lambda v: vt @ (operator @ (isometry @ v)), dtype=float
    )


class MatrixOperator:
    """An explicit H (CSR) with ``ProductHamiltonian``'s product interface and product count."""

    def __init__(self, matrix: sp.csr_matrix):
        self.matrix = matrix
        self.matvec_count = 0

    def matmat(self, vectors: np.ndarray) -> np.ndarray:
        vectors = np.asarray(vectors)
        self.matvec_count += 1 if vectors.ndim == 1 else vectors.shape[1]
        return self.matrix @ vectors

    def matvec(self, vector: np.ndarray) -> np.ndarray:
        return self.matmat(np.asarray(vector).reshape(-1))

    def as_linear_operator(self, dtype=float) -> LinearOperator:
        return LinearOperator(self.matrix.shape, matvec=self.matvec, matmat=self.matmat, dtype=dtype)


# ----------------------------------------------------------------------------- eigensolver


def lowest_eigenpairs(
    operator, k: int, tol: float = 1e-12, v0: np.ndarray | None = None, dense_limit: int = DENSE_LIMIT
) -> tuple[np.ndarray, np.ndarray]:
    """The k lowest eigenvalues (ascending) and eigenvectors (columns) of a real symmetric operator.

    Dense ``eigh`` below ``dense_limit``; otherwise Lanczos (ARPACK ``eigsh``, which='SA',
    ncv = max(2k+1, 24)). BLAS uses the thread count its caller set (trapbench runs tasks on
    ``--blas-threads`` threads, default 1: the common practice on shared machines).
    """
    dim = operator.shape[0]
    k = min(k, dim)
    if dim <= dense_limit:
        if isinstance(operator, np.ndarray):
            matrix = operator
        else:
            matrix = operator @ np.eye(dim)
            matrix = 0.5 * (matrix + matrix.T)
        values, vectors = np.linalg.eigh(matrix)
        return values[:k], vectors[:, :k]
    ncv = min(dim, max(2 * k + 1, 24))
    values, vectors = eigsh(operator, k=k, which="SA", tol=tol, v0=v0, ncv=ncv)
    order = np.argsort(values)
    values, vectors = values[order], vectors[:, order]
    # Lanczos builds one Krylov space: copies of an exactly degenerate level beyond the first are
    # found only through rounding, if at all. Move the found vectors up by a shift larger than the
    # spread of the levels and search again; repeat while new vectors appear below the k-th level.
    # Each round first asks only for the lowest level of the shifted operator: none was missed unless it
    # lies below the k-th level (the usual case, settled at a fraction of a k-level search).
    for _ in range(k):
        if dim - k < k:
            break
        shift = 2.0 * (values[-1] - values[0]) + 1.0
        found = vectors

        def deflated(x, found=found, shift=shift):
            x = np.asarray(x).reshape(dim, -1)
            return (operator @ x) + shift * (found @ (found.T @ x))

        shifted = LinearOperator((dim, dim), matvec=deflated, matmat=deflated, dtype=float)
        margin = max(abs(tol), 1e-12) * max(1.0, abs(values[-1]))
        lowest = eigsh(shifted, k=1, which="SA", tol=tol, ncv=ncv, return_eigenvectors=False)
        if lowest[0] >= values[-1] - margin:
            break
        more_values, more_vectors = eigsh(shifted, k=k, which="SA", tol=tol, ncv=ncv)
        new = more_values < values[-1] - margin
        if not np.any(new):
            break
        values = np.concatenate([values, more_values[new]])
        vectors = np.concatenate([vectors, more_vectors[:, new]], axis=1)
        order = np.argsort(values)[:k]
        values, vectors = values[order], vectors[:, order]
    return values, vectors


def degeneracies(energies: Sequence[float], tol: float) -> list[int]:
    """For each level, how many levels (itself included) lie in its cluster of spacing < tol."""
    energies = np.asarray(energies, float)
    labels = np.zeros(len(energies), int)
    for i in range(1, len(energies)):
        labels[i] = labels[i - 1] + (energies[i] - energies[i - 1] >= tol)
    counts = np.bincount(labels) if len(labels) else np.zeros(0, int)
    return [int(counts[label]) for label in labels]


# ----------------------------------------------------------------------------- observables


def one_body_density_matrices(basis: ProductBasis, vector: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """rho_s[a, b] = <c+_{s,a} c_{s,b}> for a normalized state; trace rho_s = N_s."""
    psi = basis.to_matrix(vector)
    r_up = psi @ psi.conj().T  # R[s, t] = sum_j psi[s, j] conj(psi[t, j])
    r_down = psi.T @ psi.conj()
    result = []
    for space, r in ((basis.up, r_up), (basis.down, r_down)):
        hops = space.hops()
        M = space.n_orbitals
        contrib = hops.sign * r[hops.source, hops.target]
        rho = np.zeros(M * M, dtype=r.dtype)
        np.add.at(rho, hops.a * M + hops.b, contrib)
        result.append(rho.reshape(M, M))
    return result[0], result[1]


def pair_tensor(basis: ProductBasis, vector: np.ndarray) -> np.ndarray:
    """Gamma[a, b, c, d] = <c+_{up,a} c_{up,b} c+_{down,c} c_{down,d}> (M_up, M_up, M_down, M_down).

    Cost ~ dim_down^2 x (number of up hops), as one matrix product per up orbital pair.
    """
    psi = basis.to_matrix(vector)
    up_hops, down_hops = basis.up.hops(), basis.down.hops()
    M_u, M_d = basis.up.n_orbitals, basis.down.n_orbitals
    gamma = np.zeros((M_u * M_u, M_d * M_d), dtype=psi.dtype)
    pair_u = up_hops.a * M_u + up_hops.b
    pair_d = down_hops.a * M_d + down_hops.b
    order = np.argsort(pair_u, kind="stable")
    bounds = np.searchsorted(pair_u[order], np.arange(M_u * M_u + 1))
    for ab in range(M_u * M_u):
        sel = order[bounds[ab] : bounds[ab + 1]]
        if not len(sel):
            continue
        # X[t', s'] = sum_h sign_h conj(psi[target_h, t']) psi[source_h, s']
        x = psi[up_hops.target[sel]].conj().T @ (up_hops.sign[sel, None] * psi[up_hops.source[sel]])
        contrib = down_hops.sign * x[down_hops.target, down_hops.source]
        gamma[ab] = np.bincount(pair_d, weights=contrib.real, minlength=M_d * M_d)
        if np.iscomplexobj(contrib):
            gamma[ab] += 1j * np.bincount(pair_d, weights=contrib.imag, minlength=M_d * M_d)
    return gamma.reshape(M_u, M_u, M_d, M_d)


def orbital_products(values: np.ndarray) -> np.ndarray:
    """F[x, a, b] = conj(phi_a(x)) phi_b(x) for orbital values (n_x x M)."""
    values = np.asarray(values)
    return values.conj()[:, :, None] * values[:, None, :]


def density_on_grid(rho: np.ndarray, values: np.ndarray) -> np.ndarray:
    """n(x) = sum_ab conj(phi_a(x)) phi_b(x) rho[a, b] (real for a Hermitian rho)."""
    return np.einsum("xa,ab,xb->x", np.asarray(values).conj(), rho, values).real


def obdm_on_grid(rho: np.ndarray, values: np.ndarray) -> np.ndarray:
    """rho(x, x') = <psi+(x) psi(x')> = sum_ab conj(phi_a(x)) rho[a, b] phi_b(x')."""
    values = np.asarray(values)
    return values.conj() @ rho @ values.T


def pair_on_grid(gamma: np.ndarray, values_up: np.ndarray, values_down: np.ndarray) -> np.ndarray:
    """G(x1, x2) = <n_up(x1) n_down(x2)> = sum F_up[x1, ab] Gamma[ab, cd] F_down[x2, cd]."""
    M_u, M_d = gamma.shape[0], gamma.shape[2]
    f_u = orbital_products(values_up).reshape(len(values_up), M_u * M_u)
    f_d = orbital_products(values_down).reshape(len(values_down), M_d * M_d)
    return (f_u @ gamma.reshape(M_u * M_u, M_d * M_d) @ f_d.T).real


def noise_on_grid(gamma, rho_up, rho_down, values_up, values_down) -> np.ndarray:
    """C(p1, p2) = G(p1, p2) - n_up(p1) n_down(p2)."""
    return pair_on_grid(gamma, values_up, values_down) - np.outer(
        density_on_grid(rho_up, values_up), density_on_grid(rho_down, values_down)
    )


def noise_integral(gamma, rho_up, rho_down, values_up, weights_up, values_down, weights_down) -> float:
    """integral dp1 dp2 C(p1, p2)^2 as the quadrature sum_{p1, p2} w1 w2 C^2.

    Exact when the quadrature integrates the squared products of orbital values exactly
    (Gauss-Hermite for oscillator orbitals); a Riemann/trapezoid sum on a uniform grid otherwise.
    """
    c = noise_on_grid(gamma, rho_up, rho_down, values_up, values_down)
    return float(np.asarray(weights_up) @ (c**2) @ np.asarray(weights_down))


def contact_expectation(gamma: np.ndarray, contact: ContactFactorization) -> float:
    """<sum_{i up, j down} delta(x_i - x_j)> = sum_q w_q G(x_q, x_q) with the Hamiltonian's points."""
    M_u, M_d = gamma.shape[0], gamma.shape[2]
    f_u = orbital_products(contact.values_up).reshape(len(contact.weights), M_u * M_u)
    f_d = orbital_products(contact.values_down).reshape(len(contact.weights), M_d * M_d)
    g2 = gamma.reshape(M_u * M_u, M_d * M_d)
    return float((np.asarray(contact.weights) @ np.sum((f_u @ g2) * f_d, axis=1)).real)


def one_body_expectation(rho: np.ndarray, matrix: np.ndarray) -> float:
    """<sum_ab O_ab c+_a c_b> = sum_ab O_ab rho[a, b] (e.g. the trap energy with O = V_trap)."""
    return float(np.sum(np.asarray(matrix) * rho).real)
