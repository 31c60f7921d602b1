"""Cache keys cover defaults: an explicit default and an omitted one are the same entry."""

from __future__ import annotations

import numpy as np

from semisup.pretrain import MixtureTransformer, fit_representation, representation_params


def test_resolved_params_hold_every_default():
    # scikit-learn's get_params is the reference for what an estimator's parameters are.
    expected = MixtureTransformer().get_params(deep=False)
    got = representation_params("mixture")
    assert {k: expected[k] for k in got} == got
    assert "random_state" not in got and got["reg_covar"] == expected["reg_covar"]


def test_explicit_default_hits_the_same_cache_entry_and_a_change_misses(tmp_path):
    rng = np.random.default_rng(0)
    X = np.concatenate([rng.normal(-3, 1, (60, 2)), rng.normal(3, 1, (60, 2))])
    fixed = {"n_components": 2, "covariance_type": "diag"}
    _, first = fit_representation("mixture", X, params=fixed, seed=1, cache_dir=tmp_path)
    default_tol = MixtureTransformer().tol
    _, same = fit_representation("mixture", X, params={**fixed, "tol": default_tol}, seed=1,
                                 cache_dir=tmp_path)
    _, other = fit_representation("mixture", X, params={**fixed, "tol": default_tol / 10},
                                  seed=1, cache_dir=tmp_path)
    assert not first["loaded_from_cache"]
    assert same["loaded_from_cache"] and same["cache_key"] == first["cache_key"]
    assert not other["loaded_from_cache"] and other["cache_key"] != first["cache_key"]
