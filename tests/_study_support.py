"""Stand-ins for the study tests: small datasets and methods built from plain scikit-learn.

The study tests must not depend on the real data / pretrain / methods parts, so they build
``Dataset`` objects from numpy arrays, register stand-in methods with unique names, and inject
a PCA in place of the unsupervised stage.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from semisup.data import Dataset, FeatureBlock
from semisup.methods import MethodSpec, MethodUnavailable, get_method, register

PREFIX = "studytest"


class _Raises:
    """A classifier whose fit always raises (to check failure recording)."""

    def __init__(self, random_state=None):
        self.random_state = random_state

    def get_params(self, deep=True):
        return {"random_state": self.random_state}

    def fit(self, X, y):
        raise RuntimeError("deliberate failure from the stand-in method")


class _Unavailable(_Raises):
    def fit(self, X, y):
        raise MethodUnavailable("stand-in method needs 1000 labels")


class _Counting:
    """LogisticRegression that appends a line to $STUDYTEST_COUNTER on every final fit."""

    def __init__(self, C=1.0, random_state=None):
        self.C = C
        self.random_state = random_state

    def fit(self, X, y):
        import time

        from sklearn.linear_model import LogisticRegression

        self.model_ = LogisticRegression(C=self.C, max_iter=200).fit(X, y)
        self.classes_ = self.model_.classes_
        delay = float(os.environ.get("STUDYTEST_DELAY", "0"))
        if delay:
            time.sleep(delay)
        path = os.environ.get("STUDYTEST_COUNTER")
        if path:
            with open(path, "a") as fh:  # noqa: PTH123
                fh.write(f"{len(y)}\n")
        return self

    def predict_proba(self, X):
        return self.model_.predict_proba(X)


def _logreg(params, random_state):
    from sklearn.linear_model import LogisticRegression

    return LogisticRegression(C=params.get("C", 1.0), max_iter=300)


def _selftrain(params, random_state):
    from sklearn.linear_model import LogisticRegression
    from sklearn.semi_supervised import SelfTrainingClassifier

    return SelfTrainingClassifier(
        LogisticRegression(C=params.get("C", 1.0), max_iter=300),
        threshold=params.get("threshold", 0.9), max_iter=3,
    )


def _c_space(trial):
    return {"C": trial.suggest_float("C", 1e-2, 1e2, log=True)}


def _selftrain_space(trial):
    return {"C": trial.suggest_float("C", 1e-2, 1e2, log=True),
            "threshold": trial.suggest_float("threshold", 0.6, 0.99)}


def _no_space(trial):
    return {}


def ensure_methods() -> dict[str, str]:
    """Register the stand-ins once; return role -> registered name."""
    specs = {
        "logreg": MethodSpec(f"{PREFIX}-logreg", "stand-in: supervised logistic regression",
                             "raw", False, _c_space, _logreg, {"C": 1.0}, "supervised"),
        "selftrain": MethodSpec(f"{PREFIX}-latent-selftrain", "stand-in: self-training on PCA",
                                "vae", True, _selftrain_space, _selftrain,
                                {"C": 1.0, "threshold": 0.9}, "latent"),
        "raises": MethodSpec(f"{PREFIX}-raises", "stand-in: always raises", "raw", False,
                             _no_space, lambda p, s: _Raises(s), {}, "supervised"),
        "unavailable": MethodSpec(f"{PREFIX}-unavailable", "stand-in: unavailable", "raw", False,
                                  _no_space, lambda p, s: _Unavailable(s), {}, "supervised"),
        "counting": MethodSpec(f"{PREFIX}-counting", "stand-in: counts its fits", "raw", False,
                               _c_space, lambda p, s: _Counting(p.get("C", 1.0), s), {"C": 1.0},
                               "supervised"),
    }
    for spec in specs.values():
        try:
            get_method(spec.name)
        except Exception:  # noqa: BLE001  (not registered yet)
            register(spec)
    return {role: spec.name for role, spec in specs.items()}


def make_dataset(n_labeled_per_class: int = 40, n_unlabeled: int = 300, seed: int = 0,
                 n_classes: int = 3) -> Dataset:
    """scikit-learn's digits (classes 0..n_classes-1), most rows' labels hidden."""
    from sklearn.datasets import load_digits

    X, y = load_digits(return_X_y=True)
    keep = y < n_classes
    X, y = X[keep].astype(np.float32) / 16.0, y[keep].astype(np.int64)
    rng = np.random.default_rng(seed)
    labeled = np.concatenate([
        rng.choice(np.flatnonzero(y == c), n_labeled_per_class, replace=False)
        for c in range(n_classes)
    ])
    rest = np.setdiff1d(np.arange(len(y)), labeled)
    unl = rng.choice(rest, min(n_unlabeled, len(rest)), replace=False)
    rows = np.sort(np.concatenate([labeled, unl]))
    y_out = np.where(np.isin(rows, labeled), y[rows], -1).astype(np.int64)
    n_feat = X.shape[1]
    return Dataset(
        X=X[rows], y=y_out, row_ids=np.array([f"r{i}" for i in rows], dtype=object),
        feature_names=[f"px{j}" for j in range(n_feat)],
        class_names=[str(c) for c in range(n_classes)],
        blocks=tuple(FeatureBlock("numeric", j, j + 1, f"px{j}") for j in range(n_feat)),
        label_column="digit",
    )


def pca_representation(kind, X, *, blocks=None, params=None, seed=0, cache_dir=None):
    """Stand-in for semisup.pretrain.fit_representation: a PCA, counted in cache_dir."""
    from sklearn.decomposition import PCA

    n = int((params or {}).get("n_components", 8))
    pca = PCA(n_components=n, random_state=seed).fit(X)
    if cache_dir is not None:
        Path(cache_dir).mkdir(parents=True, exist_ok=True)
        with open(Path(cache_dir) / f"fits-{kind}.txt", "a") as fh:  # noqa: PTH123
            fh.write(f"{len(X)}\n")
    return pca, {"kind": kind, "stand_in": "PCA", "explained_variance": float(
        pca.explained_variance_ratio_.sum())}
