"""Semi-supervised Gaussian-mixture EM against references outside the project.

References: scikit-learn's QuadraticDiscriminantAnalysis, LinearDiscriminantAnalysis,
GaussianMixture and LogisticRegression; scipy.stats.multivariate_normal; the monotone-objective
property of EM (Dempster, Laird & Rubin 1977).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, reject, settings
from hypothesis import strategies as st
from scipy.special import logsumexp
from scipy.stats import multivariate_normal
from sklearn.discriminant_analysis import (
    LinearDiscriminantAnalysis,
    QuadraticDiscriminantAnalysis,
)
from sklearn.exceptions import ConvergenceWarning
from sklearn.linear_model import LogisticRegression
from sklearn.mixture import GaussianMixture
from threadpoolctl import threadpool_limits

from semisup import ConfigError, FitWarning
from semisup.methods import MixtureEMClassifier
from semisup.methods._gmm_math import run_em


@pytest.fixture(autouse=True)
def _one_thread():
    with threadpool_limits(limits=1):
        yield


def _three_gaussians(n_per_class=60, d=3, seed=0):
    rng = np.random.default_rng(seed)
    X, y = [], []
    for c in range(3):
        A = np.eye(d) + 0.3 * rng.normal(size=(d, d))  # well conditioned
        X.append(rng.normal(size=(n_per_class + 10 * c, d)) @ A + 4.0 * rng.normal(size=d))
        y.append(np.full(n_per_class + 10 * c, c))
    return np.vstack(X), np.concatenate(y)


def test_all_labeled_full_matches_qda():
    # Source: scikit-learn QuadraticDiscriminantAnalysis(store_covariance=True, reg_param=0);
    # its covariance_ is the class's maximum-likelihood covariance (V S^2 V^T / n_c).
    X, y = _three_gaussians()
    em = MixtureEMClassifier(covariance_type="full", reg_covar=0.0).fit(X, y)
    qda = QuadraticDiscriminantAnalysis(store_covariance=True, reg_param=0.0).fit(X, y)
    np.testing.assert_allclose(em.means_, qda.means_, rtol=0, atol=1e-6)
    np.testing.assert_allclose(em.covariances_, np.asarray(qda.covariance_), rtol=0, atol=1e-6)
    np.testing.assert_allclose(em.weights_, qda.priors_, rtol=0, atol=1e-12)


def test_all_labeled_tied_matches_lda():
    # Source: scikit-learn LinearDiscriminantAnalysis(store_covariance=True): covariance_ is
    # the prior-weighted sum of the classes' maximum-likelihood covariances, the tied MLE.
    X, y = _three_gaussians(seed=1)
    em = MixtureEMClassifier(covariance_type="tied", reg_covar=0.0).fit(X, y)
    lda = LinearDiscriminantAnalysis(solver="lsqr", store_covariance=True).fit(X, y)
    np.testing.assert_allclose(em.means_, lda.means_, rtol=0, atol=1e-6)
    np.testing.assert_allclose(em.covariances_, lda.covariance_, rtol=0, atol=1e-6)


def _qda_proba(X_lab, y_lab, X_new):
    """Bayes rule with QDA's fitted priors, means and covariances (scipy densities)."""
    qda = QuadraticDiscriminantAnalysis(store_covariance=True, reg_param=0.0).fit(X_lab, y_lab)
    logp = np.column_stack([
        np.log(qda.priors_[c]) + multivariate_normal(qda.means_[c], qda.covariance_[c])
        .logpdf(X_new)
        for c in range(len(qda.classes_))
    ])
    np.testing.assert_allclose(  # the same as QDA's own answer
        np.exp(logp - logsumexp(logp, axis=1, keepdims=True)), qda.predict_proba(X_new),
        rtol=0, atol=1e-6)
    logp -= logp.max(axis=1, keepdims=True)
    p = np.exp(logp)
    return p / p.sum(axis=1, keepdims=True)


def test_lambda_zero_is_the_supervised_gaussian_classifier():
    # Source: scikit-learn QDA's predict_proba (checked against its means, priors and
    # covariances through scipy.stats.multivariate_normal).
    X, y = _three_gaussians(seed=2)
    rng = np.random.default_rng(3)
    y_partial = y.copy()
    hidden = rng.random(y.size) < 0.6
    y_partial[hidden] = -1
    em = MixtureEMClassifier(unlabeled_weight=0.0, covariance_type="full", reg_covar=0.0)
    em.fit(X, y_partial)
    expected = _qda_proba(X[~hidden], y[~hidden], X)
    np.testing.assert_allclose(em.predict_proba(X), expected, rtol=0, atol=1e-6)
    # and the unlabeled rows changed nothing: same fit as on the labeled rows alone
    alone = MixtureEMClassifier(covariance_type="full", reg_covar=0.0).fit(X[~hidden],
                                                                              y[~hidden])
    np.testing.assert_allclose(em.means_, alone.means_, rtol=0, atol=1e-12)
    np.testing.assert_allclose(em.covariances_, alone.covariances_, rtol=0, atol=1e-12)


@pytest.mark.parametrize("covariance_type", ["full", "tied", "diag", "spherical"])
def test_no_labels_lambda_one_follows_gaussian_mixture(covariance_type):
    # Source: scikit-learn GaussianMixture from the same initial parameters, stepped one EM
    # iteration at a time (max_iter=1, warm_start=True); lower_bound_ after call t is the mean
    # log-likelihood before that call's M-step, which is what run_em records as history[t].
    rng = np.random.default_rng(4)
    X = np.vstack([rng.normal(size=(80, 2)) + [0, 0], rng.normal(size=(70, 2)) + [3, 1],
                   rng.normal(size=(60, 2)) * 0.7 + [0, 4]])
    K, n_steps, reg = 3, 12, 1e-6
    weights = np.array([0.2, 0.3, 0.5])
    means = X[[5, 100, 190]] + 0.3
    if covariance_type == "full":
        covs = np.stack([np.eye(2) * s for s in (1.0, 1.5, 0.8)])
        precisions = np.linalg.inv(covs)
    elif covariance_type == "tied":
        covs = np.array([[1.2, 0.3], [0.3, 0.9]])
        precisions = np.linalg.inv(covs)
    elif covariance_type == "diag":
        covs = np.array([[1.0, 2.0], [0.5, 1.0], [1.0, 1.0]])
        precisions = 1.0 / covs
    else:
        covs = np.array([1.0, 2.0, 0.5])
        precisions = 1.0 / covs
    ours = run_em(X, np.full(len(X), -1), np.arange(K), np.ones(len(X)), weights, means, covs,
                  covariance_type=covariance_type, reg_covar=reg, tol=0.0, max_iter=n_steps)
    gm = GaussianMixture(K, covariance_type=covariance_type, reg_covar=reg, max_iter=1,
                         warm_start=True, weights_init=weights, means_init=means,
                         precisions_init=precisions, random_state=0)
    reference = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        for _ in range(n_steps):
            gm.fit(X)
            reference.append(gm.lower_bound_)
    np.testing.assert_allclose(ours.history, reference, rtol=0, atol=1e-6)
    np.testing.assert_allclose(ours.means, gm.means_, rtol=0, atol=1e-6)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 2**31 - 1),
    n_classes=st.integers(2, 3),
    per_class=st.integers(1, 2),
    covariance_type=st.sampled_from(["full", "tied", "diag", "spherical"]),
    lam=st.floats(0.05, 1.0),
    frac_labeled=st.floats(0.05, 0.5),
)
def test_objective_never_decreases(seed, n_classes, per_class, covariance_type, lam,
                                   frac_labeled):
    # Source: Dempster, Laird & Rubin (1977): each EM iteration cannot lower the (here
    # lambda-weighted) log-likelihood. Checked with reg_covar = 0, where the M-step is the
    # exact maximiser; draws where a component collapses onto too few rows (a singular
    # covariance, the likelihood is unbounded there) are rejected, not counted.
    rng = np.random.default_rng(seed)
    n, d = 100, 2
    X = rng.normal(size=(n, d)) * rng.uniform(0.5, 2.0, size=d) + rng.normal(0, 2, size=(n, 1))
    y = rng.integers(0, n_classes, size=n)
    y[:n_classes] = np.arange(n_classes)  # every class labeled at least once
    unl = rng.random(n) > frac_labeled
    unl[:n_classes] = False
    y_code = np.where(unl, -1, y)
    component_class = np.repeat(np.arange(n_classes), per_class)
    K = component_class.size
    weights = np.full(K, 1.0 / K)
    means = X[rng.choice(n, size=K, replace=False)]
    var = X.var(axis=0)
    covs = {"full": np.repeat(np.diag(var)[None], K, 0), "tied": np.diag(var),
            "diag": np.repeat(var[None], K, 0), "spherical": np.full(K, var.mean())}
    try:
        result = run_em(X, y_code, component_class, np.where(unl, lam, 1.0), weights, means,
                        covs[covariance_type], covariance_type=covariance_type, reg_covar=0.0,
                        tol=0.0, max_iter=30)
    except np.linalg.LinAlgError:
        reject()
    cov = np.asarray(result.covariances)
    smallest = (np.linalg.eigvalsh(cov).min() if covariance_type in ("full", "tied")
                else cov.min())
    if smallest < 1e-8 * var.min():
        # A component shrank onto a single labeled row: the likelihood is unbounded there
        # and float64 breaks down (seen with spherical, one labeled row in a class).
        reject()
    history = np.array(result.history)
    assert np.all(np.diff(history) >= -1e-9 * np.maximum(1.0, np.abs(history[:-1])))


def _xor_clusters(n_per_cluster=100, seed=0):
    """Two tight clusters per class at opposite corners of a square (an XOR layout).

    No line separates the classes, so a linear classifier from the four labelled points is
    no better than a coin flip, while each cluster is one Gaussian that EM can recover.
    """
    rng = np.random.default_rng(seed)
    centres = np.array([[-4.0, -4.0], [4.0, 4.0], [-4.0, 4.0], [4.0, -4.0]])
    labels = np.array([0, 0, 1, 1])
    X = np.vstack([c + 0.8 * rng.normal(size=(n_per_cluster, 2)) for c in centres])
    y = np.repeat(labels, n_per_cluster)
    first_of_cluster = np.arange(4) * n_per_cluster  # one labeled row per cluster
    return X, y, first_of_cluster


def test_em_beats_logistic_regression_on_two_clusters_per_class():
    # Source: scikit-learn LogisticRegression on the same four labels (the supervised
    # reference); the data layout makes a linear boundary fail for a known reason (XOR).
    X, y, labeled = _xor_clusters()
    y_partial = np.full_like(y, -1)
    y_partial[labeled] = y[labeled]
    em = MixtureEMClassifier(n_components_per_class=2, covariance_type="full", n_init=3,
                             random_state=0).fit(X, y_partial)
    em_acc = float(np.mean(em.predict(X) == y))
    lr_acc = float(np.mean(LogisticRegression().fit(X[labeled], y[labeled]).predict(X) == y))
    assert em_acc >= 0.95
    assert lr_acc < 0.95


def test_attributes_and_convergence_warning():
    # Source: scikit-learn's GaussianMixture attribute conventions (n_iter_, lower_bound_,
    # converged_) and its warning when max_iter is reached.
    X, y = _three_gaussians(seed=5)
    y_partial = np.where(np.arange(y.size) % 5 == 0, y, -1)
    em = MixtureEMClassifier(n_components_per_class=2, n_init=2, random_state=0)
    em.fit(X, y_partial)
    assert em.converged_ and 1 <= em.n_iter_ <= em.max_iter
    assert np.isfinite(em.lower_bound_)
    assert em.means_.shape == (6, 3) and em.component_class_.tolist() == [0, 0, 1, 1, 2, 2]
    with pytest.warns(FitWarning, match="max_iter"):
        MixtureEMClassifier(max_iter=1, tol=0.0).fit(X, y_partial)


def test_restarts_keep_the_best_objective():
    # Source: scikit-learn GaussianMixture's n_init semantics (best lower bound kept).
    X, y, labeled = _xor_clusters(seed=3)
    y_partial = np.full_like(y, -1)
    y_partial[labeled[[0, 2]]] = y[labeled[[0, 2]]]  # one label per class only
    bounds = [MixtureEMClassifier(n_components_per_class=2, n_init=1, random_state=s)
              .fit(X, y_partial).lower_bound_ for s in range(4)]
    best = MixtureEMClassifier(n_components_per_class=2, n_init=4, random_state=0)
    assert best.fit(X, y_partial).lower_bound_ >= max(bounds[:1]) - 1e-12


@pytest.mark.parametrize(
    "param, value",
    [("unlabeled_weight", 1.5), ("covariance_type", "round"), ("n_components_per_class", 0),
     ("reg_covar", -1.0)],
)
def test_bad_parameters_name_the_parameter(param, value):
    X, y = _three_gaussians(n_per_class=10)
    with pytest.raises(ConfigError, match=param):
        MixtureEMClassifier(**{param: value}).fit(X, y)
