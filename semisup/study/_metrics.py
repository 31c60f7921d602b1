"""Holdout metrics, the Wilson interval, and across-repeat summaries (pure functions)."""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

__all__ = [
    "METRICS", "PROPORTION_METRICS", "class_mix_variance", "holdout_metrics",
    "shared_evaluation_variance",
    "summarize_curves", "wilson_interval",
]

#: Metrics measured on the evaluation rows for every cell (higher is better except log_loss).
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


#: Metrics that are proportions over evaluation rows (their sampling variance is taken as
#: binomial, exact for accuracy and an approximation for the other two).
PROPORTION_METRICS = ("accuracy", "balanced_accuracy", "macro_f1")


def shared_evaluation_variance(p: float, n_rows_evaluated: int, folds: int,
                               n_repeats: int) -> float:
    """Evaluation-sample variance of a mean over repeats that the repeats' spread misses.

    ``n_repeats`` repeats are scored on ``folds`` disjoint evaluation sets per cycle that
    together hold ``n_rows_evaluated`` rows (``folds = 1``: one holdout or test file shared by
    every repeat). The evaluation noise of the mean of a proportion ``p`` is about the binomial
    ``p (1 - p) / n_rows_evaluated``; the sample variance of the repeats holds only the part
    that differs between folds, so the mean's variance misses
    ``p (1 - p) / n_rows_evaluated * (R - folds) / (R - 1)`` when repeats of different cycles
    see the same rows (taking the same row's error as fully correlated across cycles, the
    conservative end). Zero when ``1 < R <= folds`` (every repeat has its own rows); the whole
    binomial variance with one shared holdout or a single repeat.
    """
    if n_rows_evaluated <= 0 or n_repeats < 1:
        return 0.0
    binomial = p * (1.0 - p) / n_rows_evaluated
    if n_repeats == 1:  # no spread at all: the evaluation sample's own variance
        return binomial
    return binomial * max(0.0, (n_repeats - folds) / (n_repeats - 1))


def class_mix_variance(recall: Mapping[str, float], class_counts: Mapping[str, int]) -> float:
    """Variance of an accuracy from the class mix of the evaluated rows.

    Accuracy is ``sum_c pi_c * a_c`` (class shares ``pi_c``, per-class recalls ``a_c``). Folds
    stratified on the labeled rows all get the labeled sample's class shares, so the spread
    between folds cannot show how those shares vary from sample to sample; their multinomial
    variance contributes ``sum_c pi_c (a_c - a)**2 / n`` (``a`` the accuracy, ``n`` the
    evaluated rows; the delta method on the multinomial shares). It is the whole binomial
    ``a (1 - a) / n`` for a model that always predicts one class, zero for one with equal
    recall in every class. Classes without a recall (not evaluated) are left out.
    """
    keys = [k for k in class_counts if k in recall and class_counts[k] > 0]
    n = float(sum(class_counts[k] for k in keys))
    if n <= 0:
        return 0.0
    share = np.array([class_counts[k] / n for k in keys])
    a = np.array([float(recall[k]) for k in keys])
    return float(np.sum(share * (a - np.sum(share * a)) ** 2) / n)


def _mean_recall(texts) -> dict[str, float]:
    """Mean per-class recall over a group's cells (cells.csv's JSON ``per_class_recall``)."""
    import json

    sums: dict[str, list[float]] = {}
    for text in texts:
        if isinstance(text, str):
            for k, v in json.loads(text).items():
                sums.setdefault(str(k), []).append(float(v))
    return {k: float(np.mean(v)) for k, v in sums.items()}


#: Level of the measured points' intervals in curves.csv (``summarize_curves``' default).
CURVE_CONFIDENCE = 0.95


def summarize_curves(cells: pd.DataFrame, metrics=METRICS,
                     confidence: float = CURVE_CONFIDENCE, *,
                     evaluation: Mapping[str, Any] | None = None):
    """Measured curve points: per method, strategy, metric and budget, mean and interval.

    ``low``/``high`` is a Student-t interval for the across-repeat mean widened by the
    evaluation rows' noise, ``mean +- sqrt((t * sd / sqrt(n_repeats))**2 + z**2 * v_eval)``
    (the half-widths of the two independent parts added in quadrature: the t quantile for the
    estimated spread, the normal one for the binomial part), kept inside the metric's range;
    ``sd``, ``min`` and ``max`` show the spread of single draws. ``v_eval`` is the evaluation
    rows' sampling variance that the spread cannot hold (:func:`shared_evaluation_variance`),
    for the proportion metrics when ``evaluation`` (study.json's ``evaluation`` block: its
    ``folds`` and ``n_rows_evaluated``) is given; zero for cross-fitting with no more repeats
    than folds, where each repeat is scored on its own rows. For accuracy under
    cross-fitting (``folds > 1``, with the block's ``evaluated_class_counts`` and the cells'
    ``per_class_recall``), ``v_eval`` also holds :func:`class_mix_variance`: stratified folds
    share the labeled sample's class mix, so their spread cannot show its noise. With one
    repeat the half-width is ``z * sqrt(v_eval)`` (zero without ``evaluation``). Only
    ``status == "ok"`` cells count.
    """
    cols = ["method", "strategy", "metric", "n_labels", "mean", "low", "high", "measured",
            "sd", "min", "max", "n_repeats"]
    ok = cells[cells["status"] == "ok"] if len(cells) else cells
    n_eval = int(evaluation.get("n_rows_evaluated") or 0) if evaluation else 0
    folds = int(evaluation.get("folds") or 1) if evaluation else 1
    mix_counts = (evaluation or {}).get("evaluated_class_counts") if folds > 1 else None
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    t_quantile = functools.cache(lambda df: float(stats.t.ppf(0.5 + confidence / 2, df)))
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
                v_eval = 0.0
                if n_eval and metric in PROPORTION_METRICS:
                    p = min(max(mean, 0.0), 1.0)
                    v_eval = shared_evaluation_variance(p, n_eval, folds, len(vals))
                    if (metric == "accuracy" and mix_counts and len(vals) > 1
                            and "per_class_recall" in grp):
                        v_eval += class_mix_variance(_mean_recall(grp["per_class_recall"]),
                                                     mix_counts)
                if len(vals) > 1:
                    t = t_quantile(len(vals) - 1)
                    half = math.hypot(t * sd / math.sqrt(len(vals)), z * math.sqrt(v_eval))
                else:
                    half = z * math.sqrt(v_eval)
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
