"""Probability calibration that copes with a handful of labels per class."""

from __future__ import annotations

import numpy as np
from scipy.special import softmax
from sklearn.base import BaseEstimator, ClassifierMixin, clone
from sklearn.calibration import CalibratedClassifierCV
from sklearn.model_selection import StratifiedKFold
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

__all__ = ["FewLabelCalibratedClassifier", "decision_to_proba"]


def decision_to_proba(decision: np.ndarray) -> np.ndarray:
    """Softmax of one-vs-rest decision values; a binary ``(n,)`` score becomes ``[-s, s]``."""
    decision = np.asarray(decision, dtype=np.float64)
    if decision.ndim == 1:
        decision = np.column_stack([-decision, decision])
    return softmax(decision, axis=1)


class FewLabelCalibratedClassifier(ClassifierMixin, BaseEstimator):
    """Cross-validated Platt (or isotonic) calibration with as many folds as the labels allow.

    Uses ``min(max_folds, smallest class count)`` stratified folds, so no fold ever lacks a
    class. When some class has a single label, no held-out calibration is possible: the base
    estimator is fitted on everything and its own ``predict_proba`` (or a softmax of its
    ``decision_function``) is used, and ``calibrated_`` is False.

    Parameters
    ----------
    estimator : classifier
        The base classifier (cloned).
    method : {"sigmoid", "isotonic"}
        Calibration map (Platt's sigmoid by default).
    max_folds : int
        Most folds to use.
    ensemble : bool
        Passed to ``CalibratedClassifierCV``: False (the default here) fits one calibrator on
        the pooled out-of-fold scores and one final model, cheaper than one pair per fold.

    Attributes
    ----------
    classes_ : ndarray
    calibrated_ : bool
        Whether held-out calibration was possible.
    model_ : fitted estimator
    """

    def __init__(self, estimator=None, method: str = "sigmoid", max_folds: int = 3,
                 ensemble: bool = False):
        self.estimator = estimator
        self.method = method
        self.max_folds = max_folds
        self.ensemble = ensemble

    def fit(self, X, y):
        X, y = validate_data(self, X, y, dtype=np.float64)
        check_classification_targets(y)
        self.classes_, counts = np.unique(y, return_counts=True)
        n_folds = int(min(self.max_folds, counts.min()))
        base = clone(self.estimator)
        if n_folds >= 2 and self.classes_.size >= 2:
            cv = StratifiedKFold(n_splits=n_folds)
            self.model_ = CalibratedClassifierCV(
                base, method=self.method, cv=cv, ensemble=self.ensemble
            ).fit(X, y)
            self.calibrated_ = True
        else:
            self.model_ = base.fit(X, y)
            self.calibrated_ = False
        return self

    def predict_proba(self, X):
        check_is_fitted(self, "model_")
        X = validate_data(self, X, dtype=np.float64, reset=False)
        if self.calibrated_ or hasattr(self.model_, "predict_proba"):
            return self.model_.predict_proba(X)
        return decision_to_proba(self.model_.decision_function(X))

    def predict(self, X):
        proba = self.predict_proba(X)
        return self.classes_[np.argmax(proba, axis=1)]
