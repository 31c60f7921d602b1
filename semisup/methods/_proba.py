"""Put a method's class probabilities into the study's full set of classes."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .._errors import ConfigError

__all__ = ["align_proba"]


def align_proba(
    proba: np.ndarray, classes_: Sequence, classes: int | Sequence
) -> np.ndarray:
    """Spread ``proba`` (columns ordered as ``classes_``) over every class of the study.

    A draw may lack a class, so a fitted method's ``classes_`` can be a subset of the study's
    classes. Classes the method never saw get probability 0 (metrics such as log-loss clip it).

    Parameters
    ----------
    proba : array of shape (n_samples, len(classes_))
        Output of ``estimator.predict_proba``.
    classes_ : sequence
        The estimator's ``classes_``.
    classes : int or sequence
        The study's classes: an int ``n_classes`` means ``0 .. n_classes - 1`` (the integer codes
        of ``Dataset.y``); otherwise the full list of labels in column order.

    Returns
    -------
    array of shape (n_samples, n_classes)
    """
    proba = np.asarray(proba, dtype=np.float64)
    full = np.arange(classes) if isinstance(classes, (int, np.integer)) else np.asarray(classes)
    seen = np.asarray(classes_)
    if proba.ndim != 2 or proba.shape[1] != seen.shape[0]:
        raise ConfigError(
            f"align_proba: proba has shape {proba.shape} but classes_ has {seen.shape[0]} "
            "entries; pass the estimator's predict_proba output with its classes_"
        )
    index = {label: i for i, label in enumerate(full.tolist())}
    missing = [c for c in seen.tolist() if c not in index]
    if missing:
        raise ConfigError(
            f"align_proba: classes {missing!r} of the estimator are not among the study's "
            f"{len(index)} classes; pass every class of the study in `classes`"
        )
    out = np.zeros((proba.shape[0], full.shape[0]), dtype=np.float64)
    out[:, [index[c] for c in seen.tolist()]] = proba
    return out
