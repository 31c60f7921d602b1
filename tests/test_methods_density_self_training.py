"""Density-aware self-training around gradient-boosted trees, against scikit-learn.

References: scikit-learn's SelfTrainingClassifier (threshold criterion) around the same
HistGradientBoostingClassifier, which the method must equal with the density term off;
scikit-learn's GaussianMixture.score_samples for the density score; data: scikit-learn's
bundled digits.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_digits
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.mixture import GaussianMixture
from sklearn.semi_supervised import SelfTrainingClassifier
from threadpoolctl import threadpool_limits

from semisup.methods._density_self_training import DensitySelfTrainingGBT


@pytest.fixture(autouse=True)
def _one_thread():
    with threadpool_limits(limits=1):
        yield


def _digits(n=600, per_class=5, seed=0):
    X, y = load_digits(return_X_y=True)
    X, y = X[:n], y[:n]
    rng = np.random.default_rng(seed)
    y_partial = np.full_like(y, -1)
    for c in range(10):
        y_partial[rng.choice(np.flatnonzero(y == c), per_class, replace=False)] = c
    return X, y, y_partial


def test_without_the_density_term_it_is_sklearn_self_training():
    # Source: scikit-learn SelfTrainingClassifier(threshold) around the same trees.
    X, _, y_partial = _digits()
    ours = DensitySelfTrainingGBT(max_iter=15, density_power=0.0, unlabeled_weight=1.0,
                                  threshold=0.6, rounds=3, random_state=0).fit(X, y_partial)
    trees = HistGradientBoostingClassifier(max_iter=15, max_leaf_nodes=15, min_samples_leaf=5,
                                           early_stopping=False, random_state=0)
    ref = SelfTrainingClassifier(trees, threshold=0.6, max_iter=3).fit(X, y_partial)
    assert ours.pseudo_labeled_ == int((ref.labeled_iter_ > 0).sum())
    np.testing.assert_allclose(ours.predict_proba(X), ref.predict_proba(X), atol=1e-12)


def test_density_score_is_the_mixture_likelihood_rank_and_low_density_counts_less():
    # Source: scikit-learn GaussianMixture(diag).score_samples with the same settings.
    X, _, y_partial = _digits()
    est = DensitySelfTrainingGBT(max_iter=15, n_components=3, rounds=2, threshold=0.5,
                                 random_state=0).fit(X, y_partial)
    gm = GaussianMixture(3, covariance_type="diag", reg_covar=1e-3, random_state=0).fit(X)
    log_p = gm.score_samples(X)
    expected = np.array([np.mean(log_p <= v) for v in log_p])
    np.testing.assert_allclose(est.density_score_, expected)
    # With the density term on, fewer rows pass the same threshold than without it.
    plain = DensitySelfTrainingGBT(max_iter=15, n_components=3, rounds=2, threshold=0.5,
                                   density_power=0.0, random_state=0).fit(X, y_partial)
    assert est.pseudo_labeled_ < plain.pseudo_labeled_


def test_a_density_floor_keeps_pseudo_labels_above_the_median_row():
    # Source: scikit-learn's GaussianMixture.score_samples (same settings as the method) for
    # the rows' log-likelihoods; with min_density=0.5 every adopted row lies above its median.
    X, _, y_partial = _digits(per_class=10)
    m = DensitySelfTrainingGBT(threshold=0.5, density_power=0.0, min_density=0.5,
                               random_state=0).fit(X, y_partial)
    gm = GaussianMixture(5, covariance_type="diag", reg_covar=1e-3, random_state=0).fit(X)
    loglik = gm.score_samples(X)
    assert m.pseudo_labeled_ > 0
    assert np.all(loglik[m.adopted_] > np.median(loglik))
    free = DensitySelfTrainingGBT(threshold=0.5, density_power=0.0, random_state=0)
    assert np.any(loglik[free.fit(X, y_partial).adopted_] <= np.median(loglik))
