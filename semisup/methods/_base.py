"""The shared base of every method: one ``fit(X, y)`` with ``y == -1`` for unlabeled rows.

:class:`PartiallyLabeledClassifier` owns input checking, the split into labeled and unlabeled
rows, the class bookkeeping (``classes_`` are the labeled classes seen) and the few-label
guards; subclasses fill in ``_fit_encoded`` and ``_proba_encoded`` on integer-coded labels.
"""

from __future__ import annotations

import logging
from typing import Any

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from ..data import UNLABELED
from ._spec import MethodUnavailable

__all__ = ["PartiallyLabeledClassifier", "UNLABELED", "labeled_mask"]

logger = logging.getLogger(__name__)



def labeled_mask(y: np.ndarray) -> np.ndarray:
    """Boolean mask of the labeled rows: ``y != -1`` for numeric ``y``, every row otherwise."""
    y = np.asarray(y)
    if y.dtype.kind in "iuf":
        return y != UNLABELED
    if y.dtype.kind == "O":
        return np.array([not (isinstance(v, (int, float, np.number)) and v == UNLABELED)
                         for v in y], dtype=bool)
    return np.ones(y.shape[0], dtype=bool)


class PartiallyLabeledClassifier(ClassifierMixin, BaseEstimator):
    """Base for classifiers fitted on rows of which some carry the label ``-1`` (unlabeled).

    Subclasses set ``uses_unlabeled`` (False for supervised-only baselines, which then never
    see the unlabeled rows) and implement:

    - ``_fit_encoded(X, y_code)``: ``y_code`` holds ``0 .. n_classes-1`` for labeled rows and
      ``-1`` for unlabeled rows (only present when ``uses_unlabeled``);
    - ``_proba_encoded(X)``: ``(n_samples, n_classes_)`` probabilities in ``classes_`` order.

    ``predict`` is the arg-max of ``predict_proba``, so the two always agree.
    """

    uses_unlabeled: bool = False

    def fit(self, X: Any, y: Any) -> PartiallyLabeledClassifier:
        """Fit on ``X`` with ``y == -1`` marking unlabeled rows; returns ``self``.

        Raises
        ------
        MethodUnavailable
            When fewer than two classes are labeled (a classifier cannot be learned).
        """
        X, y = validate_data(self, X, y, dtype=np.float64, ensure_min_samples=1)
        mask = labeled_mask(y)
        y_lab = y[mask]
        if y_lab.size == 0:
            raise MethodUnavailable(
                f"{type(self).__name__}: no labeled rows (every y is -1); label at least one "
                "row of each of two classes"
            )
        check_classification_targets(y_lab)
        classes, y_code_lab = np.unique(y_lab, return_inverse=True)
        if classes.size < 2:
            raise MethodUnavailable(
                f"{type(self).__name__}: only one class is labeled ({classes[0]!r}); label at "
                "least one row of a second class"
            )
        self.classes_ = classes
        self.n_labeled_ = int(mask.sum())
        if self.uses_unlabeled:
            y_code = np.full(y.shape[0], UNLABELED, dtype=np.int64)
            y_code[mask] = y_code_lab
            self._fit_encoded(X, y_code)
        else:
            self._fit_encoded(X[mask], y_code_lab.astype(np.int64))
        return self

    def predict_proba(self, X: Any) -> np.ndarray:
        """Class probabilities, ``(n_samples, n_classes_)``, columns in ``classes_`` order."""
        check_is_fitted(self, "classes_")
        X = validate_data(self, X, dtype=np.float64, reset=False)
        proba = np.asarray(self._proba_encoded(X), dtype=np.float64)
        return _clean_proba(proba)

    def predict(self, X: Any) -> np.ndarray:
        """The most probable class of each row (arg-max of :meth:`predict_proba`)."""
        proba = self.predict_proba(X)
        return self.classes_[np.argmax(proba, axis=1)]

    # subclasses implement these two
    def _fit_encoded(self, X: np.ndarray, y_code: np.ndarray) -> None:
        raise NotImplementedError

    def _proba_encoded(self, X: np.ndarray) -> np.ndarray:
        raise NotImplementedError


def _clean_proba(proba: np.ndarray) -> np.ndarray:
    """Rows that are NaN or all zero become uniform; every row is renormalised to sum 1."""
    proba = np.where(np.isfinite(proba), proba, 0.0)
    proba = np.clip(proba, 0.0, None)
    total = proba.sum(axis=1, keepdims=True)
    empty = total[:, 0] <= 0
    if np.any(empty):
        proba[empty] = 1.0
        total[empty] = proba.shape[1]
    return proba / total
