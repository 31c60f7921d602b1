"""Latent means alongside the encoded table (Kingma et al. 2014 M1, raw features kept).

References: scikit-learn's ``LogisticRegression`` and ``HistGradientBoostingClassifier`` on
the concatenated matrix ``[raw | latent]``; data: scikit-learn's bundled digits.
"""

from __future__ import annotations

import numpy as np
import pytest
from _study_support import make_dataset, pca_representation
from sklearn.decomposition import PCA
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.linear_model import LogisticRegression

from semisup.methods import KeepRawFeatures, get_method, raw_and_latent, stage_kind
from semisup.methods._keep_raw import LATENT_WEIGHT
from semisup.study import StudySpec, run_study
from semisup.study._draws import crossfit_folds
from semisup.study._representations import method_features


def test_registered_on_the_vae_stage_with_raw_features():
    for name in ("latent-plus-raw-logreg", "latent-plus-raw-gbt"):
        spec = get_method(name)
        assert spec.representation == "vae+raw" and stage_kind(spec.representation) == "vae"
        assert spec.semi_supervised and spec.family == "latent"


def test_logreg_on_raw_plus_latent_is_logistic_regression_on_the_concatenated_matrix():
    from sklearn.datasets import load_digits

    X, y = load_digits(return_X_y=True)
    X = X / 16.0
    Z = PCA(n_components=8, random_state=0).fit_transform(X)
    lab = np.random.default_rng(0).choice(len(y), 120, replace=False)
    y_partial = np.full(len(y), -1)
    y_partial[lab] = y[lab]
    both = raw_and_latent(X, Z).astype(np.float64)  # float32 out; the estimators use float64
    assert both.shape == (len(y), 64 + 8)
    np.testing.assert_allclose(both, np.hstack([X, LATENT_WEIGHT * Z]), rtol=1e-6, atol=1e-6)
    ours = get_method("latent-plus-raw-logreg").build({"C": 0.5}, 0).fit(both, y_partial)
    # scikit-learn's LogisticRegression on [raw | latent] of the labeled rows is the reference
    ref = LogisticRegression(C=0.5, max_iter=500).fit(both[lab], y[lab])
    np.testing.assert_allclose(ours.predict_proba(both), ref.predict_proba(both), atol=1e-6)
    gbt = get_method("latent-plus-raw-gbt").build({"max_iter": 30}, 3).fit(both, y_partial)
    # scikit-learn's HistGradientBoostingClassifier with the same settings and seed
    ref = HistGradientBoostingClassifier(learning_rate=0.1, max_iter=30, max_leaf_nodes=15,
                                         min_samples_leaf=5, early_stopping=False,
                                         random_state=3).fit(both[lab], y[lab])
    np.testing.assert_allclose(gbt.predict_proba(both), ref.predict_proba(both), atol=1e-6)


def test_keep_raw_features_appends_the_stage_output():
    from sklearn.datasets import load_digits

    X = load_digits().data[:200] / 16.0
    pca = PCA(n_components=4, random_state=0).fit(X)
    out = KeepRawFeatures(pca).fit(X).transform(X)
    np.testing.assert_allclose(out[:, :64], X, rtol=1e-6)
    np.testing.assert_allclose(out[:, 64:], LATENT_WEIGHT * pca.transform(X), rtol=1e-5,
                               atol=1e-6)
    # a transformer saved before the weight existed has no attribute: unscaled, as fitted
    old = KeepRawFeatures(pca).fit(X)
    del old.latent_weight
    np.testing.assert_allclose(old.transform(X)[:, 64:], pca.transform(X), rtol=1e-5,
                               atol=1e-6)
    with pytest.raises(ValueError, match="rows"):
        raw_and_latent(X, X[:10])


def test_the_latent_weight_keeps_logistic_regression_near_the_raw_model_with_few_labels():
    # Data: scikit-learn's bundled breast-cancer table (standardised), 20 stratified labels
    # per draw; the latent block is PCA's 10 components of the unlabeled table, as a stage
    # would give. Reference: scikit-learn's LogisticRegression on the raw table alone. The
    # weighted block moves the class probabilities less from the raw model than the
    # unweighted one (the L2 price of a latent coefficient is 1 / weight**2 times higher).
    from sklearn.datasets import load_breast_cancer
    from sklearn.preprocessing import StandardScaler

    X, y = load_breast_cancer(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    Z = PCA(n_components=10, random_state=0).fit_transform(X)
    rng = np.random.default_rng(1)
    moved = {1.0: [], LATENT_WEIGHT: []}
    for _ in range(5):
        lab = np.concatenate([rng.choice(np.flatnonzero(y == c), 10, replace=False)
                              for c in (0, 1)])
        raw = LogisticRegression(max_iter=500).fit(X[lab], y[lab]).predict_proba(X)[:, 1]
        for w in moved:
            F = raw_and_latent(X, Z, w).astype(np.float64)
            p = LogisticRegression(max_iter=500).fit(F[lab], y[lab]).predict_proba(F)[:, 1]
            moved[w].append(np.mean(np.abs(p - raw)))
    assert np.mean(moved[LATENT_WEIGHT]) < 0.5 * np.mean(moved[1.0])


def test_study_cell_is_logistic_regression_on_raw_plus_the_repeats_own_draw(tmp_path):
    from semisup._seeding import derive_seed
    from semisup.selection import stratified_order

    ds = make_dataset(n_labeled_per_class=30)
    spec = StudySpec.build(overrides={
        "data": "digits-standin", "label_column": "digit", "repeats": 2, "folds": 3,
        "trials": 1, "budgets": [15], "methods": ["latent-plus-raw-logreg"]})
    result = run_study(spec, tmp_path, dataset=ds, representation_fn=pca_representation,
                       progress=False, jobs=1)
    labeled = np.flatnonzero(ds.y >= 0)
    fold = crossfit_folds(ds.y[labeled], np.asarray(ds.row_ids, dtype=str)[labeled], 3,
                          derive_seed(0, "folds", 0))
    cells = result.cells.set_index("repeat")
    rows = np.sort(np.concatenate([np.flatnonzero(ds.y < 0), labeled]))
    for r in range(2):
        seed = derive_seed(0, "pretrain", "vae") if r == 0 else \
            derive_seed(0, "pretrain", "vae", "repeat", r)
        pca, _ = pca_representation("vae", ds.X[rows], seed=seed)
        both = np.concatenate([ds.X, LATENT_WEIGHT * pca.transform(ds.X)],
                              axis=1).astype(np.float32)
        ev, pool = labeled[fold == r], labeled[fold != r]
        draw = pool[stratified_order(ds.y[pool], derive_seed(0, "draw", r))[:15]]
        # scikit-learn's LogisticRegression (the method's defaults) on [raw | w * latent]
        ref = LogisticRegression(C=1.0, max_iter=500).fit(both[draw], ds.y[draw])
        want = float(np.mean(ref.predict(both[ev]) == ds.y[ev]))
        assert cells.loc[r, "accuracy"] == pytest.approx(want, abs=1e-9)
    # the helper the cells use builds the same matrix
    feats = {"raw": ds.X, "vae": np.zeros((len(ds.y), 2))}
    assert method_features(feats, "vae+raw").shape == (len(ds.y), ds.X.shape[1] + 2)
