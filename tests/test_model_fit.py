"""Fitting the final model from a real (small) study, checked against scikit-learn."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from _model_support import ID, LABEL, make_study, wine_frame

from semisup.model import fit_model, load_model, save_model

pytestmark = pytest.mark.slow  # a real (small) study with a VAE is fitted first, ~15 s


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    return make_study(tmp_path_factory.mktemp("wine"))


def _encoded(model, frame):
    rows = frame[LABEL].notna().to_numpy()
    X = model.encode(frame)
    codes = pd.Index(model.classes).get_indexer(frame.loc[rows, LABEL])
    return X, rows, codes


def test_plan_choice_is_fitted_and_reuses_the_study_stage(study, monkeypatch):
    import semisup.pretrain

    # Every unsupervised stage the fit needs (the method's representation, or the stage that
    # flags unfamiliar rows for a raw method) must come from the study's cache: fitting one
    # anew fails the test.
    def no_refit(*args, **kwargs):
        pytest.fail("an unsupervised stage was fitted again instead of read from the cache")

    monkeypatch.setattr(semisup.pretrain, "fit_representation", no_refit)
    plan = json.loads((study / "plan.json").read_text())
    result = fit_model(study)
    assert result.report["method"] == plan["chosen"]["method"]
    frame, _ = wine_frame()
    assert result.report["n_labeled"] == int(frame[LABEL].notna().sum())
    assert result.model.density is not None
    if result.report["representation"] != "raw":
        assert result.report["unsupervised_stage"] == "reused from the study's cache"
    est = result.report["study_estimate"]
    assert est["plan"]["predicted"] == plan["chosen"]["predicted"]
    manifest = result.model.manifest
    for key in ("semisup_version", "method", "params", "classes", "features", "encoder",
                "training_data", "study_estimate", "density"):
        assert key in manifest
    assert manifest["training_data"]["sha256"] == json.loads(
        (study / "study.json").read_text())["data"]["sha256"]


def test_supervised_logreg_matches_scikit_learn(study):
    # Reference: scikit-learn's LogisticRegression with the tuned C and the wrapper's
    # max_iter=500, fitted on the same encoded labeled rows.
    from sklearn.linear_model import LogisticRegression

    result = fit_model(study, method="supervised-logreg")
    frame, _ = wine_frame()
    X, rows, codes = _encoded(result.model, frame)
    ref = LogisticRegression(C=result.report["params"]["C"], max_iter=500).fit(
        X[rows].astype(np.float64), codes)
    assert result.report["n_unlabeled_used"] == 0
    np.testing.assert_allclose(result.model.predict_proba(frame),
                               ref.predict_proba(X.astype(np.float64)), rtol=0, atol=1e-12)


def test_supervised_knn_and_gbt_match_scikit_learn(study):
    # References: scikit-learn's KNeighborsClassifier and HistGradientBoostingClassifier with
    # the tuned parameters (and the fit's seed; early stopping off, as the wrapper sets it).
    from sklearn.ensemble import HistGradientBoostingClassifier
    from sklearn.neighbors import KNeighborsClassifier

    frame, _ = wine_frame()
    knn = fit_model(study, method="supervised-knn")
    X, rows, codes = _encoded(knn.model, frame)
    p = knn.report["params"]
    ref = KNeighborsClassifier(n_neighbors=p["n_neighbors"], weights=p["weights"]).fit(
        X[rows].astype(np.float64), codes)
    # (the wrapper renormalises rows to sum 1: equal up to rounding)
    np.testing.assert_allclose(knn.model.predict_proba(frame),
                               ref.predict_proba(X.astype(np.float64)), rtol=0, atol=1e-12)
    gbt = fit_model(study, method="supervised-gbt")
    p = gbt.report["params"]
    leaf = max(1, min(p["min_samples_leaf"], int(rows.sum()) // 2))
    ref = HistGradientBoostingClassifier(
        learning_rate=p["learning_rate"], max_iter=p["max_iter"],
        max_leaf_nodes=p["max_leaf_nodes"], min_samples_leaf=leaf, early_stopping=False,
        random_state=gbt.report["seed"]).fit(X[rows].astype(np.float64), codes)
    np.testing.assert_allclose(gbt.model.predict_proba(frame),
                               ref.predict_proba(X.astype(np.float64)), rtol=0, atol=1e-12)


def test_confidence_table_is_cross_fitted_like_scikit_learn(study):
    # Reference: scikit-learn's cross_val_predict with the same StratifiedKFold (5 folds,
    # shuffled with the fit's cross-fitting seed) gives the same out-of-fold accuracy.
    from sklearn.linear_model import LogisticRegression
    from sklearn.model_selection import StratifiedKFold, cross_val_predict

    from semisup._seeding import derive_seed

    result = fit_model(study, method="supervised-logreg", confidence_cut=0.8)
    frame, _ = wine_frame()
    X, rows, codes = _encoded(result.model, frame)
    cv = StratifiedKFold(5, shuffle=True, random_state=derive_seed(result.report["seed"],
                                                                    "crossfit"))
    proba = cross_val_predict(LogisticRegression(C=result.report["params"]["C"], max_iter=500),
                              X[rows].astype(np.float64), codes, cv=cv, method="predict_proba")
    cf = result.report["crossfit"]
    assert cf["accuracy"] == pytest.approx(np.mean(proba.argmax(1) == codes), abs=1e-12)
    row = next(r for r in cf["table"] if r["cut"] == 0.8)
    kept = proba.max(1) >= 0.8
    assert row["n_above"] == int(kept.sum())
    assert row["accuracy"] == pytest.approx(np.mean(proba.argmax(1)[kept] == codes[kept]))
    assert row["accuracy_low"] <= row["accuracy"] <= row["accuracy_high"] + 1e-12
    assert "0.8" in result.summary() and "expected accuracy" in result.summary()


def test_pseudo_labels_are_the_unlabeled_rows_predicted(study, tmp_path):
    result = fit_model(study, method="latent-logreg", confidence_cut=0.9)
    frame, truth = wine_frame()
    pool = frame[frame[LABEL].isna()]
    pseudo = result.pseudo_labels
    assert list(pseudo["row_id"]) == list(pool[ID])
    save_model(result.model, tmp_path / "m")
    back = load_model(tmp_path / "m")
    proba = back.predict_proba(pool)
    cols = [f"proba_{c}" for c in back.classes]
    assert np.array_equal(pseudo[cols].to_numpy(), proba)
    assert (pseudo["accepted"] == ((pseudo["top_probability"] >= 0.9)
                                   & ~pseudo["out_of_distribution"])).all()
    # The wine table's hidden labels are known: accepted pseudo-labels should be about as
    # accurate as the cross-fitted estimate says (loose bound: tiny pool).
    accepted = pseudo["accepted"].to_numpy()
    hidden = np.array(["a", "b", "c"], dtype=object)[truth[frame[LABEL].isna().to_numpy()]]
    acc = np.mean(pseudo["predicted"].to_numpy()[accepted] == hidden[accepted])
    row = next(r for r in result.report["crossfit"]["table"] if r["cut"] == 0.9)
    assert acc >= row["accuracy_low"] - 0.1


def test_latent_plus_raw_logreg_is_logistic_regression_on_raw_and_latent(study, tmp_path):
    # Reference: scikit-learn's LogisticRegression (tuned C, max_iter=500) on the encoded
    # labeled rows with the study's VAE latent means appended (times LATENT_WEIGHT); the saved
    # model predicts the same after loading.
    from sklearn.linear_model import LogisticRegression

    from semisup.methods._keep_raw import LATENT_WEIGHT

    result = fit_model(study, method="latent-plus-raw-logreg")
    assert result.report["unsupervised_stage"] == "reused from the study's cache"
    frame, _ = wine_frame()
    X, rows, codes = _encoded(result.model, frame)
    latent = result.model.density.transform(X)
    both = np.concatenate([X, LATENT_WEIGHT * latent], axis=1).astype(np.float64)
    ref = LogisticRegression(C=result.report["params"]["C"], max_iter=500).fit(both[rows], codes)
    np.testing.assert_allclose(result.model.predict_proba(frame), ref.predict_proba(both),
                               rtol=0, atol=1e-6)
    save_model(result.model, tmp_path / "m")
    np.testing.assert_array_equal(load_model(tmp_path / "m").predict_proba(frame),
                                  result.model.predict_proba(frame))


def test_out_of_distribution_flag(study):
    result = fit_model(study, method="supervised-logreg")
    model = result.model
    frame, _ = wine_frame()
    own = model.out_of_distribution(frame)
    assert own.mean() <= 0.05  # threshold is the training table's 1st percentile
    far = frame.copy()
    numeric = [c for c, k in model.schema.items() if k == "numeric"]
    far[numeric] = far[numeric] * 25.0  # rows no wine in the table resembles
    assert model.out_of_distribution(far).mean() >= 0.95


def test_supervised_svm_matches_scikit_learn(study):
    # Reference: scikit-learn's OneVsRestClassifier(SVC) with the wrapper's gamma rule
    # gamma_factor / (n_features * X.var()), fitted on every label; its out-of-fold
    # decision values from scikit-learn's cross_val_predict (stratified folds =
    # min(3, smallest class count)); one temperature minimising their log-loss, searched
    # with scipy.optimize.minimize_scalar over log T in [-5, 5] (temperature scaling, Guo et
    # al. 2017); probabilities = scipy.special.softmax(decision / T).
    from scipy.optimize import minimize_scalar
    from scipy.special import log_softmax, softmax
    from sklearn.model_selection import StratifiedKFold, cross_val_predict
    from sklearn.multiclass import OneVsRestClassifier
    from sklearn.svm import SVC

    result = fit_model(study, method="supervised-svm")
    frame, _ = wine_frame()
    X, rows, codes = _encoded(result.model, frame)
    p = result.report["params"]
    X_lab = X[rows].astype(np.float64)
    gamma = p["gamma_factor"] / (X_lab.shape[1] * X_lab.var())
    folds = int(min(3, np.bincount(codes).min()))
    svc = OneVsRestClassifier(SVC(C=p["C"], kernel="rbf", gamma=gamma))
    held = cross_val_predict(svc, X_lab, codes, cv=StratifiedKFold(folds),
                             method="decision_function")
    idx = np.arange(len(codes))
    fit = minimize_scalar(
        lambda t: -np.mean(log_softmax(held / np.exp(t), axis=1)[idx, codes]),
        bounds=(-5.0, 5.0), method="bounded",
    )
    ref = softmax(svc.fit(X_lab, codes).decision_function(X.astype(np.float64))
                  / np.exp(fit.x), axis=1)
    np.testing.assert_allclose(result.model.predict_proba(frame), ref, rtol=0, atol=1e-12)


def test_stage_rows_reproduce_the_study_cache_key(study, tmp_path):
    # With study.json's pointer to the cache entry removed, the fit recomputes the rows the
    # study fitted its VAE on; the content-hash cache then finds the study's entry again.
    import shutil

    copy = tmp_path / "study"
    shutil.copytree(study, copy)
    info = json.loads((copy / "study.json").read_text())
    for diag in info["representation"]["diagnostics"].values():
        diag.pop("cache_path", None)
    (copy / "study.json").write_text(json.dumps(info))
    entries = sorted(p.name for p in (copy / "cache").iterdir())
    result = fit_model(copy, method="latent-logreg")
    assert result.report["unsupervised_stage"] == "reused from the study's cache"
    assert sorted(p.name for p in (copy / "cache").iterdir()) == entries  # nothing refitted


def test_stage_refit_without_cache_uses_the_study_sample_rule(study, tmp_path, monkeypatch):
    # With the cache gone, the refit fits on the rows the study's own rule gives
    # (study._representations.stage_fit_rows: a seeded sample past stage_rows), not on every
    # row. stage_rows is lowered in study.json below the table's 178 wine rows to make the
    # rule sample (the spec's own check allows no value that small; study.json is read as is).
    import shutil

    import semisup.pretrain
    from semisup.study._representations import stage_sample

    copy = tmp_path / "study"
    shutil.copytree(study, copy)
    shutil.rmtree(copy / "cache")
    info = json.loads((copy / "study.json").read_text())
    info["spec"]["stage_rows"] = 100
    (copy / "study.json").write_text(json.dumps(info))
    seen = []
    real = semisup.pretrain.fit_representation

    def recording(kind, X, **kwargs):
        seen.append(np.asarray(X).copy())
        return real(kind, X, **kwargs)

    monkeypatch.setattr(semisup.pretrain, "fit_representation", recording)
    result = fit_model(copy, method="latent-logreg")
    assert result.report["unsupervised_stage"] == "refitted as the study did"
    X_all = result.model.encode(wine_frame()[0])
    want = X_all[stage_sample(np.arange(len(X_all)), 100, info["spec"]["seed"])]
    assert len(seen) >= 1 and seen[0].shape == want.shape == (100, X_all.shape[1])
    np.testing.assert_allclose(seen[0], want, rtol=0, atol=1e-6)
