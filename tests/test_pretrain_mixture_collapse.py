"""Mixture selection survives a candidate whose component collapses."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.mixture import GaussianMixture

from semisup import DataError
from semisup.pretrain import MixtureTransformer


def _table_with_binary_columns(seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    dense = np.concatenate([rng.normal(-4, 1, (150, 2)), rng.normal(4, 1, (150, 2))])
    flags = (rng.random((300, 6)) < 0.02).astype(float)  # rare 0/1 indicators, as one-hot gives
    return np.hstack([dense, flags])


def test_collapsed_candidate_is_skipped_and_recorded():
    X = _table_with_binary_columns()
    # scikit-learn's GaussianMixture is the reference: with full covariances and no ridge,
    # some component collapses onto rows that share a rare 0/1 pattern and the fit refuses.
    failures = 0
    for k in (4, 6, 8):
        try:
            GaussianMixture(k, covariance_type="full", reg_covar=0.0, random_state=0).fit(X)
        except ValueError:
            failures += 1
    assert failures > 0
    model = MixtureTransformer(n_components_grid=(2, 4, 6, 8), covariance_types=("full", "diag"),
                               reg_covar=0.0).fit(X)
    errors = [c for c in model.selection_ if c.get("error")]
    scored = [c for c in model.selection_ if c["bic"] is not None]
    assert errors and scored
    assert model.n_components_ in {c["n_components"] for c in scored}
    assert np.isfinite(model.transform(X)).all()


def test_single_candidate_that_collapses_is_a_clear_error():
    X = _table_with_binary_columns()
    with pytest.raises(DataError, match="reg_covar"):
        for k in (4, 6, 8):  # at least one of these collapses (checked above against sklearn)
            MixtureTransformer(n_components=k, covariance_type="full", reg_covar=0.0).fit(X)
