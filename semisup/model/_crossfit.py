"""Expected accuracy of pseudo-labels above a confidence cut, measured by cross-fitting.

Every labeled row is predicted by a model fitted without it (stratified folds over all the
labels, the final model's parameters); the share of those out-of-fold predictions at or above
a cut and their accuracy (with a Wilson 95% interval) say what the pool's pseudo-labels above
the same cut should be worth. Pure functions apart from the fits.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

__all__ = ["DEFAULT_CUTS", "confidence_table", "crossfit_proba"]

#: Cuts every fit report lists (the chosen one is added).
DEFAULT_CUTS = (0.5, 0.6, 0.7, 0.8, 0.9, 0.95, 0.99)


def crossfit_proba(method: Any, params: dict, seed: int, X_lab: np.ndarray, y_lab: np.ndarray,
                   X_unl: np.ndarray | None, n_classes: int, max_folds: int = 5
                   ) -> tuple[np.ndarray, str]:
    """Out-of-fold class probabilities ``(n_labeled, n_classes)`` for every labeled row.

    Rows of a class with one label cannot be held out; their rows get NaN. Semi-supervised
    methods see the unlabeled rows and the held-out fold's features (labels hidden), as in the
    study's tuning.
    """
    from ..methods import align_proba
    from ..study import cv_splits, fit_method

    folds, note = cv_splits(y_lab, max_folds, seed)
    proba = np.full((len(y_lab), n_classes), np.nan)
    for tr, va in folds:
        extra = X_lab[va] if X_unl is None else np.concatenate([X_unl, X_lab[va]])
        est = fit_method(method, params, seed, X_lab[tr], y_lab[tr], extra)
        proba[va] = align_proba(est.predict_proba(X_lab[va]), est.classes_, n_classes)
    return proba, note


def confidence_table(proba: np.ndarray, y: np.ndarray, cuts: Sequence[float],
                     pool_top: np.ndarray | None = None) -> list[dict[str, Any]]:
    """Per cut: share of rows with top probability >= cut, their accuracy and Wilson 95%
    interval; with ``pool_top``, also the share of the pool's rows at or above the cut."""
    from ..study import wilson_interval

    ok = ~np.isnan(proba).any(axis=1)
    proba, y = proba[ok], np.asarray(y)[ok]
    top = proba.max(axis=1) if len(proba) else np.zeros(0)
    right = np.argmax(proba, axis=1) == y if len(proba) else np.zeros(0, dtype=bool)
    rows = []
    for cut in sorted(set(float(c) for c in cuts)):
        kept = top >= cut
        n = int(kept.sum())
        hits = int(right[kept].sum())
        low, high = wilson_interval(hits, n)
        row = {"cut": cut, "n_labeled": int(len(y)), "n_above": n,
               "coverage": n / len(y) if len(y) else 0.0,
               "accuracy": hits / n if n else None, "accuracy_low": low if n else None,
               "accuracy_high": high if n else None}
        if pool_top is not None:
            row["pool_share_above"] = float(np.mean(pool_top >= cut)) if len(pool_top) else 0.0
            row["pool_rows_above"] = int(np.sum(pool_top >= cut))
        rows.append(row)
    return rows
