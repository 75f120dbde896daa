"""The shared least-squares helper, the extrapolation models of backends/extrapolation.py and the
convergence ladder of backends/ladder.py.

Reference values come from independent general-purpose routines (scipy.stats.linregress and
scipy.optimize.curve_fit), not from the helper's own formula.
"""

import numpy as np
import pytest
from scipy import optimize, stats

from trapbench.backends.extrapolation import (
    DiscardedWeightLinear,
    DriftingPowerLaw,
    GeometricTail,
    PolynomialModel,
    SixthOrderSpacingFit,
    fit_line,
    fit_linear,
)
from trapbench.backends.ladder import Rung, RungLevel, rank_keys, run_ladder


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


# ----------------------------------------------------------------------------- ladder models
# Synthetic ladders with a known limit by construction (closed forms), so the expected values do not
# come from the code under test.


def test_polynomial_model_recovers_an_exact_a2_a4_series_and_drops_terms_for_two_points():
    spacings = [0.4, 0.3, 0.22, 0.16]
    values = [1.25 - 0.7 * a**2 + 0.9 * a**4 for a in spacings]
    fit = PolynomialModel(powers=(2.0, 4.0))(spacings, values)
    assert fit.value == pytest.approx(1.25, abs=1e-12)
    # two spacings: Richardson in a^2 alone, exact when there is no a^4 term
    pure = [1.25 - 0.7 * a**2 for a in spacings[:2]]
    assert PolynomialModel(powers=(2.0, 4.0))(spacings[:2], pure).value == pytest.approx(1.25, abs=1e-12)


def test_sixth_order_fit_is_exact_on_its_series_and_its_bar_holds_the_next_term():
    spacings = [0.4, 0.32, 0.25, 0.2, 0.16]
    exact = [1.25 - 0.7 * a**2 + 0.9 * a**4 - 2.0 * a**6 for a in spacings]
    fit = SixthOrderSpacingFit()(spacings, exact)
    assert fit.value == pytest.approx(1.25, abs=1e-12)
    # the bar is the change of E0 when the a^6 term is dropped, not a fraction of the extrapolation
    without_term = PolynomialModel(powers=(2.0, 4.0))(spacings, exact)
    assert fit.error == pytest.approx(abs(without_term.value - 1.25), rel=1e-6)
    assert fit.error > 0
    # an a^8 term the fit does not have: the bar must still hold the true error
    beyond = [e + 5.0 * a**8 for e, a in zip(exact, spacings)]
    fit = SixthOrderSpacingFit()(spacings, beyond)
    assert abs(fit.value - 1.25) <= fit.error
    with pytest.raises(ValueError, match="at least 5"):
        SixthOrderSpacingFit()(spacings[:4], exact[:4])


def test_polynomial_model_in_inverse_square_root_of_a_cutoff():
    cutoffs = [20, 24, 28, 32]
    values = [3.0 + 0.8 * c**-0.5 - 0.3 / c for c in cutoffs]
    fit = PolynomialModel(powers=(1.0, 2.0), exponent=-0.5, minimum_points=3)(cutoffs, values)
    assert fit.value == pytest.approx(3.0, abs=1e-12)


def test_drifting_power_law_covers_its_limit_and_flags_a_turning_ladder():
    cutoffs = [16, 20, 24, 28, 32]
    values = [2.0 + 1.5 * c**-1.7 for c in cutoffs]
    fit = DriftingPowerLaw()(cutoffs, values)
    assert abs(fit.value - 2.0) <= fit.error
    assert fit.warning is None
    turning = [2.10, 2.05, 2.04, 2.045]
    flagged = DriftingPowerLaw()([8, 12, 16, 20], turning)
    assert flagged.value == turning[-1]
    assert flagged.error == pytest.approx(0.05 + 0.01 + 0.005)  # total variation along the ladder
    assert "turned around" in flagged.warning


@pytest.mark.parametrize("ratio", [0.1, 0.3, 0.45])
def test_geometric_tail_bounds_the_remainder_of_a_fast_ladder(ratio):
    # E_k = E_inf + A r^k: the remainder A r^K is d_last r / (1 - r) <= d_last for r <= 1/2
    limit, amplitude = -1.25, 0.8
    values = [limit + amplitude * ratio**k for k in range(4)]
    fit = GeometricTail()(range(4), values)
    assert fit.value == values[-1] and fit.warning is None
    assert abs(values[-1] - limit) <= fit.error
    assert fit.error == pytest.approx(values[-2] - values[-1])


def test_geometric_tail_widens_and_warns_when_convergence_is_slow():
    limit = 2.0
    slow = [limit + 1.0 / (k + 1) for k in range(5)]  # algebraic: last ratio 0.6
    fit = GeometricTail()(range(5), slow)
    assert fit.warning and "did not converge geometrically" in fit.warning
    assert fit.error == pytest.approx(2 * 0.05 / 0.4) and abs(slow[-1] - limit) <= fit.error
    growing = [limit, limit - 0.05, limit - 0.2]  # ratio 3: no tail bound, ten times the larger change
    assert GeometricTail()(range(3), growing).error == pytest.approx(1.5)
    converged = [limit + 1e-15, limit, limit]
    assert GeometricTail(rounding=1e-12)(range(3), converged).error == pytest.approx(2e-12)
    with pytest.raises(ValueError, match="3 rungs"):
        GeometricTail()(range(2), slow[:2])


def test_discarded_weight_model_is_linear_and_exact_without_truncation():
    weights = [4e-6, 1e-6, 2e-7]
    fit = DiscardedWeightLinear()(weights, [-1.0 + 30.0 * w for w in weights])
    assert fit.value == pytest.approx(-1.0, abs=1e-12)
    assert DiscardedWeightLinear()([0.0], [-1.0]).error == 0.0
    with pytest.raises(ValueError, match="truncating"):
        DiscardedWeightLinear()([1e-6], [-1.0])


# ----------------------------------------------------------------------------- the ladder


def crossing_solver(scalar_error=0.0):
    """Two sectors whose lowest levels cross as h -> 0: E_odd = 1.1 - 3 h^2 lies below
    E_even = 1 + 2 h^2 for h^2 > 0.02 and above it in the limit."""

    def solve(h, final):
        even = [1.0 + 2.0 * h**2, 3.0 + h**2]
        odd = [1.1 - 3.0 * h**2]
        levels = sorted([(e, +1) for e in even] + [(e, -1) for e in odd])
        found = {}
        for key, (energy, parity) in zip(rank_keys([p for _, p in levels]), levels):
            found[key] = RungLevel(
                energy=energy,
                labels={"parity": parity, "final": final},
                solver_error=1e-9,
                scalars={"delta": 0.5 + parity * h**2},
                scalar_errors={"delta": scalar_error},
            )
        return Rung(h, found)

    return solve


def test_ladder_follows_levels_through_a_crossing_and_reports_the_lowest():
    outcome = run_ladder([0.4, 0.3, 0.2], crossing_solver(), PolynomialModel(powers=(2.0,)), keep=2)
    # at h = 0.4 the odd level is lowest; in the limit the even one is: order by the limit
    assert [s["parity"] for s in outcome.states] == [+1, -1]
    assert outcome.energies == pytest.approx([1.0, 1.1], abs=1e-12)
    assert all(s["final"] for s in outcome.states)  # labels come from the final rung
    # error = model error (an exact fit here) + the largest solver error along the ladder
    for energy, error, exact in zip(outcome.energies, outcome.energy_errors, (1.0, 1.1)):
        assert abs(energy - exact) <= error
        assert error >= 1e-9
    assert outcome.error_estimate == max(outcome.energy_errors)
    raw = outcome.diagnostics()["raw_energies"]
    assert raw[0] == pytest.approx([1.0 + 2 * 0.16, 1.1 - 3 * 0.16])


def test_ladder_extrapolates_scalars_with_their_solver_errors_and_suffixes():
    outcome = run_ladder(
        [0.4, 0.3, 0.2], crossing_solver(scalar_error=2e-6), PolynomialModel(powers=(2.0,)), keep=2, scalar_floor=0.1
    )
    assert outcome.scalars["delta"] == pytest.approx(0.5, abs=1e-12)  # state 0: even sector
    assert outcome.scalars["delta@1"] == pytest.approx(0.5, abs=1e-12)  # state 1: odd sector
    # the relative floor (0.1 * max(1, |0.5|)) dominates the model error plus the solver error 2e-6
    assert outcome.scalar_errors["delta"] == pytest.approx(0.1)
    model = PolynomialModel(powers=(2.0,))
    no_floor = run_ladder([0.4, 0.3, 0.2], crossing_solver(scalar_error=2e-6), model, keep=1)
    # without a floor: the model's own error bar plus the solver error, added
    series = [0.5 + h**2 for h in (0.4, 0.3, 0.2)]
    assert no_floor.scalar_errors["delta"] == pytest.approx(model([0.4, 0.3, 0.2], series).error + 2e-6)
    assert "delta@1" not in no_floor.scalars


def test_short_ladders_give_a_difference_or_no_error_bar():
    model = PolynomialModel(powers=(1.0, 2.0), minimum_points=3)
    two = run_ladder([0.4, 0.2], crossing_solver(), model, keep=1)
    # not extrapolated: the last rung's lowest level (odd, 1.1 - 3 h^2) and its change from the rung before
    assert two.energies[0] == pytest.approx(1.1 - 3 * 0.04)
    assert two.energy_errors[0] == pytest.approx(3 * (0.16 - 0.04) + 1e-9)
    one = run_ladder([0.2], crossing_solver(), model, keep=1)
    assert one.energy_errors is None and one.error_estimate is None and one.scalar_errors == {}


def test_a_two_rung_bar_is_the_remainder_of_the_declared_slowest_law():
    # the odd level is 1.1 - 3 h^2: with two_rung_power 2 the change 3 (0.16 - 0.04) over r^2 - 1 = 3 is
    # exactly the remaining 3 * 0.04, where the change alone would claim 0.36 (a law E ~ h^2: common practice)
    model = PolynomialModel(powers=(1.0, 2.0), minimum_points=3, two_rung_power=2.0)
    two = run_ladder([0.4, 0.2], crossing_solver(), model, keep=1)
    assert two.energy_errors[0] == pytest.approx(3 * 0.04 + 1e-9)
    # a slower declared law widens the bar: r^(1/2) - 1 = 0.414 for the same change
    slow = run_ladder([0.4, 0.2], crossing_solver(), PolynomialModel(minimum_points=3, two_rung_power=0.5), keep=1)
    assert slow.energy_errors[0] == pytest.approx(3 * 0.12 / (2**0.5 - 1) + 1e-9)


def test_a_level_missing_on_one_rung_is_not_reported():
    def solve(h, final):
        found = {("s", 0): RungLevel(1.0 + h**2)}
        if final:
            found[("s", 1)] = RungLevel(0.5)  # appears only on the last rung: cannot be extrapolated
        return Rung(h, found)

    outcome = run_ladder([0.3, 0.2, 0.1], solve, PolynomialModel(powers=(2.0,)), keep=2)
    assert outcome.keys == [("s", 0)]
