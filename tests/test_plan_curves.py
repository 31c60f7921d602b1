"""Learning-curve fit: recovery of known parameters, agreement with scipy, fallback, bounds."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import curve_fit
from sklearn.isotonic import IsotonicRegression

from semisup import PlanError
from semisup.plan import (
    MAX_EXTRAPOLATION,
    budget_weights,
    fit_learning_curve,
    fit_power_law_batch,
    power_law,
)

BUDGETS = np.array([20, 40, 80, 160, 320, 640], dtype=float)


@pytest.mark.parametrize("truth", [(0.05, 2.0, 0.6), (0.0, 1.0, 0.3), (0.2, 5.0, 1.2)])
def test_recovers_known_parameters(truth):
    # Noise-free points of a + b n^-c (Mukherjee et al. 2003 form): the fit must return the
    # generating (a, b, c) to 1e-3.
    err = power_law(BUDGETS, *truth)
    fit = fit_learning_curve(BUDGETS, err)
    assert fit.kind == "power_law" and not fit.flagged
    np.testing.assert_allclose(fit.params, truth, atol=1e-3)


def test_agrees_with_scipy_curve_fit_on_the_same_weighted_problem():
    rng = np.random.default_rng(3)
    n = np.repeat(BUDGETS, 5)
    err = np.clip(power_law(n, 0.06, 1.8, 0.55) + rng.normal(0, 0.012, n.size), 0, 1)
    w = budget_weights(n)
    fit = fit_learning_curve(n, err, weights=w)
    # Reference: scipy.optimize.curve_fit minimises sum(((y - f) / sigma)^2); sigma = w^-1/2
    # gives the same weighted least-squares objective, with the same bounds.
    ref, _ = curve_fit(power_law, n, err, p0=[0.1, 1.0, 0.5], sigma=1 / np.sqrt(w),
                       bounds=([0, 0, 0], [1, np.inf, 5]), xtol=1e-14, ftol=1e-14, gtol=1e-14,
                       max_nfev=10000)
    np.testing.assert_allclose(fit.params, ref, rtol=1e-4, atol=1e-5)

    def sse(p):
        return float(np.sum(w * (power_law(n, *p) - err) ** 2))

    assert sse(fit.params) <= sse(ref) * (1 + 1e-9)


def test_budget_weights_follow_rank_over_count():
    # Figueroa et al. 2012 weight the j-th of m curve points by j/m (from memory); hand values.
    np.testing.assert_allclose(budget_weights(np.array([10, 10, 20, 40])), [1/3, 1/3, 2/3, 1])


def test_default_weights_favour_large_budgets():
    # An outlier at the smallest budget moves the default (rank-weighted) fit less than the
    # unweighted fit; hand-checkable consequence of the weights.
    n = BUDGETS
    err = power_law(n, 0.05, 2.0, 0.6)
    bad = err.copy()
    bad[0] += 0.08
    truth_at_max = power_law(640.0, 0.05, 2.0, 0.6)
    weighted = fit_learning_curve(n, bad, poor_rmse=1.0)
    flat = fit_learning_curve(n, bad, weights=np.ones_like(n), poor_rmse=1.0)
    assert abs(weighted.predict(640)[0] - truth_at_max) < abs(flat.predict(640)[0] - truth_at_max)


def test_fallback_with_two_budgets_is_flagged_and_monotone():
    fit = fit_learning_curve(np.array([50, 50, 100, 100]), np.array([0.3, 0.32, 0.2, 0.22]))
    assert fit.kind == "monotone" and fit.flagged and "at least 3" in fit.reason
    pred = fit.predict(np.array([50, 75, 100, 200]))
    assert np.all(np.diff(pred) <= 1e-12)
    np.testing.assert_allclose(pred[[0, 2, 3]], [0.31, 0.21, 0.21])  # means, flat beyond


def test_fallback_uses_weighted_isotonic_means():
    # A curve that rises then drops (not a power law): the fallback's knots are the
    # pool-adjacent-violators means. Hand value: (0.30 * 1/3 + 0.35 * 2/3) / 1 = 1/3; also
    # checked against scikit-learn's IsotonicRegression.
    n = np.array([10.0, 20.0, 40.0])
    err = np.array([0.30, 0.35, 0.05])
    fit = fit_learning_curve(n, err, kind="monotone")
    np.testing.assert_allclose(fit.knots_err, [1 / 3, 1 / 3, 0.05])
    ref = IsotonicRegression(increasing=False).fit_transform(np.log(n), err,
                                                             sample_weight=budget_weights(n))
    np.testing.assert_allclose(fit.knots_err, ref)


def test_poor_power_law_fit_falls_back_and_says_why():
    n = np.repeat(np.array([20, 40, 80, 160, 320.0]), 3)
    step = np.where(n < 100, 0.40, 0.10)  # a step is no learning curve
    err = step + np.tile([-0.001, 0.0, 0.001], 5)
    fit = fit_learning_curve(n, err)
    assert fit.kind == "monotone" and fit.flagged and "fits poorly" in fit.reason


def test_extrapolation_is_refused_beyond_four_times_the_largest_budget():
    fit = fit_learning_curve(BUDGETS, power_law(BUDGETS, 0.05, 2.0, 0.6))
    assert MAX_EXTRAPOLATION == 4.0
    fit.predict(4 * 640)  # allowed
    assert fit.extrapolated(np.array([640, 641]))[1] and not fit.extrapolated(640)[0]
    with pytest.raises(PlanError, match="more than 4x the largest measured budget"):
        fit.predict(4 * 640 + 1)


@pytest.mark.parametrize("n, err", [
    ([10, -5, 20], [0.1, 0.2, 0.3]),
    ([10, 20, 30], [0.1, 1.2, 0.3]),
    ([10, 20], [0.1]),
])
def test_bad_input_is_a_plan_error(n, err):
    with pytest.raises(PlanError):
        fit_learning_curve(np.array(n, float), np.array(err, float))


@settings(max_examples=25, deadline=None)
@given(
    a=st.floats(0.0, 0.5), b=st.floats(0.0, 3.0), c=st.floats(0.05, 1.5),
    noise=st.floats(0.0, 0.05), seed=st.integers(0, 10_000),
)
def test_fit_is_monotone_and_inside_unit_interval(a, b, c, noise, seed):
    rng = np.random.default_rng(seed)
    n = np.repeat(BUDGETS, 2)
    err = np.clip(power_law(n, a, b, c) + rng.normal(0, noise, n.size), 0, 1)
    fit = fit_learning_curve(n, err)
    grid = np.geomspace(BUDGETS[0], 4 * BUDGETS[-1], 50)
    pred = fit.predict(grid)
    assert np.all((pred >= 0) & (pred <= 1))
    assert np.all(np.diff(pred) <= 1e-9)


def test_batch_fit_matches_the_least_squares_fit():
    # The profiled batch fit used by the bootstrap must reach the same weighted objective as
    # the scipy least-squares fit (equal per-point and per-budget objectives up to a constant).
    rng = np.random.default_rng(11)
    n = np.repeat(BUDGETS, 4)
    w = budget_weights(n)
    means, wts, refs = [], [], []
    for _ in range(6):
        err = np.clip(power_law(n, 0.04, 1.5, 0.5) + rng.normal(0, 0.02, n.size), 0, 1)
        refs.append((err, fit_learning_curve(n, err, poor_rmse=1.0)))
        means.append([err[n == v].mean() for v in BUDGETS])
        wts.append([w[n == v].sum() for v in BUDGETS])
    params = fit_power_law_batch(BUDGETS, np.array(means), np.array(wts))
    for p, (err, fit) in zip(params, refs, strict=True):
        def sse(q, err=err):
            return float(np.sum(w * (power_law(n, *q) - err) ** 2))
        assert sse(p) == pytest.approx(sse(fit.params), rel=1e-7)
        np.testing.assert_allclose(p, fit.params, atol=1e-4)


def test_poor_fit_warning_never_reads_equal_numbers():
    # A rounding artefact ("0.020 > 0.020") told the reader nothing; enough digits are shown to
    # tell the residual from the limit (common practice, no source).
    from semisup.plan._curves import residual_vs_limit

    assert residual_vs_limit(0.02049, 0.02) == "RMS residual 0.0205 above the limit 0.0200"
    assert residual_vs_limit(0.31, 0.05) == "RMS residual 0.310 above the limit 0.050"
