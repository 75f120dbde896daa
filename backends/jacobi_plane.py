"""Spectral-element discretization of the 2+1 relative motion in the mass-scaled Jacobi plane.

Geometry. Two identical fermions of mass m_pair (particles 1, 2) and one particle of mass m_odd
(particle 3) in a common harmonic trap (omega = 1). In mass-scaled coordinates q_i = sqrt(m_i) x_i
the Hamiltonian is an isotropic 3D oscillator; the centre of mass is the direction
(sqrt(m_1), sqrt(m_2), sqrt(m_3)) and the relative motion lives in the orthogonal plane, where

    H_rel = -1/2 Laplacian + rho^2/2 + g sqrt(mu) [delta(n_13 . r) + delta(n_23 . r)],

because x_i - x_j = (n_ij . r) / sqrt(mu_ij) with the unit normal n_ij of the coincidence line
x_i = x_j (mu = m_pair m_odd / (m_pair + m_odd), the odd-pair reduced mass). With phi measured from
the pair's line x_1 = x_2, the lines x_1 = x_3 and x_2 = x_3 are mirror images of each other and sit
at phi = +-alpha, cos(alpha) = |n_12 . n_13| = sqrt(m_odd / (2 (m_pair + m_odd))), alpha in
(pi/4, pi/2). (Derived here; equal masses give alpha = pi/3.)

Symmetry reduction. Antisymmetry under exchange of the pair (reflection across phi = 0) puts a node
on phi = 0; relative parity x -> -x (r -> -r), combined with the exchange, is the reflection across
phi = pi/2, under which a state of relative parity p is odd for p = +1 and even for p = -1. Hence the
quarter plane 0 <= phi <= pi/2 with psi = 0 at phi = 0 and, at phi = pi/2, psi = 0 (p = +1) or
d psi/d phi = 0 (p = -1); one coincidence ray at phi = alpha, where delta(n . r) = delta(phi - alpha)/rho.

Weak form (Galerkin; the contact condition is natural, no cusp fitting):

    E[psi] = int [ |grad psi|^2 / 2 + rho^2 psi^2 / 2 ] rho d rho d phi + lambda int_0^R psi(rho, alpha)^2 d rho,
    lambda = g sqrt(mu),

with a tensor product of hierarchical (integrated-Legendre, Babuska-Szabo) C0 spectral elements in
rho on [0, R] (psi = 0 at rho = 0 since the node line passes through the origin, and at rho = R)
and in phi with an element boundary on the ray, so the derivative jump across it is exact and
convergence in the polynomial order p is exponential (hp-FEM: C. Schwab, "p- and hp-Finite Element
Methods", Oxford 1998 [reference from memory]). Near the origin, where the rays meet, the solution has
rho^k log(rho) terms (Frobenius expansion, derived here): radial elements are graded geometrically
toward rho = 0 (ratio 0.2, the usual hp-FEM choice; measured insensitive to 2-8 layers).

Solver. In the eigenbasis of the angular stiffness/mass pair (K_phi u = s^2 M_phi u) the problem is
N_phi independent radial problems coupled only through the rank-one ray term c c^T (c = basis
values at alpha). (H - sigma S)^-1 is therefore applied exactly with one dense factorization per
angular mode and a Woodbury correction of size N_rho, and scipy's ARPACK (eigsh, shift-invert)
finds the lowest levels; their energies are then Rayleigh quotients in the element basis (the
computed angular eigenbasis is orthonormal only to rounding, which would shift Ritz values by ~1e-10).
Spaces of a fixed mesh are nested in p, so every level is an upper bound that decreases with p
(min-max principle). Measured (bench/benchmarks/bench_three_body_results.md): p = 12-14 reaches the
rounding floor ~1e-13 for mass ratios 0.1-10 and g = -5 ... 100.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.polynomial import legendre
from scipy import linalg
from scipy.sparse import linalg as sparse_linalg


def jacobi_angle(m_pair: float, m_odd: float) -> float:
    """Angle alpha between the pair's coincidence line and each pair-odd line (radians)."""
    return math.acos(math.sqrt(m_odd / (2 * (m_pair + m_odd))))


def shape_functions(order: int, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Values and d/dxi of the hierarchical shape functions on [-1, 1], shape (order + 1, len(xi)).

    Rows 0, 1: the vertex functions (1 - xi)/2, (1 + xi)/2; rows k = 2..order: the bubbles
    (P_k - P_{k-2}) / sqrt(2 (2k - 1)), whose derivative is sqrt((2k - 1)/2) P_{k-1}.
    """
    legendre_values = legendre.legvander(xi, max(order, 1)).T
    values = np.empty((order + 1, xi.size))
    slopes = np.empty((order + 1, xi.size))
    values[0], values[1] = (1 - xi) / 2, (1 + xi) / 2
    slopes[0], slopes[1] = -0.5, 0.5
    for k in range(2, order + 1):
        values[k] = (legendre_values[k] - legendre_values[k - 2]) / math.sqrt(2 * (2 * k - 1))
        slopes[k] = math.sqrt((2 * k - 1) / 2) * legendre_values[k - 1]
    return values, slopes


@dataclass
class ElementSpace:
    """C0 piecewise polynomials of degree ``order`` on the mesh ``nodes``, with Dirichlet ends removed."""

    nodes: np.ndarray
    order: int
    dirichlet_left: bool
    dirichlet_right: bool

    def __post_init__(self) -> None:
        self.nodes = np.asarray(self.nodes, dtype=float)
        n_elements = self.nodes.size - 1
        vertices = list(range(self.nodes.size))
        kept = [v for v in vertices if not (v == 0 and self.dirichlet_left) and not (v == n_elements and self.dirichlet_right)]
        vertex_index = {v: i for i, v in enumerate(kept)}
        size = len(kept)
        self.local_to_global = []  # per element: global index (or -1) of each local shape function
        for e in range(n_elements):
            dofs = [vertex_index.get(e, -1), vertex_index.get(e + 1, -1)]
            dofs += list(range(size, size + self.order - 1))
            size += self.order - 1
            self.local_to_global.append(np.array(dofs))
        self.size = size
        self._vertex_index = vertex_index
        quad_x, quad_w = legendre.leggauss(self.order + 3)
        self._quadrature = (quad_x, quad_w)
        self._shapes = shape_functions(self.order, quad_x)

    def gram(self, weight, derivative: bool = False) -> np.ndarray:
        """Dense matrix int w(x) f_i^(d)(x) f_j^(d)(x) dx, d = 1 if ``derivative`` else 0.

        Gauss-Legendre with order + 3 points per element: exact for polynomial weights up to x^3
        and for w = 1/x on a first element that starts at 0 (every kept function vanishes there).
        """
        quad_x, quad_w = self._quadrature
        values, slopes = self._shapes
        matrix = np.zeros((self.size, self.size))
        for e, dofs in enumerate(self.local_to_global):
            left, right = self.nodes[e], self.nodes[e + 1]
            half = (right - left) / 2
            x = left + half * (quad_x + 1)
            basis = slopes / half if derivative else values
            weighted = basis * (quad_w * half * weight(x))
            local = weighted @ basis.T
            keep = dofs >= 0
            matrix[np.ix_(dofs[keep], dofs[keep])] += local[np.ix_(keep, keep)]
        return matrix

    def quadrature(self) -> tuple[np.ndarray, np.ndarray]:
        """Gauss-Legendre points and weights of all elements (``order`` + 3 per element)."""
        quad_x, quad_w = self._quadrature
        left, right = self.nodes[:-1, None], self.nodes[1:, None]
        points = left + (right - left) / 2 * (quad_x + 1)
        weights = (right - left) / 2 * quad_w * np.ones_like(left)
        return points.ravel(), weights.ravel()

    def vertex_vector(self, node: int) -> np.ndarray:
        """The values of all basis functions at mesh node ``node`` (a unit vector, or 0 if Dirichlet)."""
        vector = np.zeros(self.size)
        if node in self._vertex_index:
            vector[self._vertex_index[node]] = 1.0
        return vector

    def evaluate(self, coefficients: np.ndarray, x: np.ndarray) -> np.ndarray:
        """sum_i c_i f_i(x) for points x inside the mesh; ``coefficients`` has shape (size, ...)."""
        x = np.asarray(x, dtype=float)
        element = np.clip(np.searchsorted(self.nodes, x, side="right") - 1, 0, self.nodes.size - 2)
        result = np.zeros(x.shape + coefficients.shape[1:])
        for e in np.unique(element):
            inside = element == e
            left, right = self.nodes[e], self.nodes[e + 1]
            xi = 2 * (x[inside] - left) / (right - left) - 1
            values, _ = shape_functions(self.order, xi)
            dofs = self.local_to_global[e]
            keep = dofs >= 0
            result[inside] = values[keep].T @ coefficients[dofs[keep]]
        return result


def radial_nodes(outer_radius: float, core: float, grading: float = 0.2, layers: int = 4, width: float = 2.0) -> np.ndarray:
    """Mesh on [0, R]: geometric layers core * grading^k toward 0, then elements of at most ``width``.

    ``core`` is the length below which the ray term changes the angular shape (about 1/|lambda|),
    so the elements are small where the solution's small-rho expansion (with its logarithms) applies.
    """
    inner = [core * grading**k for k in range(layers, 0, -1)]
    outer = [core]
    while outer[-1] < outer_radius:
        step = min(width, max(outer[-1], core))  # widths grow geometrically up to ``width``
        outer.append(min(outer[-1] + step, outer_radius))
    return np.array([0.0] + inner + outer)


def angular_nodes(alpha: float, bound_width: float | None) -> np.ndarray:
    """Mesh on [0, pi/2] with a node on the ray alpha; graded around it for a bound state of width ``bound_width``.

    A state bound to the ray decays like exp(-|phi - alpha| / bound_width); nodes at alpha +- w, 3w, 9w
    (inside the interval) keep each element's variation moderate.
    """
    nodes = {0.0, alpha, math.pi / 2}
    if bound_width is not None:
        for factor in (1.0, 3.0, 9.0):
            step = factor * bound_width
            for point in (alpha - step, alpha + step):
                if 0.15 * bound_width < point < math.pi / 2 - 0.15 * bound_width:
                    nodes.add(point)
    return np.array(sorted(nodes))


@dataclass
class RelativeSolution:
    """Lowest levels of one relative-parity sector at one discretization."""

    energies: np.ndarray  # E_rel, units of omega
    ray_density: np.ndarray  # int psi(rho, alpha)^2 d rho per level (normalized over the quarter plane)
    rho_squared: np.ndarray  # <rho^2> per level
    vectors: np.ndarray  # (levels, N_phi, N_rho) coefficients in the element basis (angular x radial)
    dimension: int


class QuarterPlane:
    """The discretized relative problem in one parity sector (see the module docstring)."""

    def __init__(self, alpha: float, coupling: float, parity: int, order: int, radial: np.ndarray, angular: np.ndarray):
        self.alpha, self.coupling, self.parity = alpha, coupling, parity
        self.radial = ElementSpace(radial, order, dirichlet_left=True, dirichlet_right=True)
        self.angular = ElementSpace(angular, order, dirichlet_left=True, dirichlet_right=parity > 0)
        rad = self.radial
        self.mass = rad.gram(lambda r: r)
        self.free = 0.5 * (rad.gram(lambda r: r, derivative=True) + rad.gram(lambda r: r**3))
        self.centrifugal = 0.5 * rad.gram(lambda r: 1 / r)
        self.ray = rad.gram(lambda r: np.ones_like(r))
        self.trap = rad.gram(lambda r: r**2 * r)
        # angular eigenbasis: K u = s^2 M u with u^T M u = 1
        self.angular_stiffness = self.angular.gram(lambda p: np.ones_like(p), derivative=True)
        self.angular_mass = self.angular.gram(lambda p: np.ones_like(p))
        self.s_squared, self.modes = linalg.eigh(self.angular_stiffness, self.angular_mass)
        ray_node = int(np.argmin(np.abs(self.angular.nodes - alpha)))
        self.ray_vector = self.angular.vertex_vector(ray_node)  # c: basis values on the ray
        self.ray_values = self.modes.T @ self.ray_vector  # c~ = U^T c

    @property
    def dimension(self) -> int:
        return self.radial.size * self.angular.size

    def _shape(self, x: np.ndarray) -> np.ndarray:
        return x.reshape(self.angular.size, self.radial.size)

    def apply_hamiltonian(self, x: np.ndarray) -> np.ndarray:
        blocks = self._shape(x)
        result = blocks @ self.free + self.s_squared[:, None] * (blocks @ self.centrifugal)
        on_ray = self.ray_values @ blocks
        result += self.coupling * np.outer(self.ray_values, on_ray @ self.ray)
        return result.ravel()

    def apply_mass(self, x: np.ndarray) -> np.ndarray:
        return (self._shape(x) @ self.mass).ravel()

    def shifted_inverse(self, sigma: float) -> sparse_linalg.LinearOperator:
        """(H - sigma S)^-1 applied exactly: block inverses per angular mode plus a Woodbury correction."""
        blocks = self.free[None] + self.s_squared[:, None, None] * self.centrifugal[None] - sigma * self.mass[None]
        inverses = np.linalg.inv(blocks)  # (N_phi, N_rho, N_rho)
        weighted = np.einsum("m,mij->ij", self.ray_values**2, inverses)
        coupling_matrix = self.coupling * self.ray
        capacitance = np.eye(self.radial.size) + weighted @ coupling_matrix
        capacitance_lu = linalg.lu_factor(capacitance)
        n = self.dimension

        def solve(b: np.ndarray) -> np.ndarray:
            y = np.matmul(inverses, self._shape(np.asarray(b, dtype=float).ravel())[:, :, None])[:, :, 0]
            if self.coupling == 0.0:
                return y.ravel()
            on_ray = self.ray_values @ y
            correction = coupling_matrix @ linalg.lu_solve(capacitance_lu, on_ray)
            y -= (inverses @ correction) * self.ray_values[:, None]
            return y.ravel()

        return sparse_linalg.LinearOperator((n, n), matvec=solve, dtype=float)

    def lowest(self, count: int, sigma: float) -> RelativeSolution:
        """The ``count`` lowest levels; ``sigma`` must lie below them (shift-invert around it)."""
        n = self.dimension
        count = min(count, n - 2)
        hamiltonian = sparse_linalg.LinearOperator((n, n), matvec=self.apply_hamiltonian, dtype=float)
        mass = sparse_linalg.LinearOperator((n, n), matvec=self.apply_mass, dtype=float)
        energies, vectors = sparse_linalg.eigsh(
            hamiltonian,
            k=count,
            M=mass,
            sigma=sigma,
            OPinv=self.shifted_inverse(sigma),
            which="LM",
            tol=1e-14,
            ncv=min(n, max(2 * count + 1, count + 20)),
        )
        order = np.argsort(energies)
        energies, vectors = energies[order], vectors[:, order]
        # back to the element basis, where the quadratic forms are exact: the angular eigenbasis is
        # orthonormal only to rounding (U^T K U - diag(s^2) ~ 1e-9 at s^2 ~ 1e6), which shifts Ritz
        # values by ~1e-10; Rayleigh quotients of the same vectors in the element basis carry its square
        levels = np.einsum("pm,kmi->kpi", self.modes, vectors.T.reshape(count, self.angular.size, self.radial.size))
        norms = self._form(levels, self.angular_mass, self.mass)
        levels = levels / np.sqrt(norms)[:, None, None]
        on_ray = np.einsum("p,kpi->ki", self.ray_vector, levels)
        ray_density = np.einsum("ki,ij,kj->k", on_ray, self.ray, on_ray)
        energies = (
            self._form(levels, self.angular_mass, self.free)
            + self._form(levels, self.angular_stiffness, self.centrifugal)
            + self.coupling * ray_density
        )
        rho_squared = self._form(levels, self.angular_mass, self.trap)
        order = np.argsort(energies)
        return RelativeSolution(energies[order], ray_density[order], rho_squared[order], levels[order], n)

    def density_on_grid(self, level: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Quadrature of |psi|^2 over the quarter plane: points (rho, phi) and weights w psi^2 rho, summing to 1."""
        rho, rho_weights = self.radial.quadrature()
        phi, phi_weights = self.angular.quadrature()
        radial_values = self.radial.evaluate(level.T, rho)  # (n_rho points, N_phi)
        values = self.angular.evaluate(radial_values.T, phi)  # (n_phi points, n_rho points)
        weights = values**2 * (phi_weights[:, None] * (rho_weights * rho)[None, :])
        return np.broadcast_to(rho[None, :], weights.shape), np.broadcast_to(phi[:, None], weights.shape), weights

    @staticmethod
    def _form(levels: np.ndarray, angular: np.ndarray, radial: np.ndarray) -> np.ndarray:
        """x_k^T (angular (x) radial) x_k for each level k (coefficients shaped (k, N_phi, N_rho))."""
        return np.einsum("kpi,pq,ij,kqj->k", levels, angular, radial, levels, optimize=True)
