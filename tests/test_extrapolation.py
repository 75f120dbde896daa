"""The shared least-squares helper and the extrapolation models of backends/extrapolation.py.

Reference values come from independent general-purpose routines (scipy.stats.linregress and
scipy.optimize.curve_fit), not from the helper's own formula.
"""

import numpy as np
import pytest
from scipy import optimize, stats

from trapbench.backends.extrapolation import fit_line, fit_linear


def _noisy_line(points=7, seed=3):
    rng = np.random.default_rng(seed)
    x = np.linspace(-1.0, 2.0, points)
    return x, 0.4 - 1.3 * x + 0.05 * rng.standard_normal(points)


def test_fit_line_matches_linregress():
    x, y = _noisy_line()
    fit = fit_line(x, y)
    reference = stats.linregress(x, y)
    assert fit.intercept == pytest.approx(reference.intercept, rel=1e-12)
    assert fit.slope == pytest.approx(reference.slope, rel=1e-12)
    assert fit.intercept_error == pytest.approx(reference.intercept_stderr, rel=1e-10)
    assert fit.slope_error == pytest.approx(reference.stderr, rel=1e-10)
    assert fit.dof == len(x) - 2


def test_weighted_fit_matches_curve_fit():
    x, y = _noisy_line(points=9, seed=5)
    weights = np.linspace(0.5, 4.0, len(x))
    design = np.column_stack([np.ones_like(x), x, x**2])
    fit = fit_linear(design, y, weights)
    # curve_fit minimizes sum ((y - f) / sigma)^2, so sigma = w^-1/2; relative sigma scales the
    # covariance by the reduced chi^2 exactly as the helper's standard errors do
    popt, pcov = optimize.curve_fit(lambda t, a, b, c: a + b * t + c * t**2, x, y, sigma=weights**-0.5)
    np.testing.assert_allclose(fit.coefficients, popt, rtol=1e-6, atol=1e-7)  # curve_fit iterates to ~1e-8
    np.testing.assert_allclose(fit.stderr, np.sqrt(np.diag(pcov)), rtol=1e-6)


def test_exact_fit_has_no_standard_error():
    fit = fit_line([0.0, 1.0], [1.0, 3.0])
    assert (fit.intercept, fit.slope) == pytest.approx((1.0, 2.0))
    assert np.isnan(fit.intercept_error) and np.isnan(fit.slope_error)


@pytest.mark.parametrize(
    "design, y, weights, field",
    [
        (np.ones((2, 3)), [1.0, 2.0], None, "coefficients"),
        (np.ones((3, 2)), [1.0, 2.0], None, "design"),
        ([0.0, 1.0, 2.0], [1.0, 2.0, 3.0], [1.0, -1.0, 1.0], "weights"),
    ],
)
def test_bad_input_names_the_field(design, y, weights, field):
    with pytest.raises(ValueError, match=field):
        fit_linear(design, y, weights)
