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

__all__ = ["KeepRawFeatures", "raw_and_latent"]


def raw_and_latent(raw: np.ndarray, latent: np.ndarray) -> np.ndarray:
    """``[raw | latent]``, float32, ``(n_samples, n_raw + n_latent)``."""
    raw = np.asarray(raw, dtype=np.float32)
    latent = np.asarray(latent, dtype=np.float32)
    if raw.shape[0] != latent.shape[0]:
        raise ValueError(f"raw has {raw.shape[0]} rows, the latent features {latent.shape[0]}")
    return np.concatenate([raw, latent], axis=1)


class KeepRawFeatures(TransformerMixin, BaseEstimator):
    """Transformer ``X -> [X | stage.transform(X)]`` around an already fitted stage.

    Parameters
    ----------
    stage : fitted transformer
        The unsupervised stage (say :class:`semisup.pretrain.VAETransformer`); ``fit`` does
        not refit it (the stage never sees labels and is fitted once by the study or the
        final model).
    """

    def __init__(self, stage: Any = None):
        self.stage = stage

    def fit(self, X, y=None):
        self.n_features_in_ = np.asarray(X).shape[1]
        return self

    def transform(self, X):
        check_is_fitted(self, "n_features_in_")
        X = np.asarray(X, dtype=np.float32)
        return raw_and_latent(X, self.stage.transform(X))
