"""Checks of the shared Fock-space ED engine against independent constructions.

The reference for every operator is a brute-force Jordan-Wigner construction on the full 2^M
(or 2^(M_up + M_down)) Fock space with dense matrices (textbook second quantization, common
practice), restricted to fixed particle numbers; it shares no code with the engine.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.sparse.linalg import LinearOperator
from threadpoolctl import threadpool_limits

from trapbench.backends import fock_assembly
from trapbench.backends import fock_ed as fe


@pytest.fixture(autouse=True)
def one_blas_thread():
    """Dense LAPACK on a shared 2-core machine is many times slower with two threads."""
    with threadpool_limits(limits=1):
        yield


# ----------------------------------------------------------------------------- brute force


def jordan_wigner_annihilators(n_modes: int) -> list[np.ndarray]:
    """Dense c_k on 2^n_modes states; basis state bits: bit k = occupation of mode k.

    c_k |..n_k..> = (-1)^(sum_{j<k} n_j) |..n_k - 1..> (modes ordered 0 < 1 < ...).
    """
    dim = 2**n_modes
    ops = []
    for k in range(n_modes):
        c = np.zeros((dim, dim))
        for state in range(dim):
            if state >> k & 1:
                sign = (-1) ** bin(state & ((1 << k) - 1)).count("1")
                c[state ^ (1 << k), state] = sign
        ops.append(c)
    return ops


def fixed_number_states(n_modes: int, occupied_lists: np.ndarray, offset: int = 0) -> list[int]:
    return [sum(1 << (o + offset) for o in occ) for occ in occupied_lists]


# ----------------------------------------------------------------------------- single species


def test_one_body_operator_matches_jordan_wigner():
    rng = np.random.default_rng(1)
    M, N = 6, 3
    h = rng.normal(size=(M, M))
    space = fe.FockSpace(M, N)
    c = jordan_wigner_annihilators(M)
    full = sum(h[a, b] * c[a].T @ c[b] for a in range(M) for b in range(M))
    states = fixed_number_states(M, space.occupied)
    expected = full[np.ix_(states, states)]
    assert np.allclose(space.one_body(h).toarray(), expected, atol=1e-13)


def test_one_body_entries_of_a_stack_are_the_operators_one_by_one():
    """``one_body_entries`` of a stack of matrices (some sparse, as single hops, some dense) lists exactly the
    entries of ``one_body`` of each matrix, once repeated entries are summed (self-consistency of two routes;
    ``one_body`` itself is checked against Jordan-Wigner above)."""
    rng = np.random.default_rng(3)
    M, N = 7, 3
    space = fe.FockSpace(M, N)
    stack = rng.normal(size=(5, M, M))
    stack[:2] = 0.0
    stack[0, 2, 5] = 1.0  # a single hop
    stack[1, 4, 4] = -0.5  # a single number operator
    stack[2, rng.random((M, M)) < 0.6] = 0.0
    k, target, source, value = space.one_body_entries(stack, space.hops())
    for term, matrix in enumerate(stack):
        mine = k == term
        rebuilt = np.zeros((space.dim, space.dim))
        np.add.at(rebuilt, (target[mine], source[mine]), value[mine])
        assert np.abs(rebuilt - space.one_body(matrix).toarray()).max() < 1e-14
        assert np.abs(rebuilt).max() > 0.1


def test_truncated_space_index_and_transform_sign():
    M, N = 7, 3
    space = fe.FockSpace(M, N)
    # a truncated, reordered subspace finds its members and rejects the others
    keep = space.occupied[::3][::-1]
    sub = fe.FockSpace(M, N, keep)
    assert np.array_equal(sub.index(keep), np.arange(len(keep)))
    missing = space.occupied[1:2]
    assert sub.index(missing)[0] == -1
    # reflection i -> M-1-i of three fermions reverses their order: sign (-1)^(3*2/2) = -1
    target, sign = space.transform(np.arange(M)[::-1], np.ones(M))
    assert np.all(sign == -1)
    # brute force: P c+_i P^-1 = c+_{M-1-i}, P|0> = |0>
    c = jordan_wigner_annihilators(M)
    states = fixed_number_states(M, space.occupied)
    for i, occ in enumerate(space.occupied[:10]):
        vec = np.zeros(2**M)
        vec[0] = 1.0
        for o in occ[::-1]:  # c+_{o1} c+_{o2} c+_{o3}|0> with the mapped modes
            vec = c[M - 1 - o].T @ vec
        j = states[target[i]]
        assert vec[j] == pytest.approx(sign[i])


# ----------------------------------------------------------------------------- two species


def lattice_one_body(L: int, a: float, mass: float) -> np.ndarray:
    x = (np.arange(L) - (L - 1) / 2) * a
    t = 1 / (2 * mass * a * a)
    return np.diag(2 * t + 0.5 * mass * x**2) - t * (np.eye(L, k=1) + np.eye(L, k=-1))


def brute_force_two_species(h_up, h_down, U, n_up, n_down):
    """Dense H on 2^(2L) modes (up modes 0..L-1 first), restricted to (n_up, n_down)."""
    L = h_up.shape[0]
    c = jordan_wigner_annihilators(2 * L)
    n = [ci.T @ ci for ci in c]
    H = sum(h_up[a, b] * c[a].T @ c[b] + h_down[a, b] * c[L + a].T @ c[L + b] for a in range(L) for b in range(L))
    H = H + U * sum(n[i] @ n[L + i] for i in range(L))
    up = fe.FockSpace(L, n_up)
    down = fe.FockSpace(L, n_down)
    states = [su + sd for su in fixed_number_states(L, up.occupied) for sd in fixed_number_states(L, down.occupied, L)]
    return H[np.ix_(states, states)], up, down


@pytest.mark.parametrize("n_up,n_down", [(1, 1), (2, 1), (2, 2)])
def test_lattice_hamiltonian_matches_brute_force(n_up, n_down):
    L, a, g = 4, 0.7, -1.3
    h_u, h_d = lattice_one_body(L, a, 1.0), lattice_one_body(L, a, 20 / 3)
    expected, up, down = brute_force_two_species(h_u, h_d, g / a, n_up, n_down)
    x = (np.arange(L) - (L - 1) / 2) * a
    sites = np.eye(L) / math.sqrt(a)
    contact = fe.ContactFactorization(x, np.full(L, a), sites, sites)
    ham = fe.ProductHamiltonian(fe.ProductBasis.full(up, down), h_u, h_d, g, contact)
    assert ham._interaction_diag is not None  # the lattice takes the diagonal fast path
    assert np.allclose(ham.to_dense(), expected, atol=1e-12)


def test_rotated_orbitals_use_the_general_path_and_agree():
    """The same lattice model in a rotated orbital basis phi'_a(x_q) = O_qa/sqrt(a) has the same spectrum."""
    L, a, g = 6, 0.6, 2.0
    h = lattice_one_body(L, a, 1.0)
    x = (np.arange(L) - (L - 1) / 2) * a
    up, down = fe.FockSpace(L, 2), fe.FockSpace(L, 2)
    basis = fe.ProductBasis.full(up, down)
    sites = np.eye(L) / math.sqrt(a)
    diag = fe.ProductHamiltonian(basis, h, h, g, fe.ContactFactorization(x, np.full(L, a), sites, sites))
    rot, _ = np.linalg.qr(np.random.default_rng(3).normal(size=(L, L)))
    general = fe.ProductHamiltonian(
        basis, rot.T @ h @ rot, rot.T @ h @ rot, g, fe.ContactFactorization(x, np.full(L, a), sites @ rot, sites @ rot)
    )
    assert general._interaction_diag is None and general._chunks
    assert np.allclose(np.linalg.eigvalsh(general.to_dense()), np.linalg.eigvalsh(diag.to_dense()), atol=1e-11)


def test_rectangle_basis_is_the_restriction_of_the_full_product():
    rng = np.random.default_rng(7)
    M = 5
    up, down = fe.FockSpace(M, 2), fe.FockSpace(M, 2)
    h = rng.normal(size=(M, M))
    h = h + h.T
    x = np.linspace(-1, 1, 7)
    values = rng.normal(size=(7, M))
    contact = fe.ContactFactorization(x, rng.uniform(0.1, 1, 7), values, values)
    full = fe.ProductHamiltonian(fe.ProductBasis.full(up, down), h, h, 1.7, contact).to_dense()
    rects = np.array([[0, 3, 2, 9], [3, 4, 0, 10], [6, 10, 1, 4]])
    sub = fe.ProductBasis(up, down, rects)
    restricted = fe.ProductHamiltonian(sub, h, h, 1.7, contact, terms_per_chunk=3).to_dense()
    assert np.allclose(restricted, full[np.ix_(sub.flat, sub.flat)], atol=1e-12)


def test_parity_folding_equals_unfolded_sum():
    """Orbitals of definite parity at symmetric points: folded terms give the same matrix."""
    M = 6
    parity = 1 - 2 * (np.arange(M) % 2)
    t, w = np.polynomial.hermite.hermgauss(9)
    values = np.polynomial.hermite.hermvander(t, M - 1)  # H_n(t): parity (-1)^n
    up, down = fe.FockSpace(M, 2), fe.FockSpace(M, 1)
    basis = fe.ProductBasis.full(up, down)
    h = np.diag(np.arange(M) + 0.5)
    plain = fe.ProductHamiltonian(basis, h, h, 0.3, fe.ContactFactorization(t, w, values, values)).to_dense()
    folded = fe.ProductHamiltonian(
        basis, h, h, 0.3, fe.ContactFactorization(t, w, values, values, parity, parity)
    ).to_dense()
    assert np.allclose(plain, folded, atol=1e-9 * np.abs(plain).max())


def test_parity_sectors_split_the_spectrum():
    L, a, g = 6, 0.5, 3.0
    h = lattice_one_body(L, a, 1.0)
    x = (np.arange(L) - (L - 1) / 2) * a
    up, down = fe.FockSpace(L, 2), fe.FockSpace(L, 1)
    basis = fe.ProductBasis.full(up, down)
    sites = np.eye(L) / math.sqrt(a)
    dense = fe.ProductHamiltonian(basis, h, h, g, fe.ContactFactorization(x, np.full(L, a), sites, sites)).to_dense()
    refl = np.arange(L)[::-1]
    parts = []
    for sector in (+1, -1):
        v = fe.parity_isometry(basis, up.transform(refl, np.ones(L)), down.transform(refl, np.ones(L)), sector)
        assert np.allclose((v.T @ v).toarray(), np.eye(v.shape[1]))
        parts.append(np.linalg.eigvalsh(v.T @ dense @ v))
    assert sum(len(p) for p in parts) == basis.dim
    assert np.allclose(np.sort(np.concatenate(parts)), np.linalg.eigvalsh(dense), atol=1e-11)


def test_lanczos_and_dense_agree_and_degeneracies():
    L, a = 9, 0.4
    h = lattice_one_body(L, a, 1.0)
    x = (np.arange(L) - (L - 1) / 2) * a
    sites = np.eye(L) / math.sqrt(a)
    up, down = fe.FockSpace(L, 2), fe.FockSpace(L, 2)
    ham = fe.ProductHamiltonian(fe.ProductBasis.full(up, down), h, h, 1.0, fe.ContactFactorization(x, np.full(L, a), sites, sites))
    dense = np.linalg.eigvalsh(ham.to_dense())[:4]
    values, vectors = fe.lowest_eigenpairs(ham.as_linear_operator(), 4, tol=1e-12, dense_limit=10)
    assert np.allclose(values, dense, atol=1e-9)
    assert fe.degeneracies([0.0, 1.0, 1.0 + 1e-9, 2.0], 1e-6) == [1, 2, 2, 1]


@pytest.mark.parametrize("copies", [1, 16])
def test_lanczos_finds_every_copy_of_an_exactly_degenerate_level(copies):
    """On a direct sum of identical blocks A + A + ... each level is exactly ``copies``-fold (decoupled identical
    subsystems). Lanczos from one start vector spans one direction of each eigenspace and finds further copies
    only through rounding: here (diagonal A, 16 copies, 12 levels) ARPACK alone returned fewer than 12 copies of
    the lowest level in 20 of 20 tries (scipy 1.17, measured); the shifted re-search must return them all. With one block the one-level check alone settles it. A has the
    spectrum 0.25, 0.5, 1, 1.5 and the rest above 2."""
    rng = np.random.default_rng(7)
    block, k = 150, 12
    diagonal = np.concatenate([[0.25, 0.5, 1.0, 1.5], 2.0 + rng.random(block - 4)])
    stacked = np.tile(diagonal, copies)
    operator = LinearOperator((stacked.size,) * 2, matvec=lambda v: stacked * np.ravel(v), dtype=float)
    values, vectors = fe.lowest_eigenpairs(operator, k, tol=1e-12, dense_limit=10)
    assert np.allclose(values, np.sort(stacked)[:k], atol=1e-9)
    assert np.allclose(vectors.T @ vectors, np.eye(k), atol=1e-8)
    assert np.allclose(operator @ vectors, vectors * values, atol=1e-8)


# ----------------------------------------------------------------------------- observables


def test_observables_of_a_product_of_slater_determinants():
    """For a single determinant pair: rho = projector on occupied orbitals, Gamma = rho_up x rho_down,
    the noise vanishes and G integrates to N_up N_down (Wick's theorem, textbook)."""
    M = 5
    up, down = fe.FockSpace(M, 2), fe.FockSpace(M, 3)
    basis = fe.ProductBasis.full(up, down)
    psi = np.zeros(basis.shape)
    i_u = up.index(np.array([[1, 3]]))[0]
    i_d = down.index(np.array([[0, 2, 4]]))[0]
    psi[i_u, i_d] = 1.0
    vec = basis.from_matrix(psi)
    rho_u, rho_d = fe.one_body_density_matrices(basis, vec)
    assert np.allclose(rho_u, np.diag([0, 1, 0, 1, 0]))
    assert np.allclose(rho_d, np.diag([1, 0, 1, 0, 1]))
    gamma = fe.pair_tensor(basis, vec)
    assert np.allclose(gamma, np.einsum("ab,cd->abcd", rho_u, rho_d))
    grid = np.linspace(-6, 6, 61)
    phi = np.polynomial.hermite.hermvander(grid, M - 1) * np.exp(-(grid**2) / 2)[:, None]
    phi /= np.sqrt(np.sqrt(np.pi) * 2.0 ** np.arange(M) * np.array([math.factorial(n) for n in range(M)]))
    c = fe.noise_on_grid(gamma, rho_u, rho_d, phi, phi)
    assert np.abs(c).max() < 1e-12
    density = fe.density_on_grid(rho_u, phi)
    assert np.allclose(density, phi[:, 1] ** 2 + phi[:, 3] ** 2)


def test_observables_of_a_correlated_state_match_brute_force():
    """rho and Gamma of a random state against <c+ c> and <c+ c d+ d> built with Jordan-Wigner matrices."""
    rng = np.random.default_rng(5)
    M = 4
    up, down = fe.FockSpace(M, 2), fe.FockSpace(M, 1)
    basis = fe.ProductBasis.full(up, down)
    vec = rng.normal(size=basis.dim) + 1j * rng.normal(size=basis.dim)
    vec /= np.linalg.norm(vec)
    c = jordan_wigner_annihilators(2 * M)
    states = [su + sd for su in fixed_number_states(M, up.occupied) for sd in fixed_number_states(M, down.occupied, M)]
    full = np.zeros(2 ** (2 * M), complex)
    full[states] = vec
    rho_u, rho_d = fe.one_body_density_matrices(basis, vec)
    gamma = fe.pair_tensor(basis, vec)
    # (c+_a c_b)^dagger psi = c+_b c_a psi and (d+_c d_d) psi for every pair; Gamma = <left_ab | right_cd>
    left = {(a, b): c[b].T @ (c[a] @ full) for a in range(M) for b in range(M)}
    right = {(a, b): c[M + a].T @ (c[M + b] @ full) for a in range(M) for b in range(M)}
    for a in range(M):
        for b in range(M):
            assert rho_u[a, b] == pytest.approx(np.vdot(left[(a, b)], full), abs=1e-12)
            assert rho_d[a, b] == pytest.approx(np.vdot(full, right[(a, b)]), abs=1e-12)
            for cc in range(M):
                for d in range(M):
                    expected = np.vdot(left[(a, b)], right[(cc, d)])  # <psi| c+_a c_b d+_c d_d |psi>
                    assert gamma[a, b, cc, d] == pytest.approx(expected, abs=1e-12)
    # <sum_q w_q rho_up(x_q) rho_down(x_q)> from Gamma against dense density operators
    points, weights, values = np.arange(3.0), np.array([0.3, 0.5, 0.2]), rng.normal(size=(3, M))
    expected = 0.0
    for q in range(3):
        rho_up = sum(values[q, a] * values[q, b] * c[a].T @ c[b] for a in range(M) for b in range(M))
        rho_down = sum(values[q, a] * values[q, b] * c[M + a].T @ c[M + b] for a in range(M) for b in range(M))
        expected += weights[q] * np.vdot(full, rho_up @ (rho_down @ full)).real
    contact = fe.ContactFactorization(points, weights, values, values)
    assert fe.contact_expectation(gamma, contact) == pytest.approx(expected, abs=1e-12)


# ----------------------------------------------------------------------------- general interaction factors


def _gauss_hermite_contact(m_u: int, m_d: int, b_u: float, b_d: float):
    from trapbench.problems import exact as ob

    quad = ob.contact_quadrature(m_u, b_u, m_d, b_d)
    contact = fe.ContactFactorization(
        quad.points, quad.weights, quad.values_up, quad.values_down, ob.orbital_parities(m_u), ob.orbital_parities(m_d)
    )
    tensor = np.einsum("q,qa,qb,qc,qd->abcd", quad.weights, quad.values_up, quad.values_down, quad.values_up, quad.values_down)
    return contact, tensor


@pytest.mark.parametrize("counts, masses", [((2, 2), (1.0, 1.0)), ((2, 1), (1.0, 20 / 3)), ((3, 2), (1.0, 0.5))])
def test_interaction_factors_reproduce_the_quadrature_contact(counts, masses):
    """The bare contact tensor int phi_a phi_c chi_b chi_d dx (exact Gauss-Hermite, common practice), given
    to the engine as SVD factors or as single up hops, gives the quadrature form's matrix and spectrum to
    1e-12 (same operator two ways)."""
    from trapbench.problems.spec import Problem
    from trapbench.backends import oscillator_ed as oe

    problem = Problem.create(*counts, 1.7, mass_up=masses[0], mass_down=masses[1])
    sector = oe.sector_basis(problem, oe.Truncation("energy", 6), +1)
    m_u, m_d = sector.n_orbitals
    b_u, b_d = sector.lengths
    contact, tensor = _gauss_hermite_contact(m_u, m_d, b_u, b_d)
    h_u, h_d = np.diag(np.arange(m_u) + 0.5), np.diag(np.arange(m_d) + 0.5)
    quadrature = fe.ProductHamiltonian(sector.basis, h_u, h_d, 1.7, contact).to_dense()
    for factors in (
        fe.InteractionFactors.from_tensor(tensor, np.array(contact.parity_up), np.array(contact.parity_down)),
        fe.InteractionFactors.single_hops(tensor),
    ):
        factored = fe.ProductHamiltonian(sector.basis, h_u, h_d, 1.7, factors).to_dense()
        assert np.abs(quadrature - factored).max() < 1e-12
        assert np.abs(np.linalg.eigvalsh(quadrature) - np.linalg.eigvalsh(factored)).max() < 1e-12
    assert np.abs(quadrature - np.diag(np.diag(quadrature))).max() > 0.1  # the interaction is really there


def test_interaction_factors_match_jordan_wigner_for_a_random_tensor():
    """A random up-down tensor V[a, b, c, d] applied by the engine equals the brute-force
    sum V[a, b, c, d] c+_a c_c d+_b d_d (Jordan-Wigner, all up modes before all down modes)."""
    rng = np.random.default_rng(7)
    m_u, m_d, n_u, n_d = 4, 3, 2, 1
    tensor = rng.normal(size=(m_u, m_d, m_u, m_d))
    tensor = 0.5 * (tensor + tensor.transpose(2, 3, 0, 1))  # Hermitian: V[a, b, c, d] = V[c, d, a, b]
    up, down = fe.FockSpace(m_u, n_u), fe.FockSpace(m_d, n_d)
    basis = fe.ProductBasis.full(up, down)
    c = jordan_wigner_annihilators(m_u + m_d)
    full = sum(
        tensor[a, b, cc, d] * c[a].T @ c[cc] @ c[m_u + b].T @ c[m_u + d]
        for a in range(m_u) for b in range(m_d) for cc in range(m_u) for d in range(m_d)
    )
    states = [su + sd for su in fixed_number_states(m_u, up.occupied) for sd in fixed_number_states(m_d, down.occupied, m_u)]
    expected = full[np.ix_(states, states)]
    assert np.abs(expected).max() > 0.5
    for factors in (fe.InteractionFactors.from_tensor(tensor), fe.InteractionFactors.single_hops(tensor),
                    fe.InteractionFactors.single_hops(tensor, species="down")):
        engine = fe.ProductHamiltonian(basis, np.zeros((m_u, m_u)), np.zeros((m_d, m_d)), 1.0, factors).to_dense()
        assert np.abs(engine - expected).max() < 1e-12


# ----------------------------------------------------------------------------- explicit matrix


def terms_per_range(monkeypatch, basis, terms: int | None) -> None:
    """Let ``fock_assembly`` stack at most ``terms`` inner operators at a time (None: its own bound)."""
    if terms is not None:
        monkeypatch.setattr(fock_assembly, "DENSE_STACK_LIMIT", terms * fock_assembly.inner_dimension(basis) ** 2)


@pytest.mark.parametrize("per_range", [None, 2])
@pytest.mark.parametrize("n_up,n_down,L", [(2, 1, 5), (1, 2, 5), (2, 2, 4)])
def test_explicit_matrix_matches_brute_force_in_rotated_orbitals(n_up, n_down, L, per_range, monkeypatch):
    """The assembled CSR matrix (``fock_assembly``) of a lattice model in a rotated orbital basis (non-diagonal
    one-body part and non-diagonal D(q)) equals the brute-force Jordan-Wigner matrix transformed to that basis:
    its spectrum is the lattice spectrum, and the matrix itself is the matrix-free engine's; also when the
    terms are assembled two at a time and summed (``per_range``)."""
    a, g = 0.7, -1.3
    h_u, h_d = lattice_one_body(L, a, 1.0), lattice_one_body(L, a, 20 / 3)
    expected, up, down = brute_force_two_species(h_u, h_d, g / a, n_up, n_down)
    x = (np.arange(L) - (L - 1) / 2) * a
    rot, _ = np.linalg.qr(np.random.default_rng(5).normal(size=(L, L)))
    sites = np.eye(L) / math.sqrt(a)
    contact = fe.ContactFactorization(x, np.full(L, a), sites @ rot, sites @ rot)
    basis = fe.ProductBasis.full(up, down)
    args = (basis, rot.T @ h_u @ rot, rot.T @ h_d @ rot, g, contact)
    terms_per_range(monkeypatch, basis, per_range)
    explicit = fe.ProductHamiltonian(*args, assemble_limit=1e6)
    assert explicit.matrix is not None and not explicit._chunks
    dense = explicit.matrix.toarray()
    assert np.abs(dense - dense.T).max() < 1e-13
    assert np.allclose(np.linalg.eigvalsh(dense), np.linalg.eigvalsh(expected), atol=1e-11)
    assert np.allclose(dense, fe.ProductHamiltonian(*args).to_dense(), atol=1e-12)


@pytest.mark.parametrize(
    "m_u,m_d,rectangles",
    [
        (5, 4, [[0, 4, 1, 6], [5, 9, 0, 3]]),  # more up configurations: the up species is the outer one
        (4, 5, [[0, 2, 0, 6], [3, 5, 2, 10]]),  # more down ones, whose up entries are not contiguous
    ],
)
@pytest.mark.parametrize("per_range", [None, 3])
def test_explicit_matrix_on_a_rectangle_basis_with_interaction_factors(m_u, m_d, rectangles, per_range, monkeypatch):
    """A random tensor's factors on a truncated (rectangle) basis: the assembled matrix is the restriction of
    the brute-force matrix (Jordan-Wigner) plus the one-body part; also when the factors are assembled three at
    a time and summed (``per_range``)."""
    rng = np.random.default_rng(11)
    n_u, n_d = 2, 2
    tensor = rng.normal(size=(m_u, m_d, m_u, m_d))
    tensor = 0.5 * (tensor + tensor.transpose(2, 3, 0, 1))
    h_u, h_d = rng.normal(size=(m_u, m_u)), rng.normal(size=(m_d, m_d))
    h_u, h_d = h_u + h_u.T, h_d + h_d.T
    up, down = fe.FockSpace(m_u, n_u), fe.FockSpace(m_d, n_d)
    c = jordan_wigner_annihilators(m_u + m_d)
    full = sum(
        tensor[a, b, cc, d] * c[a].T @ c[cc] @ c[m_u + b].T @ c[m_u + d]
        for a in range(m_u) for b in range(m_d) for cc in range(m_u) for d in range(m_d)
    )
    full = full + sum(h_u[a, b] * c[a].T @ c[b] for a in range(m_u) for b in range(m_u))
    full = full + sum(h_d[a, b] * c[m_u + a].T @ c[m_u + b] for a in range(m_d) for b in range(m_d))
    states = [su + sd for su in fixed_number_states(m_u, up.occupied) for sd in fixed_number_states(m_d, down.occupied, m_u)]
    basis = fe.ProductBasis(up, down, np.array(rectangles))
    expected = full[np.ix_(states, states)][np.ix_(basis.flat, basis.flat)]
    terms_per_range(monkeypatch, basis, per_range)
    explicit = fe.ProductHamiltonian(basis, h_u, h_d, 1.0, fe.InteractionFactors.from_tensor(tensor), assemble_limit=1e6)
    assert explicit.matrix is not None
    assert np.abs(explicit.matrix.toarray() - expected).max() < 1e-12


def test_assembly_declines_an_inner_operator_larger_than_the_stack_bound(monkeypatch):
    """When a single term's dense inner operator exceeds ``DENSE_STACK_LIMIT`` nothing is assembled and the
    matrix-free products give the same H (the bound is memory, not a result)."""
    rng = np.random.default_rng(4)
    m = 5
    tensor = rng.normal(size=(m, m, m, m))
    tensor = 0.5 * (tensor + tensor.transpose(2, 3, 0, 1))
    h = np.diag(np.arange(m) + 0.5)
    basis = fe.ProductBasis.full(fe.FockSpace(m, 2), fe.FockSpace(m, 2))
    factors = fe.InteractionFactors.from_tensor(tensor)
    reference = fe.ProductHamiltonian(basis, h, h, 0.7, factors, assemble_limit=1e6)
    monkeypatch.setattr(fock_assembly, "DENSE_STACK_LIMIT", 10 * 10 - 1)  # 10 inner configurations: 100 entries
    declined = fe.ProductHamiltonian(basis, h, h, 0.7, factors, assemble_limit=1e6)
    assert reference.matrix is not None and declined.matrix is None
    assert np.allclose(declined.to_dense(), reference.matrix.toarray(), atol=1e-12)


def test_explicit_matrix_above_its_limit_stays_matrix_free(monkeypatch):
    """Above the nonzero limit the engine keeps the matrix-free kernels, with the same product, and builds each
    term's operators once (the failed assembly's are reused)."""
    built = []
    density_operator = fe._density_operator
    monkeypatch.setattr(fe, "_density_operator", lambda *args: built.append(1) or density_operator(*args))
    rng = np.random.default_rng(2)
    M = 6
    up, down = fe.FockSpace(M, 2), fe.FockSpace(M, 1)
    values = rng.normal(size=(7, M))
    contact = fe.ContactFactorization(np.linspace(-1, 1, 7), rng.uniform(0.1, 1, 7), values, values)
    h = np.diag(np.arange(M) + 0.5)
    basis = fe.ProductBasis.full(up, down)
    free = fe.ProductHamiltonian(basis, h, h, 0.8, contact)
    once = len(built)
    small = fe.ProductHamiltonian(basis, h, h, 0.8, contact, assemble_limit=10)
    assert len(built) == 2 * once > 0
    large = fe.ProductHamiltonian(basis, h, h, 0.8, contact, assemble_limit=1e6)
    assert small.matrix is None and small._chunks and large.matrix is not None
    assert np.allclose(free.matvec(np.eye(basis.dim)[:, 3]), large.matrix[:, 3].toarray()[:, 0], atol=1e-12)
    v = rng.normal(size=basis.dim)
    assert np.allclose(small.matvec(v), large.matvec(v), atol=1e-12)
    assert small.matvec_count == large.matvec_count == 1
