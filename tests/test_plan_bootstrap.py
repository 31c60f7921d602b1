"""Bootstrap intervals, extrapolation widening, probability of meeting the target, backtest."""

from __future__ import annotations

import numpy as np
import pytest

from semisup.plan import (
    backtest_curve,
    bootstrap_curve,
    extrapolation_factor,
    fit_learning_curve,
    power_law,
    probability_meets,
)

BUDGETS = np.array([20, 40, 80, 160, 320], dtype=float)


def _cells(truth=(0.05, 2.0, 0.6), repeats=5, noise=0.01, seed=0):
    rng = np.random.default_rng(seed)
    n = np.repeat(BUDGETS, repeats)
    rep = np.tile(np.arange(repeats), BUDGETS.size)
    err = np.clip(power_law(n, *truth) + rng.normal(0, noise, n.size), 0, 1)
    return n, err, rep


def test_probability_is_the_share_of_samples_meeting_the_target():
    # Hand-computed: 3 of 4 samples are >= 0.85; for a lower-is-better quantity 2 of 4 <= 0.85.
    samples = np.array([0.80, 0.85, 0.90, 0.95])
    assert probability_meets(samples, 0.85) == pytest.approx(0.75)
    assert probability_meets(samples, 0.85, higher_is_better=False) == pytest.approx(0.5)


def test_extrapolation_factor_hand_values():
    # 1 inside the measured range; 1 + log2(n / n_max) beyond: 2 at 2x, 3 at 4x.
    np.testing.assert_allclose(extrapolation_factor(np.array([50, 100, 200, 400]), 100.0),
                               [1, 1, 2, 3])


def test_band_contains_point_and_widens_when_extrapolated():
    n, err, rep = _cells()
    grid = np.array([20, 80, 320, 640, 1280], dtype=float)
    band = bootstrap_curve(n, err, rep, grid, n_boot=60, seed=1)
    assert band.samples.shape == (60, 5)
    assert np.all(band.low <= band.point) and np.all(band.point <= band.high)
    assert list(band.extrapolated) == [False, False, False, True, True]
    width = band.high - band.low
    assert width[3] > width[2] and width[4] > width[3]


def test_bootstrap_is_deterministic_for_a_seed():
    n, err, rep = _cells()
    grid = np.array([40.0, 500.0])
    a = bootstrap_curve(n, err, rep, grid, n_boot=30, seed=7)
    b = bootstrap_curve(n, err, rep, grid, n_boot=30, seed=7)
    np.testing.assert_array_equal(a.samples, b.samples)


def test_noise_free_repeats_give_a_zero_width_band_inside_the_range():
    n, err, rep = _cells(noise=0.0)
    band = bootstrap_curve(n, err, rep, BUDGETS, n_boot=20, seed=0)
    np.testing.assert_allclose(band.high - band.low, 0, atol=1e-6)


def test_single_repeat_uses_residual_bootstrap():
    n, err, rep = _cells(repeats=1, noise=0.02)
    band = bootstrap_curve(n, err, rep, BUDGETS, n_boot=40, seed=0)
    assert np.all(band.high - band.low > 0)


def test_interval_covers_the_true_curve_in_most_simulations():
    # Coverage check by simulation against the known generating curve: a 90% interval of the
    # mean curve at a measured budget should cover the truth in most of 20 studies
    # (binomial(20, 0.9) puts >= 14 above 99%; common practice, no source).
    truth = (0.05, 2.0, 0.6)
    hits = 0
    for s in range(20):
        n, err, rep = _cells(truth, seed=100 + s)
        band = bootstrap_curve(n, err, rep, np.array([160.0]), n_boot=60, seed=s)
        hits += band.low[0] <= power_law(160.0, *truth) <= band.high[0]
    assert hits >= 14


def test_backtest_on_an_exact_power_law_covers_and_is_accurate():
    n, err, rep = _cells(noise=0.0)
    bt = backtest_curve(n, 1 - err, rep, n_boot=20, seed=0)
    truth = 1 - power_law(320.0, 0.05, 2.0, 0.6)
    assert bt.n_labels == 320 and bt.covered is True
    assert bt.measured == pytest.approx(truth)
    assert abs(bt.error) < 1e-6


def test_backtest_catches_a_curve_that_breaks_at_the_largest_budget():
    n, err, rep = _cells(noise=0.002)
    err = np.where(n == 320, err + 0.08, err)  # the largest budget is much worse than the trend
    bt = backtest_curve(n, 1 - err, rep, n_boot=40, seed=0)
    assert bt.covered is False and bt.error > 0.05


def test_backtest_needs_three_budgets():
    bt = backtest_curve(np.array([10, 20.0]), np.array([0.5, 0.6]), np.array([0, 0]))
    assert bt.covered is None and "at least 3" in bt.reason
    assert bt.to_dict()["predicted"]["mean"] is None


def test_full_fit_is_reused_when_given():
    n, err, rep = _cells()
    fit = fit_learning_curve(n, err)
    band = bootstrap_curve(n, err, rep, np.array([100.0]), n_boot=5, seed=0, fit=fit)
    assert band.fit is fit


def test_holdout_sampling_error_is_added():
    # Noise-free repeats leave only the holdout's binomial error: at error rate p the 90%
    # interval is about p +- z_0.95 * sqrt(p (1 - p) / n_holdout) (binomial standard error of a
    # proportion; normal quantile from scipy.stats).
    from scipy.stats import norm

    n, err, rep = _cells(noise=0.0)
    band = bootstrap_curve(n, err, rep, np.array([160.0]), n_boot=4000, seed=0,
                           holdout_rows=100)
    p = power_law(160.0, 0.05, 2.0, 0.6)
    half = norm.ppf(0.95) * np.sqrt(p * (1 - p) / 100)
    assert band.high[0] - band.point[0] == pytest.approx(half, rel=0.1)
    assert band.point[0] - band.low[0] == pytest.approx(half, rel=0.1)
