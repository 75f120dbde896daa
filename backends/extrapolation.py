"""Extrapolation of a ladder of approximations to the exact limit, with an error bar.

Two asymptotic forms serve every backend:

- ``extrapolate_polynomial``: E(h) = E_0 + sum_k c_k h^(p_k) with known powers (Richardson
  extrapolation generalized to weighted least squares), e.g. h = lattice spacing a with powers
  (2, 3) or (2, 4); h = 1/chi or a truncation error for DMRG with power 1.
- ``extrapolate_power_law``: E(n) = E_inf + A n^(-p) with unknown p (fitted), e.g. n = an orbital or
  energy cutoff of a basis expansion.

The error bar is deliberately conservative (common practice in convergence studies): it is the
largest of (i) the fit's own standard error, (ii) the change of the limit when the least-converged
point is dropped, (iii) the change when the model loses its highest-order term, and (iv) a floor of
``floor_fraction`` times the last correction (E_last - E_0). A single point gives no extrapolation.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

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

    def as_dict(self) -> dict:
        return {
            "value": self.value,
            "error": self.error,
            "model": self.model,
            "steps": list(self.steps),
            "values": list(self.values),
            "parameters": dict(self.parameters),
        }


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
) -> Extrapolation:
    """Limit n -> inf of values(n) = E_inf + A n^(-p), p fitted within ``power_bounds``.

    Needs at least three cutoffs. With exactly three the model is solved exactly; with more the
    exponent minimizes the least-squares residual over a fine scan of p, weighting the largest
    cutoffs most (the asymptotic regime).
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
    # the exponent is the least certain ingredient: shift it by 25% either way
    for scale in (0.75, 1.25):
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
