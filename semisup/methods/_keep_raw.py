"""The encoded table with a fitted stage's features appended (M1 with the raw features kept).

Kingma, Rezende, Mohamed & Welling (2014), "Semi-supervised learning with deep generative
models", M1: a classifier on the VAE's latent means. Replacing the encoded table by the latent
means throws away what the VAE did not keep; appending them keeps every raw column, so a
regularised learner can fall back on the table where the latent means carry nothing new.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils.validation import check_is_fitted

__all__ = ["LATENT_WEIGHT", "KeepRawFeatures", "raw_and_latent"]

#: Factor on the appended latent means. A penalised linear learner then pays 1 / 0.25**2 = 16
#: times the L2 price for a latent coefficient that a raw one pays, so with few labels it
#: stays close to the model on the raw table and the latent means enter as the labels
#: support them (tree learners split on ranks and do not see the factor). Measured with
#: logistic regression (C = 1) against the same on the raw table, 3 repeats, on 43 curve-
#: corpus tables and then on 20 other real tables (benchmarks/RESULTS.md, issue 23): with
#: factor 1 the latent means cost more than 0.01 accuracy on 63% / 30% / 21% and 45% / 30% /
#: 15% of the tables at 20 / 50 / 100 labels; with 0.25 on 2% / 0% / 0% and 5% / 0% / 0%,
#: while the mean gain at 320 labels stays (+0.0006 / +0.0033 against +0.0003 / +0.0035) and
#: at 640 shrinks (+0.0005 / +0.0029 against +0.0014 / +0.0053). The factor was picked on the
#: 43 tables and checked on the 20 (benchmarks/bench_latent_weight.py).
LATENT_WEIGHT = 0.25


def raw_and_latent(raw: np.ndarray, latent: np.ndarray,
                   weight: float = LATENT_WEIGHT) -> np.ndarray:
    """``[raw | weight * latent]``, float32, ``(n_samples, n_raw + n_latent)``."""
    raw = np.asarray(raw, dtype=np.float32)
    latent = np.asarray(latent, dtype=np.float32)
    if raw.shape[0] != latent.shape[0]:
        raise ValueError(f"raw has {raw.shape[0]} rows, the latent features {latent.shape[0]}")
    return np.concatenate([raw, np.float32(weight) * latent], axis=1)


class KeepRawFeatures(TransformerMixin, BaseEstimator):
    """Transformer ``X -> [X | latent_weight * stage.transform(X)]`` around a fitted stage.

    Parameters
    ----------
    stage : fitted transformer
        The unsupervised stage (say :class:`semisup.pretrain.VAETransformer`); ``fit`` does
        not refit it (the stage never sees labels and is fitted once by the study or the
        final model).
    latent_weight : float
        Factor on the appended features (:data:`LATENT_WEIGHT`, as the study uses).
    """

    def __init__(self, stage: Any = None, latent_weight: float = LATENT_WEIGHT):
        self.stage = stage
        self.latent_weight = latent_weight

    def fit(self, X, y=None):
        self.n_features_in_ = np.asarray(X).shape[1]
        return self

    def transform(self, X):
        check_is_fitted(self, "n_features_in_")
        X = np.asarray(X, dtype=np.float32)
        # a model saved before the weight existed appended the latent means unscaled
        return raw_and_latent(X, self.stage.transform(X), getattr(self, "latent_weight", 1.0))
