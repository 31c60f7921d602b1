"""Row selection strategies: random, representative, uncertainty, acquisition orders."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from semisup import ConfigError
from semisup.selection import acquisition_order, margins, select_rows


def _blobs(seed=0):
    from sklearn.datasets import make_blobs

    return make_blobs(n_samples=300, centers=4, n_features=3, cluster_std=0.5,
                      random_state=seed)


def test_random_is_uniform_and_seeded():
    Z = np.zeros((50, 2))
    a = select_rows("random", Z, 10, seed=1, exclude=[0, 1, 2])
    b = select_rows("random", Z, 10, seed=1, exclude=[0, 1, 2])
    assert np.array_equal(a.indices, b.indices) and len(set(a.indices)) == 10
    assert not set(a.indices) & {0, 1, 2}
    counts = np.zeros(50)
    for s in range(2000):
        counts[select_rows("random", Z, 5, seed=s).indices] += 1
    # chi-square goodness of fit to uniform (scipy.stats.chisquare as reference)
    from scipy.stats import chisquare

    assert chisquare(counts).pvalue > 1e-4


def test_representative_takes_one_row_near_each_blob_centre():
    Z, blob = _blobs()
    sel = select_rows("representative", Z, 4, seed=0)
    # scikit-learn's make_blobs is the reference: one row per generated blob
    assert sorted(blob[sel.indices]) == [0, 1, 2, 3]
    assert all(r.startswith("cluster ") and r.endswith("rank 0") for r in sel.reasons)
    # each chosen row is the nearest to its k-means centre (scikit-learn KMeans, same seed)
    from sklearn.cluster import KMeans

    km = KMeans(n_clusters=4, n_init=3, random_state=0).fit(Z)
    d = np.linalg.norm(Z - km.cluster_centers_[km.labels_], axis=1)
    for i in sel.indices:
        members = np.flatnonzero(km.labels_ == km.labels_[i])
        assert d[i] == pytest.approx(d[members].min())


def test_uncertainty_picks_smallest_margins():
    proba = np.array([[0.9, 0.1], [0.52, 0.48], [0.7, 0.3], [0.5, 0.5], [0.6, 0.4]])
    sel = select_rows("uncertainty", np.zeros((5, 1)), 2, seed=0, proba=proba)
    assert sorted(sel.indices.tolist()) == [1, 3]
    assert sel.reasons[0] == "margin 0.00"
    assert margins(proba) == pytest.approx([0.8, 0.04, 0.4, 0.0, 0.2])
    with pytest.raises(ConfigError, match="needs proba"):
        select_rows("uncertainty", np.zeros((5, 1)), 2, seed=0)
    with pytest.raises(ConfigError, match="allowed: random, representative, uncertainty"):
        select_rows("best", np.zeros((5, 1)), 2, seed=0)


@settings(max_examples=6, deadline=None)
@given(strategy=st.sampled_from(["random", "representative", "uncertainty"]),
       seed=st.integers(0, 1000))
def test_acquisition_orders_are_nested_unique_and_deterministic(strategy, seed):
    Z, y = _blobs(seed % 7)
    budgets = [8, 20, 45]
    order, reasons = acquisition_order(strategy, Z, y, budgets, seed=seed)
    again, _ = acquisition_order(strategy, Z, y, budgets, seed=seed)
    assert np.array_equal(order, again)
    assert len(order) == 45 == len(reasons) and len(set(order.tolist())) == 45
    if strategy != "representative":
        assert len(np.unique(y[order[:8]])) == 4  # first batch stratified: every class


def test_uncertainty_grows_toward_the_boundary():
    Z, y = _blobs(0)
    y2 = (y >= 2).astype(int)
    order, reasons = acquisition_order("uncertainty", Z, y2, [6, 30], seed=0)
    rand, _ = acquisition_order("random", Z, y2, [6, 30], seed=0)
    assert np.array_equal(order[:6], rand[:6])  # starts from the stratified draw
    assert reasons[6].startswith("margin ")
    # the added rows have smaller margins (under a logistic regression on the first 6) than
    # the random draw's rows (scikit-learn LogisticRegression as the reference model)
    from sklearn.linear_model import LogisticRegression

    p = LogisticRegression().fit(Z[order[:6]], y2[order[:6]]).predict_proba(Z)
    assert margins(p[order[6:]]).mean() < margins(p[rand[6:]]).mean()
