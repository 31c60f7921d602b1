"""Holdout metrics and intervals against statsmodels, scikit-learn and a published table."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import balanced_accuracy_score, f1_score, log_loss, recall_score
from statsmodels.stats.proportion import proportion_confint

from semisup.study import holdout_metrics, summarize_curves, wilson_interval


def test_wilson_matches_newcombe_1998_table_1():
    # Newcombe (1998), Statistics in Medicine 17:857-872, Table I, method 3 (score interval
    # without continuity correction): 81/263 -> 0.2553 to 0.3662.
    low, high = wilson_interval(81, 263)
    assert round(low, 4) == 0.2553
    assert round(high, 4) == 0.3662


@settings(max_examples=80, deadline=None)
@given(n=st.integers(1, 5000), frac=st.floats(0, 1))
def test_wilson_matches_statsmodels(n, frac):
    k = int(round(frac * n))
    low, high = wilson_interval(k, n)
    # statsmodels.stats.proportion.proportion_confint(method="wilson") is the reference.
    ref_low, ref_high = proportion_confint(k, n, alpha=0.05, method="wilson")
    assert low == pytest.approx(ref_low, abs=1e-9)
    assert high == pytest.approx(ref_high, abs=1e-9)


@pytest.mark.filterwarnings("ignore:y_pred contains classes not in y_true")
def test_holdout_metrics_match_scikit_learn():
    rng = np.random.default_rng(3)
    n_classes = 4
    y = rng.integers(0, 3, 60)  # class 3 never appears in the holdout
    proba = rng.dirichlet(np.ones(n_classes), size=60)
    m = holdout_metrics(y, proba, n_classes)
    pred = proba.argmax(axis=1)
    # scikit-learn's metric functions are the reference.
    assert m["accuracy"] == pytest.approx(np.mean(pred == y))
    assert m["balanced_accuracy"] == pytest.approx(balanced_accuracy_score(y, pred))
    assert m["macro_f1"] == pytest.approx(
        f1_score(y, pred, labels=[0, 1, 2], average="macro", zero_division=0))
    assert m["log_loss"] == pytest.approx(log_loss(y, proba, labels=[0, 1, 2, 3]))
    rec = recall_score(y, pred, labels=[0, 1, 2], average=None, zero_division=0)
    assert [m["per_class_recall"][c] for c in range(3)] == pytest.approx(list(rec))
    ref = proportion_confint(int((pred == y).sum()), 60, method="wilson")
    assert (m["accuracy_low"], m["accuracy_high"]) == pytest.approx(ref)


def test_log_loss_is_finite_when_a_true_class_gets_zero_probability():
    y = np.array([0, 1, 2])
    proba = np.array([[1.0, 0, 0], [1.0, 0, 0], [0, 0, 1.0]])
    m = holdout_metrics(y, proba, 3)
    # clipped at 1e-15 (scikit-learn's former default eps): -log(1e-15)/3 ~ 11.5
    assert np.isfinite(m["log_loss"])
    assert m["log_loss"] == pytest.approx(-np.log(1e-15) / 3, rel=1e-6)


def test_curves_interval_is_student_t_of_the_repeats():
    from scipy import stats

    vals = [0.70, 0.74, 0.71, 0.80, 0.77]
    cells = pd.DataFrame({
        "method": "m", "strategy": "random", "n_labels": 20, "repeat": range(5),
        "status": "ok", "accuracy": vals, "balanced_accuracy": vals, "macro_f1": vals,
        "log_loss": vals,
    })
    curves = summarize_curves(cells, ("accuracy",))
    row = curves.iloc[0]
    # scipy.stats.t.interval is the reference for a t interval of a mean.
    low, high = stats.t.interval(0.95, 4, loc=np.mean(vals), scale=stats.sem(vals))
    assert row["mean"] == pytest.approx(np.mean(vals))
    assert (row["low"], row["high"]) == pytest.approx((low, high))
    assert bool(row["measured"]) is True
    assert list(curves.columns[:8]) == ["method", "strategy", "metric", "n_labels", "mean",
                                        "low", "high", "measured"]
