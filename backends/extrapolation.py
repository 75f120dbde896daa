"""Extrapolation of a ladder of approximations to the exact limit, with an error bar.

The one module for least squares and convergence models in the package.

Least squares: ``fit_linear`` (weighted, with standard errors) and ``fit_line``.

Asymptotic forms:

- ``extrapolate_polynomial``: E(h) = E_0 + sum_k c_k h^(p_k) with known powers (Richardson
  extrapolation generalized to least squares), e.g. h = lattice spacing a with powers (2, 4).
- ``extrapolate_power_law``: E(n) = E_inf + A n^(-p) with unknown p (fitted), e.g. n = an orbital or
  energy cutoff of a basis expansion.

Their error bar is deliberately conservative (common practice in convergence studies): it is the
largest of (i) the fit's own standard error, (ii) the change of the limit when the least-converged
point is dropped, (iii) the change when the model loses its highest-order term, and (iv) a floor of
``floor_fraction`` times the last correction (E_last - E_0). A single point gives no extrapolation.

Models for the convergence ladder (``backends/ladder.py``): callables ``model(steps, values) ->
Extrapolation`` with a ``minimum_points`` attribute, one per way a method approaches its limit:

- ``PolynomialModel``: polynomial in a power of the step (lattice spacing a: powers (2, 4) in a;
  bare contact interaction in an oscillator basis: powers (1, 2) in c^(-1/2));
- ``SixthOrderSpacingFit``: powers (2, 4, 6) in the lattice spacing, its bar from the a^6 term and the
  coarsest spacing instead of a fraction of the extrapolation (the lattice backends' ``continuum_order = 6``);
- ``DriftingPowerLaw``: E_inf + A c^(-p) with a drifting fitted p (renormalized oscillator basis);
- ``DiscardedWeightLinear``: linear in the discarded weight of a DMRG bond-dimension ladder;
- ``GeometricTail``: no extrapolation, the finest value with a bound on the geometric tail of an
  exponentially convergent (nested, variational) p-ladder (three-body's spectral elements).

A model that cannot apply its form (e.g. values that turn around) still returns a limit and an
honest error bar, and says why in ``Extrapolation.warning``; nothing is signalled by strings in
``model``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np


@dataclass(frozen=True)
class Extrapolation:
    """The limit ``value`` +- ``error`` from a ladder (``steps``, ``values``), and how it was found."""

    value: float
    error: float
    model: str
    steps: tuple[float, ...]
    values: tuple[float, ...]
    parameters: dict = field(default_factory=dict)
    warning: str | None = None  # set when the model's form did not apply and a fallback was used

    def as_dict(self) -> dict:
        data = {
            "value": self.value,
            "error": self.error,
            "model": self.model,
            "steps": list(self.steps),
            "values": list(self.values),
            "parameters": dict(self.parameters),
        }
        if self.warning:
            data["warning"] = self.warning
        return data


@dataclass(frozen=True)
class LinearFit:
    """Weighted least-squares solution of y ~ design @ coefficients.

    ``stderr`` are the standard errors sqrt(diag(s^2 (A^T W A)^-1)) with s^2 = residual / dof, the
    usual estimate when the points' scatter is unknown; they are NaN when dof = 0 (an exact fit says
    nothing about its own uncertainty). ``residual`` is the weighted sum of squared residuals.
    """

    coefficients: np.ndarray
    stderr: np.ndarray
    residual: float
    dof: int


@dataclass(frozen=True)
class LineFit:
    """Straight line y ~ intercept + slope x, with the standard errors of both (NaN when dof = 0)."""

    intercept: float
    slope: float
    intercept_error: float
    slope_error: float
    residual: float
    dof: int


def fit_linear(design, y, weights=None) -> LinearFit:
    """Least squares: minimize sum_i w_i (y_i - sum_k A_ik c_k)^2 over the coefficients c.

    ``design`` is the matrix A (points x coefficients); a one-dimensional ``design`` is read as the
    abscissa x of a straight line, A = [1, x]. ``weights`` w_i >= 0 (default 1) multiply the squared
    residuals, e.g. inverse variances.
    """
    y = np.asarray(y, dtype=float)
    design = np.asarray(design, dtype=float)
    if design.ndim == 1:
        design = np.column_stack([np.ones_like(design), design])
    if design.ndim != 2 or design.shape[0] != y.shape[0]:
        raise ValueError(f"design has shape {design.shape} but y has {y.shape[0]} points; give one design row per point")
    if design.shape[0] < design.shape[1]:
        raise ValueError(f"{design.shape[0]} points cannot fix {design.shape[1]} coefficients; add points or drop terms")
    w = np.ones_like(y) if weights is None else np.asarray(weights, dtype=float)
    if w.shape != y.shape or np.any(w < 0) or not np.all(np.isfinite(w)):
        raise ValueError("weights must be finite, non-negative and one per point")
    root_w = np.sqrt(w)
    coefficients, *_ = np.linalg.lstsq(design * root_w[:, None], y * root_w, rcond=None)
    residual = float(w @ (y - design @ coefficients) ** 2)
    dof = design.shape[0] - design.shape[1]
    if dof > 0:
        covariance = residual / dof * np.linalg.pinv(design.T @ (design * w[:, None]))
        stderr = np.sqrt(np.maximum(np.diag(covariance), 0.0))
    else:
        stderr = np.full(design.shape[1], np.nan)
    return LinearFit(coefficients=coefficients, stderr=stderr, residual=residual, dof=dof)


def fit_line(x, y, weights=None) -> LineFit:
    """Weighted straight-line fit y ~ intercept + slope x (see ``fit_linear``); needs two points."""
    fit = fit_linear(np.asarray(x, dtype=float).ravel(), y, weights)
    return LineFit(
        intercept=float(fit.coefficients[0]),
        slope=float(fit.coefficients[1]),
        intercept_error=float(fit.stderr[0]),
        slope_error=float(fit.stderr[1]),
        residual=fit.residual,
        dof=fit.dof,
    )


def _fit_polynomial(h: np.ndarray, y: np.ndarray, powers: Sequence[float]) -> tuple[float, float, np.ndarray]:
    fit = fit_linear(np.column_stack([np.ones_like(h)] + [h**p for p in powers]), y)
    # an exact fit (no degrees of freedom) contributes no statistical error; the other estimates bound it
    stderr = 0.0 if fit.dof == 0 else float(fit.stderr[0])
    return float(fit.coefficients[0]), stderr, fit.coefficients


def extrapolate_polynomial(
    steps: Sequence[float],
    values: Sequence[float],
    powers: Sequence[float] = (2.0,),
    floor_fraction: float = 0.05,
) -> Extrapolation:
    """Limit h -> 0 of values(h) = E_0 + sum_k c_k h^(p_k); needs len(steps) >= 1 + len(powers)."""
    h = np.asarray(steps, dtype=float)
    y = np.asarray(values, dtype=float)
    order = np.argsort(h)
    h, y = h[order], y[order]
    powers = tuple(powers)
    if len(h) < 1 + len(powers):
        raise ValueError(f"{len(h)} points cannot fix {1 + len(powers)} coefficients; add steps or drop powers")
    value, stderr, coef = _fit_polynomial(h, y, powers)
    candidates = [stderr, floor_fraction * abs(y[0] - value)]
    if len(h) >= 2 + len(powers):
        candidates.append(abs(_fit_polynomial(h[:-1], y[:-1], powers)[0] - value))
    if len(powers) >= 2:
        lower = powers[:-1]
        candidates.append(abs(_fit_polynomial(h[: 1 + len(lower) + 1], y[: 1 + len(lower) + 1], lower)[0] - value))
    elif len(h) >= 2:
        # one power: compare with the raw finest value as the crudest alternative, damped by the fit order
        candidates.append(abs(y[0] - value) * (h[0] / h[-1]) ** powers[0])
    return Extrapolation(
        value=value,
        error=float(max(candidates)),
        model="E(h) = E0 + " + " + ".join(f"c{p:g} h^{p:g}" for p in powers),
        steps=tuple(h.tolist()),
        values=tuple(y.tolist()),
        parameters={"coefficients": coef.tolist(), "powers": list(powers)},
    )


def extrapolate_power_law(
    cutoffs: Sequence[float],
    values: Sequence[float],
    power_bounds: tuple[float, float] = (0.2, 6.0),
    floor_fraction: float = 0.05,
    exponent_shift: float = 0.25,
) -> Extrapolation:
    """Limit n -> inf of values(n) = E_inf + A n^(-p), p fitted within ``power_bounds``.

    Needs at least three cutoffs. With exactly three the model is solved exactly; with more the
    exponent minimizes the least-squares residual over a fine scan of p, weighting the largest
    cutoffs most (the asymptotic regime). The error bar is the largest of ``floor_fraction`` times the
    correction |values[-1] - E_inf|, the change of E_inf without the smallest cutoff (four or more), and
    the change of E_inf when p is scaled by 1 -+ ``exponent_shift``.
    """
    n = np.asarray(cutoffs, dtype=float)
    y = np.asarray(values, dtype=float)
    order = np.argsort(n)
    n, y = n[order], y[order]
    if len(n) < 3:
        raise ValueError(f"a power law needs at least 3 cutoffs, got {len(n)}")

    def fit(nn: np.ndarray, yy: np.ndarray) -> tuple[float, float, float]:
        # weighted straight-line fit y = a + b x, x = n^-p, for every p of the scan at once
        # (closed-form normal equations; the same minimizer as one least-squares solve per p)
        weights = (nn / nn[-1]) ** 2
        powers = np.linspace(*power_bounds, 581)
        x = nn[None, :] ** (-powers[:, None])
        total = weights.sum()
        x_mean = (x * weights).sum(axis=1) / total
        y_mean = float(weights @ yy) / total
        dx = x - x_mean[:, None]
        sxx = (weights * dx**2).sum(axis=1)
        sxy = (weights * dx * (yy - y_mean)).sum(axis=1)
        slope = sxy / sxx
        intercept = y_mean - slope * x_mean
        residual = (weights * (yy[None, :] - intercept[:, None] - slope[:, None] * x) ** 2).sum(axis=1)
        best = int(np.argmin(residual))
        return float(intercept[best]), float(slope[best]), float(powers[best])

    value, amplitude, power = fit(n, y)
    candidates = [floor_fraction * abs(y[-1] - value)]
    if len(n) >= 4:
        candidates.append(abs(fit(n[1:], y[1:])[0] - value))
    # the exponent is the least certain ingredient: shift it either way
    for scale in (1 - exponent_shift, 1 + exponent_shift):
        p = power * scale
        design = np.column_stack([np.ones_like(n[-3:]), n[-3:] ** (-p)])
        coef, *_ = np.linalg.lstsq(design, y[-3:], rcond=None)
        candidates.append(abs(float(coef[0]) - value))
    return Extrapolation(
        value=value,
        error=float(max(candidates)),
        model="E(n) = E_inf + A n^-p",
        steps=tuple(n.tolist()),
        values=tuple(y.tolist()),
        parameters={"amplitude": amplitude, "power": power},
    )


# ----------------------------------------------------------------------------- ladder models


@dataclass(frozen=True)
class PolynomialModel:
    """E(h) = E_0 + sum_k c_k h^(p_k) with h = step^exponent, the limit h -> 0.

    ``exponent`` = 1 for a lattice spacing (h = a -> 0); -1/2 for an oscillator cutoff c with a bare
    contact interaction (h = c^(-1/2) -> 0 as c -> infinity). With fewer than 1 + len(powers) points
    the highest powers are dropped (two spacings: Richardson extrapolation in the first power).
    ``two_rung_power``: see ``backends/ladder.py`` (the bar of a ladder shorter than ``minimum_points``).
    """

    powers: tuple[float, ...] = (2.0, 4.0)
    exponent: float = 1.0
    minimum_points: int = 2
    two_rung_power: float | None = None

    def __call__(self, steps: Sequence[float], values: Sequence[float]) -> Extrapolation:
        h = np.asarray(steps, dtype=float) ** self.exponent
        kept = self.powers[: max(1, min(len(self.powers), len(h) - 1))]
        return extrapolate_polynomial(h, values, powers=kept)


@dataclass(frozen=True)
class SixthOrderSpacingFit:
    """E(a) = E_0 + c2 a^2 + c4 a^4 + c6 a^6, least squares over five or more lattice spacings.

    The error bar carries no floor proportional to the extrapolation (``PolynomialModel``'s 5 % of
    |E(a_min) - E_0|, which dominates its bar on fine ladders): it is the largest of the change of E_0
    when the a^6 term is dropped (all spacings), the change when the coarsest spacing is dropped, and the
    fit's standard error. A lattice ladder of an even series converges so that the next term's effect
    bounds what is left; measured against ``three-body`` (2+1, stored lattice-ed and lattice-dmrg ladders,
    ``bench/benchmarks/bench_lattice_results.md``), |E_0 - exact| stays well inside this bar.
    """

    minimum_points: int = 5

    def __call__(self, steps: Sequence[float], values: Sequence[float]) -> Extrapolation:
        h = np.asarray(steps, dtype=float)
        y = np.asarray(values, dtype=float)
        if len(h) < self.minimum_points:
            raise ValueError(f"{len(h)} spacings; the a^6 fit needs at least {self.minimum_points}")
        order = np.argsort(h)
        h, y = h[order], y[order]
        value, stderr, coef = _fit_polynomial(h, y, (2.0, 4.0, 6.0))
        without_term = _fit_polynomial(h, y, (2.0, 4.0))[0]
        without_coarsest = _fit_polynomial(h[:-1], y[:-1], (2.0, 4.0, 6.0))[0]
        return Extrapolation(
            value=value,
            error=float(max(stderr, abs(without_term - value), abs(without_coarsest - value))),
            model="E(h) = E0 + c2 h^2 + c4 h^4 + c6 h^6",
            steps=tuple(h.tolist()),
            values=tuple(y.tolist()),
            parameters={"coefficients": coef.tolist(), "powers": [2.0, 4.0, 6.0]},
        )


@dataclass(frozen=True)
class DriftingPowerLaw:
    """E(c) = E_inf + A c^(-p), p fitted to the last three cutoffs, for an exponent still drifting.

    Fitted by ``extrapolate_power_law`` (its error bar shifts p by ``exponent_shift``). Where p still drifts along
    the reachable cutoffs (2+2, g = 2 in a renormalized oscillator basis: p = 0.66 at c = 8-16, 1.76
    at 24-32, 1.67 at 36-44), the error bar is also at least ``change_factor`` times the change of E_inf
    from the previous three cutoffs, and it is the whole correction |E_last - E_inf| when p moved by more than
    25% or fewer than four cutoffs were given. Values that turn around along the ladder (not
    monotonic, e.g. a non-variational renormalized energy) follow no power law: the last value is
    returned with the total variation along the ladder as its error bar, and a ``warning``.
    ``change_factor`` is 2 by default and ``exponent_shift`` (``extrapolate_power_law``) 0.25; a backend that
    measured its ladders against references may set its own.
    """

    minimum_points: int = 3
    change_factor: float = 2.0
    exponent_shift: float = 0.25

    def __call__(self, steps: Sequence[float], values: Sequence[float]) -> Extrapolation:
        cutoffs = np.asarray(steps, dtype=float)
        energies = np.asarray(values, dtype=float)
        changes = np.diff(energies)
        changes = changes[np.abs(changes) > 1e-10 * max(1.0, abs(energies[-1]))]
        if len(changes) >= 2 and np.any(np.sign(changes) != np.sign(changes[-1])):
            return Extrapolation(
                value=float(energies[-1]),
                error=float(np.sum(np.abs(np.diff(energies)))),
                model="last value (not monotonic in the cutoff)",
                steps=tuple(cutoffs.tolist()),
                values=tuple(energies.tolist()),
                warning=(
                    "the energy turned around along the cutoff ladder (not variational, e.g. a renormalized"
                    " interaction): last value, error bar = total variation along the ladder"
                ),
            )
        fit = extrapolate_power_law(cutoffs[-3:], energies[-3:], exponent_shift=self.exponent_shift)
        correction = abs(energies[-1] - fit.value)
        error = max(fit.error, correction)
        if len(cutoffs) >= 4:
            previous = extrapolate_power_law(cutoffs[-4:-1], energies[-4:-1], exponent_shift=self.exponent_shift)
            power, earlier = fit.parameters["power"], previous.parameters["power"]
            error = max(fit.error, self.change_factor * abs(fit.value - previous.value))
            if abs(power - earlier) > 0.25 * power:
                error = max(error, correction)
        return replace(fit, error=float(error), steps=tuple(cutoffs.tolist()), values=tuple(energies.tolist()))


@dataclass(frozen=True)
class DiscardedWeightLinear:
    """E(eps) = E_0 + c eps in the discarded weight eps of a bond-dimension ladder (common practice).

    Used when the two largest bond dimensions still truncate (eps > ``no_truncation``) and all
    weights differ; the error bar is the larger of the fit's (``extrapolate_polynomial``, power 1)
    and half the extrapolation distance |E_last - E_0|. Otherwise the last energy with the change from
    the previous one as error. A single rung is exact only if it did not truncate.
    """

    no_truncation: float = 1e-14
    minimum_points: int = 1

    def __call__(self, steps: Sequence[float], values: Sequence[float]) -> Extrapolation:
        weights, energies = list(map(float, steps)), list(map(float, values))
        if len(energies) == 1:
            if weights[0] > self.no_truncation:
                raise ValueError(f"one truncating bond dimension (discarded weight {weights[0]:.2e}) gives no error bar")
            return Extrapolation(energies[0], 0.0, "no truncation", tuple(weights), tuple(energies))
        if min(weights[-2:]) > self.no_truncation and len(set(weights)) == len(weights):
            fit = extrapolate_polynomial(weights, energies, powers=(1.0,))
            return replace(fit, error=max(fit.error, abs(energies[-1] - fit.value) * 0.5))
        return Extrapolation(
            energies[-1], abs(energies[-1] - energies[-2]), "last value (no truncation left)", tuple(weights), tuple(energies)
        )


@dataclass(frozen=True)
class GeometricTail:
    """The finest value of a monotonic ladder converging geometrically, with a bound on what is left.

    For nested variational spaces (a p-ladder of spectral elements) a level decreases monotonically
    to its limit. With the last two changes d_prev, d_last and r = d_last / d_prev, geometric
    convergence at r <= 1/2 leaves at most d_last r / (1 - r) <= d_last below the finest value, so
    the error bar is d_last (sum of a geometric series). Slower convergence gets 2 d_last / (1 - r)
    (r < 1) or 10 max(d_last, d_prev) (r >= 1), with a ``warning``. A change below ``rounding`` x
    max(1, |value|) counts as converged. The value is never extrapolated: the finest value is the
    variational one.
    """

    rounding: float = 1e-12
    minimum_points: int = 3

    @staticmethod
    def bound(last: float, previous: float, floor: float) -> tuple[float, str | None]:
        """(error bar, warning or None) from the last two changes (class docstring); also serves distances
        between successive rungs' grids (sup norms), e.g. a density along a p-ladder."""
        if last <= floor or last <= 0.5 * previous:
            return last, None
        ratio = last / previous
        error = 2 * last / (1 - ratio) if ratio < 1 else 10 * max(last, previous)
        return error, f"the ladder did not converge geometrically (ratio {ratio:.2f} of its last two changes); its error bar is widened"

    def __call__(self, steps: Sequence[float], values: Sequence[float]) -> Extrapolation:
        y = np.asarray(values, dtype=float)
        if len(y) < 3:
            raise ValueError(f"a geometric tail needs 3 rungs to measure its ratio, got {len(y)}")
        floor = self.rounding * max(1.0, abs(y[-1]))
        last, previous = abs(y[-1] - y[-2]), abs(y[-2] - y[-3])
        error, warning = self.bound(last, previous, floor)
        return Extrapolation(
            value=float(y[-1]),
            error=float(max(error, floor)),
            model="finest value + geometric tail bound",
            steps=tuple(float(s) for s in steps),
            values=tuple(y.tolist()),
            parameters={"last_change": float(last), "previous_change": float(previous)},
            warning=warning,
        )
