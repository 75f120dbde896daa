"""Unitary-transformation (Okubo / Lee-Suzuki) effective contact interaction in the oscillator basis,
built per centre-of-mass quantum number from the exact two-body (Busch) solution.

Units: hbar = omega = 1 (a common trap frequency for both species is required), masses in m0, lengths
sqrt(hbar/(m0 omega)), g in hbar omega sqrt(hbar/(m0 omega)). Species s uses its natural orbitals
phi_n(x; b_s), b_s = 1/sqrt(m_s) (``problems.exact.oscillator``).

1. Centre of mass and relative motion (derived here). With mass-scaled coordinates y_s = sqrt(m_s) x_s
   the pair Hamiltonian is the isotropic oscillator sum_s (-1/2 d^2/dy_s^2 + y_s^2/2) and
   phi_n1(x_1; b_1) phi_n2(x_2; b_2) = (m_1 m_2)^(1/4) h_n1(y_1) h_n2(y_2). The rotation

       Y   = c y_1 + s y_2 = sqrt(M) X,          c = sqrt(m_1/M), s = sqrt(m_2/M), M = m_1 + m_2,
       y_r = s y_1 - c y_2 = sqrt(mu) (x_1 - x_2),   mu = m_1 m_2 / M,

   is its own inverse, so a_1^+ = c A^+ + s a_r^+ and a_2^+ = s A^+ - c a_r^+, and within every shell
   n_1 + n_2 = Q = N + n

       |n_1 n_2> = sum_N <N n | n_1 n_2> |N>_cm |n>_rel

   with generalized 1D Talmi-Moshinsky brackets from the recursion (apply a_1^+ / sqrt(n_1), or a_2^+ on
   the column n_1 = 0)

       <N n|n_1 n_2> = [c sqrt(N) <N-1 n|n_1-1 n_2> + s sqrt(n) <N n-1|n_1-1 n_2>] / sqrt(n_1),
       <N n|0 Q>     = [s sqrt(N) <N-1 n|0 Q-1>   - c sqrt(n) <N n-1|0 Q-1>]   / sqrt(Q),

   which is a product of orthogonal steps (stable; no alternating sums).

2. The contact: g delta(x_1 - x_2) = lambda delta(y_r), lambda = g sqrt(mu) (the volume element is
   unchanged by the rotation), acting on the relative motion only; odd relative states do not feel it.
   Relative Hamiltonian H_rel = -1/2 d^2/dy_r^2 + y_r^2/2 + lambda delta(y_r). Its even eigenstates
   (T. Busch, B.-G. Englert, K. Rzazewski, M. Wilkens, Found. Phys. 28, 549 (1998), 1D re-derived in
   ``problems.exact.busch``) have energies E_k, roots of 1 + lambda G(E) = 0 with

       G(E) = sum_{n even} h_n(0)^2 / (e_n - E) = Gamma(1/4 - E/2) / (2 Gamma(3/4 - E/2)),  e_n = n + 1/2,

   and exact oscillator coefficients <n|psi_k> = h_n(0) / ((e_n - E_k) sqrt(G'(E_k))), where
   G'(E) = sum h_n(0)^2/(e_n - E)^2 = -(G(E)/2) (digamma(1/4 - E/2) - digamma(3/4 - E/2)).

3. Okubo / Lee-Suzuki (S. Okubo, Prog. Theor. Phys. 12, 603 (1954); K. Suzuki, S. Y. Lee, Prog. Theor.
   Phys. 64, 2091 (1980); in a 1D oscillator basis S. Kvaal, M. Hjorth-Jensen, H. Moll Nilsen, Phys. Rev.
   B 76, 085421 (2007); journal details from memory). In the even relative space P = {n even, n <= n_max}
   of dimension d, take the d exact eigenstates with the largest P-projection, U[n, k] = <n|psi_k> (n in
   P), and the orthogonal polar factor O = U (U^T U)^(-1/2) (from the SVD U = W S V^T, O = W V^T). Then

       H_eff = O diag(E_k) O^T,    W(n_max) = H_eff - diag(e_n)

   is the Hermitian effective relative interaction: H0 + W has exactly the eigenvalues E_k in P.

4. Centre-of-mass aware pair interaction (the construction of F. Brauneis et al., arXiv:2408.10052
   (2024), here for any masses). A pair whose quanta are bounded by Lambda and whose centre of mass holds
   N quanta has the relative space n <= Lambda - N, so

       V[a, b; c, d] = sum_N sum_{n, n'} <N n'|a b> W_N[n', n] <N n|c d>,   W_N = W(Lambda - N),

   with a, c the up orbitals (c -> a) and b, d the down orbitals (d -> b), a + b <= Lambda, c + d <=
   Lambda. By construction the 1+1 problem in the energy-truncated basis n_1 + n_2 <= Lambda has exactly
   the Busch spectrum (every N and both relative parities); with lambda replaced by lambda h_n(0) h_n'(0)
   (no truncation effect) the same sum is the bare contact tensor.

Pair states with more than Lambda quanta get no interaction (V_eff lives in its P space only); how
Lambda follows the many-body cutoff is the caller's choice (``oscillator_ed.effective_factors``).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from scipy import special

from ..problems.exact.busch import even_relative_level

CONDITION_LIMIT = 1e-10  # smallest singular value of U accepted (the P-projections must be independent)


# ----------------------------------------------------------------------------- brackets


def bracket_angle(mass_1: float, mass_2: float) -> tuple[float, float]:
    """(c, s) = (sqrt(m_1/M), sqrt(m_2/M)): the rotation from (y_1, y_2) to (Y, y_r)."""
    total = mass_1 + mass_2
    return math.sqrt(mass_1 / total), math.sqrt(mass_2 / total)


@lru_cache(maxsize=32)
def talmi_brackets(max_quanta: int, mass_1: float, mass_2: float) -> tuple[np.ndarray, ...]:
    """Shells Q = 0..max_quanta; shell Q is the orthogonal matrix B_Q[N, n_1] = <N, Q-N | n_1, Q-n_1>."""
    c, s = bracket_angle(mass_1, mass_2)
    shells = [np.ones((1, 1))]
    for q in range(1, max_quanta + 1):
        prev = shells[-1]
        cur = np.zeros((q + 1, q + 1))
        big_n = np.arange(q + 1)
        rel_n = q - big_n
        # column n_1 >= 1 from column n_1 - 1 of shell q - 1 (a_1^+); column 0 from column 0 (a_2^+)
        for n1 in range(q + 1):
            col = prev[:, n1 - 1] if n1 else prev[:, 0]
            from_cm = np.zeros(q + 1)
            from_cm[1:] = np.sqrt(big_n[1:]) * col  # <N-1, n | ...>, N >= 1
            from_rel = np.zeros(q + 1)
            from_rel[:q] = np.sqrt(rel_n[:q]) * col  # <N, n-1 | ...>, n >= 1
            if n1:
                cur[:, n1] = (c * from_cm + s * from_rel) / math.sqrt(n1)
            else:
                cur[:, 0] = (s * from_cm - c * from_rel) / math.sqrt(q)
        shells.append(cur)
    return tuple(shells)


# ----------------------------------------------------------------------------- relative problem


def hermite_at_zero(n_max: int) -> np.ndarray:
    """h_n(0), n = 0..n_max: pi^(-1/4) for n = 0, zero for odd n, h_n(0) = -sqrt((n-1)/n) h_(n-2)(0)."""
    values = np.zeros(n_max + 1)
    values[0] = math.pi**-0.25
    for n in range(2, n_max + 1, 2):
        values[n] = -math.sqrt((n - 1) / n) * values[n - 2]
    return values


def green_derivative(energy: float, lam: float) -> float:
    """G'(E) at a root of 1 + lambda G(E) = 0, where G = -1/lambda: (1/(2 lambda)) (psi(a) - psi(a + 1/2)),
    a = 1/4 - E/2 (digamma; section 2 of the module docstring)."""
    a = 0.25 - energy / 2
    return (special.digamma(a) - special.digamma(a + 0.5)) / (2 * lam)


def relative_eigenvector(lam: float, level: int, n_max: int) -> tuple[float, np.ndarray]:
    """E_k and the exact coefficients <n|psi_k> for even n <= n_max (array indexed by n // 2)."""
    energy = even_relative_level(lam, level)
    h0 = hermite_at_zero(n_max)[::2]
    e_n = np.arange(0, n_max + 1, 2) + 0.5
    return energy, h0 / ((e_n - energy) * math.sqrt(green_derivative(energy, lam)))


@lru_cache(maxsize=512)
def relative_effective_interaction(lam: float, n_max: int) -> np.ndarray:
    """W(n_max) on the even relative states n = 0, 2, ..., <= n_max (Okubo / Lee-Suzuki, section 3).

    The exact states with the largest P-projection are taken among the lowest d + 4 (d = dim P).
    """
    d = n_max // 2 + 1
    e_n = np.arange(0, 2 * d, 2) + 0.5
    if lam == 0.0:
        return np.zeros((d, d))
    candidates = [relative_eigenvector(lam, k, 2 * (d - 1)) for k in range(d + 4)]
    weights = np.array([np.dot(vec, vec) for _, vec in candidates])
    chosen = np.sort(np.argsort(-weights, kind="stable")[:d])
    energies = np.array([candidates[k][0] for k in chosen])
    u = np.column_stack([candidates[k][1] for k in chosen])
    w, sigma, vt = np.linalg.svd(u)
    if sigma[-1] < CONDITION_LIMIT:
        raise ArithmeticError(f"P-projections of the exact states are dependent (sigma_min = {sigma[-1]:.1e})")
    rotation = w @ vt
    h_eff = (rotation * energies) @ rotation.T
    return 0.5 * (h_eff + h_eff.T) - np.diag(e_n)


# ----------------------------------------------------------------------------- lab-frame tensor


def _relative_matrices(lam: float, max_quanta: int, effective: bool):
    """For N = 0..Lambda: the interaction on the even relative states n <= Lambda - N (units of omega)."""
    h0 = hermite_at_zero(max_quanta)
    out = []
    for big_n in range(max_quanta + 1):
        n_max = max_quanta - big_n
        if effective:
            out.append(relative_effective_interaction(lam, n_max))
        else:
            v = lam * h0[: n_max + 1 : 2]
            out.append(np.outer(v, h0[: n_max + 1 : 2]))
    return out


def pair_interaction_tensor(
    g: float, mass_up: float, mass_down: float, max_quanta: int, n_up: int, n_down: int, effective: bool = True
) -> np.ndarray:
    """V[a, b, c, d] (up c -> a, down d -> b) for orbitals a, c < n_up and b, d < n_down, pairs with at
    most ``max_quanta`` = Lambda quanta (section 4); ``effective = False`` gives the bare contact g delta."""
    lam = g * math.sqrt(mass_up * mass_down / (mass_up + mass_down))
    shells = talmi_brackets(max_quanta, float(mass_up), float(mass_down))
    relative = _relative_matrices(lam, max_quanta, effective)
    pairs = [(a, q - a) for q in range(max_quanta + 1) for a in range(q + 1) if a < n_up and q - a < n_down]
    shell_of = np.array([a + b for a, b in pairs], dtype=np.int64)
    up_of = np.array([a for a, _ in pairs], dtype=np.int64)
    matrix = np.zeros((len(pairs), len(pairs)))
    for big_n in range(max_quanta + 1):
        # C[pair, n] = <N n | a b> for the pairs of shells N + n, n even (every other pair has C = 0)
        rows = np.flatnonzero((shell_of >= big_n) & ((shell_of - big_n) % 2 == 0))
        if not len(rows):
            continue
        coeff = np.zeros((len(rows), (max_quanta - big_n) // 2 + 1))
        for r, (q, a) in enumerate(zip(shell_of[rows], up_of[rows])):
            coeff[r, (q - big_n) // 2] = shells[q][big_n, a]
        matrix[np.ix_(rows, rows)] += coeff @ relative[big_n] @ coeff.T
    tensor = np.zeros((n_up, n_down, n_up, n_down))
    a_idx = np.array([p[0] for p in pairs])
    b_idx = np.array([p[1] for p in pairs])
    tensor[a_idx[:, None], b_idx[:, None], a_idx[None, :], b_idx[None, :]] = matrix
    return tensor
