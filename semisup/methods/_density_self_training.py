"""Density-aware self-training around gradient-boosted trees.

Self-training adopts the trees' confident predictions on unlabeled rows as labels and refits.
Following Kim et al. (2023, "Revisiting self-training with regularized pseudo-labeling for
tabular data") the confidence of a pseudo-label is regularised by a generative model's
likelihood of the row, so rows in low-density regions (where the trees extrapolate) count
less; following Nigam et al. (2000) the adopted rows enter the fit with a weight below that of
a real label.

Per round: the trees give each remaining unlabeled row its class probabilities ``p``; its
density score ``r`` is the share of all rows with a lower log-likelihood under a diagonal
Gaussian mixture fitted on every row (labeled and unlabeled, labels unused); the regularised
confidence is ``s = max(p) * r ** density_power``. Rows with ``s > threshold`` take the arg-max
class as their label for good and weight ``unlabeled_weight * r ** density_power`` in every
later fit. With
``density_power=0`` and ``unlabeled_weight=1`` this is scikit-learn's ``SelfTrainingClassifier``
(threshold criterion) around the same trees.
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np
from scipy.stats import rankdata
from sklearn.mixture import GaussianMixture

from ._spec import Variant, register_variants
from ._supervised import LabeledGBT

__all__ = ["DensitySelfTrainingGBT", "density_rank"]


def density_rank(log_density: np.ndarray) -> np.ndarray:
    """Share of rows with a lower log-density, in (0, 1]: the densest row gets 1."""
    return rankdata(log_density, method="max") / log_density.shape[0]


class DensitySelfTrainingGBT(LabeledGBT):
    """Self-training of histogram gradient-boosted trees with density-regularised confidence.

    Parameters
    ----------
    learning_rate, max_iter, max_leaf_nodes, min_samples_leaf, l2_regularization :
        The trees' (see :class:`LabeledGBT`).
    threshold : float
        Regularised confidence a pseudo-label needs.
    density_power : float
        Exponent of the density score (0: plain confidence).
    unlabeled_weight : float in (0, 1]
        Weight of an adopted row relative to a labeled row (times its density score to the
        ``density_power``).
    n_components : int
        Components of the diagonal Gaussian mixture that scores density (capped at the rows).
    rounds : int
        Most self-training rounds.
    min_density : float in [0, 1)
        Rows whose density score is at most this share are never pseudo-labeled (0.5: only
        rows denser than the median row; 0: no such floor).
    random_state : int or None

    Attributes
    ----------
    density_score_ : (n_samples,) density score of every row given to ``fit``
    pseudo_labeled_ : int, rows adopted; adopted_ : (n_samples,) bool, the adopted rows;
    n_rounds_ : int
    """

    uses_unlabeled = True
    tuning_defaults: ClassVar[dict] = {
        **LabeledGBT.tuning_defaults, "threshold": 0.7, "density_power": 1.0,
        "unlabeled_weight": 0.5,
    }

    @staticmethod
    def tuning_space(trial) -> dict:
        return {
            **LabeledGBT.tuning_space(trial),
            "threshold": trial.suggest_float("threshold", 0.5, 0.95),
            "density_power": trial.suggest_float("density_power", 0.0, 2.0),
            "unlabeled_weight": trial.suggest_float("unlabeled_weight", 0.1, 1.0, log=True),
        }

    def __init__(self, learning_rate: float = 0.1, max_iter: int = 100,
                 max_leaf_nodes: int = 15, min_samples_leaf: int = 5,
                 l2_regularization: float = 0.0, threshold: float = 0.7,
                 density_power: float = 1.0, unlabeled_weight: float = 0.5,
                 n_components: int = 5, rounds: int = 5, min_density: float = 0.0,
                 random_state=None):
        super().__init__(learning_rate=learning_rate, max_iter=max_iter,
                         max_leaf_nodes=max_leaf_nodes, min_samples_leaf=min_samples_leaf,
                         l2_regularization=l2_regularization, random_state=random_state)
        self.threshold = threshold
        self.density_power = density_power
        self.unlabeled_weight = unlabeled_weight
        self.n_components = n_components
        self.rounds = rounds
        self.min_density = min_density

    def _fit_encoded(self, X, y_code):
        self.density_score_ = self._density(X)
        has_label = y_code >= 0
        target = y_code.copy()
        weight = np.where(has_label, 1.0, 0.0)
        self.n_rounds_ = 0
        while not has_label.all() and self.n_rounds_ < int(self.rounds):
            self.n_rounds_ += 1
            super()._fit_encoded(X[has_label], target[has_label], weight[has_label])
            rest = np.flatnonzero(~has_label)
            proba = self.model_.predict_proba(X[rest])
            score = proba.max(axis=1) * self.density_score_[rest] ** float(self.density_power)
            chosen = (score > float(self.threshold)) & (
                self.density_score_[rest] > float(self.min_density))
            if not chosen.any():
                break
            rows = rest[chosen]
            target[rows] = self.model_.classes_[np.argmax(proba[chosen], axis=1)]
            weight[rows] = (float(self.unlabeled_weight)
                            * self.density_score_[rows] ** float(self.density_power))
            has_label[rows] = True
        super()._fit_encoded(X[has_label], target[has_label], weight[has_label])
        self.adopted_ = has_label & (y_code < 0)
        self.pseudo_labeled_ = int(self.adopted_.sum())

    def _density(self, X: np.ndarray) -> np.ndarray:
        k = int(max(1, min(self.n_components, X.shape[0] // 2)))
        gm = GaussianMixture(k, covariance_type="diag", reg_covar=1e-3,
                             random_state=self.random_state).fit(X)
        return density_rank(gm.score_samples(X))


register_variants(
    DensitySelfTrainingGBT,
    raw=Variant("density-self-training", "Self-training of gradient-boosted trees, pseudo-label "
                "confidence regularised by a Gaussian mixture's density (Kim et al. 2023)",
                family="generative"),
    vae=Variant("latent-density-self-training", "Density-regularised self-training of "
                "gradient-boosted trees on the VAE latent means", family="generative"),
)
