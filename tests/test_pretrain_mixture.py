"""MixtureTransformer checked against scikit-learn's GaussianMixture and scipy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import multivariate_normal
from sklearn.datasets import make_blobs
from sklearn.mixture import GaussianMixture

from semisup import ConfigError
from semisup.pretrain import MixtureTransformer, component_log_densities


def _blobs(n: int = 600, centers: int = 3, seed: int = 0) -> np.ndarray:
    X, _ = make_blobs(
        n_samples=n,
        centers=centers,
        n_features=4,
        cluster_std=1.0,
        center_box=(-20, 20),
        random_state=seed,
    )
    return X


@pytest.mark.parametrize("covariance_type", ["full", "tied", "diag", "spherical"])
def test_fixed_mixture_equals_sklearn_gaussian_mixture(covariance_type):
    X = _blobs()
    ours = MixtureTransformer(n_components=3, covariance_type=covariance_type, random_state=5).fit(
        X
    )
    # Reference: scikit-learn's GaussianMixture with the same data, settings and seed.
    ref = GaussianMixture(3, covariance_type=covariance_type, random_state=5).fit(X)
    assert ours.score(X) == pytest.approx(ref.score(X), rel=1e-10, abs=1e-10)
    np.testing.assert_allclose(ours.score_samples(X), ref.score_samples(X), rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(ours.transform(X), ref.predict_proba(X), atol=1e-9)


@pytest.mark.parametrize("covariance_type", ["full", "tied", "diag", "spherical"])
def test_component_log_densities_match_scipy(covariance_type):
    X = _blobs(n=200)
    gm = GaussianMixture(3, covariance_type=covariance_type, random_state=0).fit(X)
    got = component_log_densities(X, gm.means_, gm.precisions_cholesky_, covariance_type)
    covs = {
        "full": lambda j: gm.covariances_[j],
        "tied": lambda j: gm.covariances_,
        "diag": lambda j: np.diag(gm.covariances_[j]),
        "spherical": lambda j: np.eye(X.shape[1]) * gm.covariances_[j],
    }[covariance_type]
    for j in range(3):
        # Reference: scipy.stats.multivariate_normal.logpdf.
        expected = multivariate_normal(gm.means_[j], covs(j)).logpdf(X)
        np.testing.assert_allclose(got[:, j], expected, rtol=1e-8)


@pytest.mark.parametrize("true_count", [2, 4])
def test_bic_picks_the_true_count_on_separated_clusters(true_count):
    X = _blobs(n=800, centers=true_count, seed=true_count)
    # Well-separated spherical blobs (scikit-learn's make_blobs): BIC (Schwarz 1978) should
    # recover the generating count, as in scikit-learn's "GMM model selection" example.
    mixture = MixtureTransformer(n_components_grid=(1, 2, 3, 4, 5, 6), random_state=0).fit(X)
    assert mixture.n_components_ == true_count
    assert len(mixture.selection_) == 12  # 6 counts x 2 covariance types
    chosen = min(mixture.selection_, key=lambda row: row["bic"])
    assert chosen["n_components"] == true_count


def test_large_data_selects_on_a_subsample_then_fits_all_rows():
    X = _blobs(n=3000, centers=3, seed=1)
    mixture = MixtureTransformer(max_selection_rows=500, random_state=0).fit(X)
    assert mixture.diagnostics_["selection_rows"] == 500
    assert mixture.n_components_ == 3
    # Reference: scikit-learn's GaussianMixture fitted on all rows directly; the warm-started
    # refit should reach the same optimum on these well-separated clusters.
    ref = GaussianMixture(3, covariance_type=mixture.covariance_type_, random_state=0).fit(X)
    assert mixture.score(X) == pytest.approx(ref.score(X), abs=1e-3)


def test_features_and_chunked_transform():
    X = _blobs(n=500)
    both = MixtureTransformer(
        n_components=3, covariance_type="full", features="both", chunk_rows=64
    ).fit(X)
    out = both.transform(X)
    assert out.shape == (500, 6)
    np.testing.assert_allclose(out[:, :3].sum(axis=1), 1.0)
    dens = (
        MixtureTransformer(
            n_components=3, covariance_type="full", features="logdensity", chunk_rows=10**6
        )
        .fit(X)
        .transform(X)
    )
    np.testing.assert_allclose(out[:, 3:], dens, rtol=1e-12)
    assert list(both.get_feature_names_out()[:2]) == ["mixture_posterior0", "mixture_posterior1"]


def test_bad_parameters_are_clear_errors():
    X = _blobs(n=50)
    with pytest.raises(ConfigError, match="features='pixels'"):
        MixtureTransformer(features="pixels").fit(X)
    with pytest.raises(ConfigError, match="'round'"):
        MixtureTransformer(covariance_type="round").fit(X)
    with pytest.raises(ConfigError, match="n_components=80 is more than the 50 rows"):
        MixtureTransformer(n_components=80).fit(X)
