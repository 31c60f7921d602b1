"""Calibration of the extrapolation, the small-sample factor, family weights and the
shrinkage against the winner's curse, each against an outside reference."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from semisup.plan import (
    BacktestRecord,
    Calibration,
    calibrate,
    calibrated_samples,
    ensemble_records,
    family_weights,
    paule_mandel,
    power_law,
    ratio_table,
    rolling_origin,
    shrink_toward_mean,
    small_sample_factor,
)
from semisup.study import StudyRecord


def test_paule_mandel_matches_statsmodels_random_effects():
    # With every u = 1 the model is the random-effects meta-analysis; statsmodels'
    # combine_effects(method_re="iterated") is the Paule-Mandel estimator (DerSimonian &
    # Kacker 2007, appendix 8): same tau^2, mean and standard error of the mean.
    from statsmodels.stats.meta_analysis import combine_effects

    rng = np.random.default_rng(0)
    for _ in range(5):
        v = rng.uniform(0.005, 0.03, 12)
        e = rng.normal(0.1, np.sqrt(v + 0.02))
        beta, se, kappa2, _ = paule_mandel(e, v)
        ref = combine_effects(e, v, method_re="iterated")
        assert kappa2 == pytest.approx(ref.tau2, rel=1e-6)
        assert beta == pytest.approx(ref.mean_effect_re, rel=1e-6)
        assert se == pytest.approx(ref.sd_eff_w_re, rel=1e-5)


def test_paule_mandel_is_zero_without_excess_spread():
    # Q below its degrees of freedom: no extra variance (DerSimonian & Kacker 2007).
    e = np.array([0.01, -0.01, 0.0, 0.005])
    assert paule_mandel(e, np.full(4, 1.0))[2] == 0.0


def _records(beta, kappa, n, seed):
    rng = np.random.default_rng(seed)
    ratio = rng.choice([1.5, 2.0, 3.0, 4.0], n)
    u = np.log2(ratio)
    sd = rng.uniform(0.005, 0.02, n)
    e = rng.normal(beta * u, np.sqrt(sd ** 2 + (kappa * u) ** 2))
    pred = rng.uniform(0.1, 0.3, n)
    return [BacktestRecord(100.0, 100.0 * r, p, s, p + ei, 0.0)
            for r, p, s, ei in zip(ratio, pred, sd, e, strict=True)]


def test_calibration_recovers_a_known_shift_and_spread():
    # Simulation from the model itself (known truth): 4,000 records give the shift and the
    # spread per doubling to within a few standard errors.
    cal = calibrate(_records(beta=0.01, kappa=0.015, n=4000, seed=1))
    assert cal.calibrated
    assert cal.shift_per_doubling == pytest.approx(0.01, abs=4 * cal.shift_se)
    assert cal.sd_per_doubling == pytest.approx(0.015, abs=0.002)


def test_calibrated_intervals_cover_new_records_at_their_level():
    # Fitted on one simulated set, judged on another from the same model: a stated 90%
    # normal interval should hold about 90% (binomial sd 0.7% at 2,000 records).
    cal = calibrate(_records(0.01, 0.02, 2000, seed=2))
    test = _records(0.01, 0.02, 2000, seed=3)
    z = stats.norm.ppf(0.95)
    hits = []
    for r in test:
        u = np.log2(r.ratio)
        sd = np.sqrt(r.sd ** 2 + (cal.sd_per_doubling ** 2 + cal.shift_se ** 2) * u ** 2)
        hits.append(abs(r.measured - r.predicted - cal.shift_per_doubling * u) <= z * sd)
    assert 0.87 <= np.mean(hits) <= 0.93
    table = ratio_table(test, cal, 0.9)
    assert sum(row["n"] for row in table) == len(test)


def test_too_few_records_fall_back_to_the_uncalibrated_widening():
    cal = calibrate(_records(0.0, 0.0, 3, seed=4))
    assert not cal.calibrated and "at least 5" in cal.reason
    grid = np.array([50.0, 100.0, 200.0, 400.0])
    point = np.full(4, 0.2)
    samples = point + np.array([[0.01], [-0.01]])
    _, out = calibrated_samples(point, samples, grid, 100.0, cal, np.random.default_rng(0))
    # 1 + log2(n / n_max): 1, 1, 2, 3 (hand values)
    np.testing.assert_allclose(out[0] - point, [0.01, 0.01, 0.02, 0.03])


def test_calibration_shifts_and_widens_only_beyond_the_largest_budget():
    cal = Calibration(0.01, 0.0, 0.02, 30, True)
    grid = np.array([50.0, 100.0, 200.0, 400.0])
    point = np.full(4, 0.2)
    samples = np.tile(point, (20000, 1))
    shifted, out = calibrated_samples(point, samples, grid, 100.0, cal,
                                      np.random.default_rng(0))
    np.testing.assert_allclose(shifted, [0.2, 0.2, 0.21, 0.22])
    np.testing.assert_allclose(out.std(axis=0), [0, 0, 0.02, 0.04], atol=1e-3)


def test_small_sample_factor_turns_the_bootstrap_band_of_a_mean_into_student_t():
    # Reference: the Student-t interval of a mean (scipy.stats.t). The percentile bootstrap
    # of the mean of R = 5 values, scaled by the factor, gives about the same half-width.
    rng = np.random.default_rng(0)
    x = rng.normal(0.8, 0.03, 5)
    boot = x[rng.integers(0, 5, size=(40000, 5))].mean(axis=1)
    half_boot = (np.percentile(boot, 95) - np.percentile(boot, 5)) / 2
    half_t = stats.t.ppf(0.95, 4) * x.std(ddof=1) / np.sqrt(5)
    assert small_sample_factor(5, 0.9) * half_boot == pytest.approx(half_t, rel=0.1)
    assert small_sample_factor(1, 0.9) == 1.0


def test_inverse_mse_weights_hand_values():
    # Bates & Granger (1969) inverse-MSE weights: MSEs 1e-4 and 4e-4 give 0.8 and 0.2.
    w, mse = family_weights({"power_law": np.array([1e-4, 1e-4]),
                             "exponential": np.array([4e-4, 4e-4])})
    assert w == pytest.approx({"power_law": 0.8, "exponential": 0.2})
    # Shrunk toward pooled errors with 4 pseudo-pairs: (2e-4 + 4 * 5e-4) / 6.
    w, mse = family_weights({"power_law": np.array([1e-4, 1e-4])},
                            {"power_law": (5e-4, 30)})
    assert mse["power_law"] == pytest.approx((2e-4 + 4 * 5e-4) / 6)


def test_rolling_origin_forecasts_every_later_budget_in_reach():
    budgets = np.array([10, 20, 40, 80, 160, 320.0])
    n = np.repeat(budgets, 3)
    rep = np.tile(np.arange(3), budgets.size)
    err = power_law(n, 0.05, 2.0, 0.6)
    origins = rolling_origin(n, err, rep, n_boot=10, seed=0)
    # origins 40 (3 budgets), 80 and 160; targets up to 5x: 40 -> 80, 160; 80 -> 160, 320;
    # 160 -> 320.
    assert [o.origin for o in origins] == [40, 80, 160]
    assert [list(o.targets) for o in origins] == [[80, 160], [160, 320], [320]]
    assert set(origins[0].points) == {"power_law", "exponential"}  # 3 budgets: 3-parameter
    assert set(origins[1].points) == {"power_law", "exponential", "mmf", "weibull"}
    # An exact power law is forecast exactly by the power law.
    for o in origins:
        np.testing.assert_allclose(o.points["power_law"], o.measured, atol=1e-5)


def test_james_stein_matches_efron_and_morris_baseball_example():
    # Efron & Morris (1975; 1977 Scientific American): 18 batting averages after 45 at bats,
    # sigma^2 = p(1-p)/45 at the grand mean; the shrinkage factor is 0.212 and Clemente's
    # .400 becomes .294, Alvis's .156 becomes .242 (published values, from memory).
    y = np.array([.400, .378, .356, .333, .311, .311, .289, .267, .244, .244, .222, .222,
                  .222, .222, .222, .200, .178, .156])
    p = y.mean()
    shrunk, factor, _ = shrink_toward_mean(y, np.full(y.size, p * (1 - p) / 45))
    assert factor[0] == pytest.approx(0.212, abs=0.001)
    assert shrunk[0] == pytest.approx(0.294, abs=0.001)
    assert shrunk[-1] == pytest.approx(0.242, abs=0.001)


def test_james_stein_floor_only_raises_the_between_method_variance():
    # Efron & Morris (1975) batting averages again (values above): their own estimate of the
    # between-player variance is kept when it exceeds the floor, and replaced by the floor
    # when it does not (factor = floor / (floor + variance), the James-Stein form).
    y = np.array([.400, .378, .356, .333, .311, .311, .289, .267, .244, .244, .222, .222,
                  .222, .222, .222, .200, .178, .156])
    p = y.mean()
    var = np.full(y.size, p * (1 - p) / 45)
    _, factor, tau2 = shrink_toward_mean(y, var)
    _, same, _ = shrink_toward_mean(y, var, tau2_floor=tau2 / 2)
    np.testing.assert_allclose(same, factor)
    floor = 4 * tau2
    _, raised, tau2_used = shrink_toward_mean(y, var, tau2_floor=floor)
    assert tau2_used == floor
    np.testing.assert_allclose(raised, floor / (floor + var))


def test_james_stein_needs_four_methods():
    shrunk, factor, _ = shrink_toward_mean(np.array([0.8, 0.7, 0.9]), np.full(3, 0.01))
    np.testing.assert_allclose(shrunk, [0.8, 0.7, 0.9])


@pytest.mark.parametrize("evaluation, expected", [
    ({"protocol": "cross-fit", "folds": 5, "n_rows_evaluated": 200,
      "per_repeat": [{}] * 5}, None),
    ({"protocol": "cross-fit", "folds": 5, "n_rows_evaluated": 200,
      "per_repeat": [{}] * 10}, 200 * 9 / 5),
    ({"protocol": "holdout", "folds": 1, "n_eval_min": 60}, 60),
    ({"protocol": "test-file", "folds": 1, "n_eval_min": 300}, 300),
])
def test_shared_evaluation_rows_per_protocol(evaluation, expected):
    # Cross-fitting with at most one repeat per fold shares no evaluation rows; with R > K
    # repeats the shared variance p(1-p)/n * (R-K)/(R-1) is the study's own formula (hand
    # values); a holdout or a test file is shared by every repeat.
    facts = StudyRecord.from_dict({"evaluation": evaluation})
    assert facts.shared_eval_rows == (pytest.approx(expected) if expected else None)


def test_record_weight_halves_per_doubling_below_half_the_largest_budget():
    # Hand values of the rule (our own rule, common practice, no source).
    rec = [BacktestRecord(o, 2 * o, 0.2, 0.01, 0.2, 0.0, 160.0) for o in (80, 40, 20, 10)]
    assert [r.weight for r in rec] == [1.0, 0.5, 0.25, 0.125]
    assert BacktestRecord(20, 40, 0.2, 0.01, 0.2, 0.0).weight == 1.0  # largest unknown


def test_weighted_paule_mandel_is_paule_mandel_on_replicated_records():
    # Frequency weights: a record of weight 2 is two copies of it. Reference: statsmodels'
    # combine_effects(method_re="iterated") (Paule-Mandel) on the replicated records.
    from statsmodels.stats.meta_analysis import combine_effects

    rng = np.random.default_rng(5)
    for _ in range(5):
        v = rng.uniform(0.005, 0.03, 10)
        e = rng.normal(0.05, np.sqrt(v + 0.02))
        a = rng.integers(1, 4, 10)
        beta, se, kappa2, _ = paule_mandel(e, v, a=a.astype(float))
        ref = combine_effects(np.repeat(e, a), np.repeat(v, a), method_re="iterated")
        assert kappa2 == pytest.approx(ref.tau2, rel=1e-6)
        assert beta == pytest.approx(ref.mean_effect_re, rel=1e-6)
        assert se == pytest.approx(ref.sd_eff_w_re, rel=1e-5)


def test_weighted_shift_is_the_statsmodels_wls_slope_at_the_fitted_spread():
    # Reference: statsmodels WLS through the origin with weights a / (v + kappa^2 u^2); the
    # fitted kappa^2 solves the weighted Q equation sum a w r^2 = sum a - 1.
    import statsmodels.api as sm

    rng = np.random.default_rng(6)
    u = np.log2(rng.choice([1.5, 2.0, 3.0, 4.0], 40))
    v = rng.uniform(1e-4, 4e-4, 40)
    e = rng.normal(0.01 * u, np.sqrt(v + (0.02 * u) ** 2))
    a = rng.choice([0.25, 0.5, 1.0], 40)
    beta, se, kappa2, _ = paule_mandel(e, v, u, a=a)
    assert kappa2 > 0
    w = a / (v + kappa2 * u * u)
    fit = sm.WLS(e, u[:, None], weights=w).fit()
    assert beta == pytest.approx(fit.params[0], rel=1e-8)
    assert np.sum(w * (e - beta * u) ** 2) == pytest.approx(a.sum() - 1, rel=1e-6)
    assert se == pytest.approx(np.sqrt(1 / np.sum(w * u * u)), rel=1e-8)


def test_calibration_leans_on_backtests_from_near_the_largest_budget():
    # The steep part of the curve (origins 20 and 40 of 160) was forecast 0.03 too
    # pessimistically per doubling, the top (origin 80) exactly. With one ratio (u = 1) and
    # equal variances the shift is the weighted mean of the errors whatever the spread:
    # (0.25 * 0.03 + 0.5 * 0.03 + 1 * 0) / 1.75 (hand value); unweighted it would be 0.02.
    recs = [BacktestRecord(o, 2 * o, 0.2, 0.01, 0.2 + err, 0.0, 160.0)
            for o, err in ((20, 0.03), (40, 0.03), (80, 0.0)) for _ in range(4)]
    cal = calibrate(recs)
    assert cal.shift_per_doubling == pytest.approx(0.0225 / 1.75, rel=1e-9)
    assert cal.to_dict()["weighted_backtests"] == pytest.approx(7.0)
    flat = calibrate([BacktestRecord(r.origin, r.n_labels, r.predicted, r.sd, r.measured,
                                     r.measured_se) for r in recs])
    assert flat.shift_per_doubling == pytest.approx(0.02, rel=1e-9)


def test_rolling_origin_records_carry_the_weight_of_their_origin():
    # Doubling budgets 10..320: origins 40, 80, 160 of a curve whose largest budget is 320
    # weigh 0.25, 0.5 and 1 (hand values of the rule above).
    budgets = np.array([10, 20, 40, 80, 160, 320.0])
    n = np.repeat(budgets, 3)
    rep = np.tile(np.arange(3), budgets.size)
    err = power_law(n, 0.05, 2.0, 0.6) + np.tile([0.002, -0.001, 0.0], budgets.size)
    origins = rolling_origin(n, err, rep, n_boot=10, seed=0)
    recs = ensemble_records(origins, {"power_law": 1.0}, largest=320.0)
    assert {r.origin: r.weight for r in recs} == {40: 0.25, 80: 0.5, 160: 1.0}
