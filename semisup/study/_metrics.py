"""Holdout metrics, the Wilson interval, and across-repeat summaries (pure functions)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

__all__ = ["METRICS", "holdout_metrics", "summarize_curves", "wilson_interval"]

#: Metrics measured on the holdout for every cell (higher is better except log_loss).
METRICS = ("accuracy", "balanced_accuracy", "macro_f1", "log_loss")

#: Probabilities are clipped to [EPS, 1 - EPS] before log-loss.
EPS = 1e-15


def wilson_interval(successes: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion (Wilson 1927; Newcombe 1998 method 3).

    Returns ``(low, high)``; ``(0.0, 1.0)`` when ``n == 0``.
    """
    if n < 0 or successes < 0 or successes > n:
        raise ValueError(f"need 0 <= successes <= n; got successes={successes}, n={n}")
    if n == 0:
        return 0.0, 1.0
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    p = successes / n
    denom = 1 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / denom
    return max(0.0, centre - half), min(1.0, centre + half)


def holdout_metrics(y_true: np.ndarray, proba: np.ndarray, n_classes: int) -> dict:
    """Accuracy, balanced accuracy, macro-F1, log-loss, per-class recall, Wilson interval.

    Parameters
    ----------
    y_true : ndarray of shape (n_holdout,)
        True class indices in ``0 .. n_classes - 1``.
    proba : ndarray of shape (n_holdout, n_classes)
        Predicted class probabilities over all study classes.

    Macro-F1 and balanced accuracy average over the classes present in ``y_true``; log-loss
    uses every study class and clips probabilities to ``[1e-15, 1 - 1e-15]`` (renormalised).
    """
    from sklearn.metrics import balanced_accuracy_score, f1_score, log_loss, recall_score

    y_true = np.asarray(y_true, dtype=np.int64)
    proba = np.asarray(proba, dtype=float)
    y_pred = np.argmax(proba, axis=1)
    labels = np.arange(n_classes)
    present = np.unique(y_true)
    n_ok = int((y_pred == y_true).sum())
    low, high = wilson_interval(n_ok, len(y_true))
    clipped = np.clip(proba, EPS, 1 - EPS)
    clipped /= clipped.sum(axis=1, keepdims=True)
    recall = recall_score(y_true, y_pred, labels=present, average=None, zero_division=0)
    return {
        "accuracy": n_ok / len(y_true),
        "accuracy_low": low,
        "accuracy_high": high,
        "balanced_accuracy": float(balanced_accuracy_score(y_true, y_pred)),
        "macro_f1": float(f1_score(y_true, y_pred, labels=present, average="macro",
                                   zero_division=0)),
        "log_loss": float(log_loss(y_true, clipped, labels=labels)),
        "per_class_recall": {int(c): float(r) for c, r in zip(present, recall, strict=True)},
        "n_holdout": int(len(y_true)),
    }


def summarize_curves(cells: pd.DataFrame, metrics=METRICS, confidence: float = 0.95):
    """Measured curve points: per method, strategy, metric and budget, mean and interval.

    ``low``/``high`` is a Student-t interval for the across-repeat mean
    (``mean +- t * sd / sqrt(n_repeats)``), kept inside the metric's range; ``sd``, ``min`` and
    ``max`` show the spread of single draws. With one repeat, ``low == high == mean``. Only
    ``status == "ok"`` cells count.
    """
    cols = ["method", "strategy", "metric", "n_labels", "mean", "low", "high", "measured",
            "sd", "min", "max", "n_repeats"]
    ok = cells[cells["status"] == "ok"] if len(cells) else cells
    rows = []
    if len(ok):
        for (method, strategy, n_labels), grp in ok.groupby(
            ["method", "strategy", "n_labels"], sort=True
        ):
            for metric in metrics:
                vals = grp[metric].astype(float).dropna().to_numpy()
                if len(vals) == 0:
                    continue
                mean = float(vals.mean())
                sd = float(vals.std(ddof=1)) if len(vals) > 1 else 0.0
                if len(vals) > 1:
                    t = float(stats.t.ppf(0.5 + confidence / 2, len(vals) - 1))
                    half = t * sd / math.sqrt(len(vals))
                else:
                    half = 0.0
                low, high = mean - half, mean + half
                if metric == "log_loss":
                    low = max(low, 0.0)
                else:  # proportions: keep the interval inside [0, 1]
                    low, high = max(low, 0.0), min(high, 1.0)
                rows.append({
                    "method": method, "strategy": strategy, "metric": metric,
                    "n_labels": int(n_labels), "mean": mean, "low": low, "high": high,
                    "measured": True, "sd": sd,
                    "min": float(vals.min()), "max": float(vals.max()),
                    "n_repeats": int(len(vals)),
                })
    return pd.DataFrame(rows, columns=cols)
