"""Shared data for the methods tests: scikit-learn's bundled digits with few labels."""

from __future__ import annotations

import numpy as np


def digits_few_labels(per_class: int, seed: int = 0, standardise: bool = True):
    """(X, y, y_partial): digits, ``per_class`` labels of each class, ``-1`` elsewhere."""
    from sklearn.datasets import load_digits

    X, y = load_digits(return_X_y=True)
    if standardise:
        X = (X - X.mean(0)) / np.maximum(X.std(0), 1e-12)
    rng = np.random.default_rng(seed)
    y_partial = np.full_like(y, -1)
    for c in range(10):
        y_partial[rng.choice(np.flatnonzero(y == c), per_class, replace=False)] = c
    return X, y, y_partial
