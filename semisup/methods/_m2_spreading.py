"""M2 blended with label spreading: a generative classifier and a graph over the same rows.

M2 (Kingma et al. 2014, :mod:`._m2`) learns ``q(y | x)`` from a generative model of every row;
label spreading (Zhou et al. 2004, :mod:`._classic`) moves the labels along a k-nearest-neighbour
graph of the same rows. They fail in different places (M2 where its one-hidden-layer
classifier underfits, the graph where a class's rows are not connected), so the blend averages
their class probabilities: ``p = m2_weight * p_M2 + (1 - m2_weight) * p_spreading``, a linear
opinion pool (Stone 1961). Both parts are fitted on the rows given to ``fit`` (labeled and
unlabeled) and nothing else.
"""

from __future__ import annotations

from typing import ClassVar

from ._base import PartiallyLabeledClassifier
from ._classic import KNNLabelSpreading
from ._m2 import M2Classifier
from ._proba import align_proba
from ._spec import Variant, register_variants

__all__ = ["M2SpreadingBlend"]


class M2SpreadingBlend(PartiallyLabeledClassifier):
    """Average of M2's and label spreading's class probabilities.

    Parameters
    ----------
    m2_weight : float in [0, 1]
        Share of M2 in the average (0: label spreading alone, 1: M2 alone).
    alpha : float
        M2's weight of the classifier's labeled log-likelihood (see :class:`M2Classifier`).
    max_epochs : int
        M2's most epochs.
    n_neighbors : int
        Graph degree of the label spreading.
    spread_alpha : float in (0, 1)
        Clamping factor of the label spreading.
    scaling : {"minmax", "none"}
        Feature scaling of the graph (see :class:`KNNLabelSpreading`).
    n_threads : int or None
        torch threads of M2.
    random_state : int or None
        Seed of M2 (label spreading is deterministic).

    Attributes
    ----------
    m2_, spreading_ : the fitted parts.
    """

    uses_unlabeled = True
    # m2_weight 0.3: on scikit-learn's digits (seed 7, 2 draws, 20 / 50 / 100 / 200 labels)
    # 0.3 beat 0.5 and 0.7 at every budget (0.862 / 0.924 / 0.955 / 0.957 with M2 early
    # stopped; 0.5: 0.837 / 0.917 / 0.937 / 0.952).
    tuning_defaults: ClassVar[dict] = {"m2_weight": 0.3, "alpha": 0.1, "n_neighbors": 7}

    @staticmethod
    def tuning_space(trial) -> dict:
        return {
            "m2_weight": trial.suggest_float("m2_weight", 0.2, 0.8),
            "alpha": trial.suggest_float("alpha", 0.02, 2.0, log=True),
            "n_neighbors": trial.suggest_int("n_neighbors", 3, 20),
        }

    def __init__(self, m2_weight: float = 0.3, alpha: float = 0.1, max_epochs: int = 60,
                 n_neighbors: int = 7, spread_alpha: float = 0.2, scaling: str = "minmax",
                 n_threads: int | None = 1, random_state=None):
        self.m2_weight = m2_weight
        self.alpha = alpha
        self.max_epochs = max_epochs
        self.n_neighbors = n_neighbors
        self.spread_alpha = spread_alpha
        self.scaling = scaling
        self.n_threads = n_threads
        self.random_state = random_state

    def _fit_encoded(self, X, y_code):
        from .._errors import ConfigError

        if not 0.0 <= float(self.m2_weight) <= 1.0:
            raise ConfigError(
                f"M2SpreadingBlend: m2_weight={self.m2_weight!r} must lie in [0, 1]")
        # The parts see the integer codes as their labels, so their columns are code order.
        self.m2_ = M2Classifier(alpha=self.alpha, max_epochs=self.max_epochs,
                                n_threads=self.n_threads,
                                random_state=self.random_state).fit(X, y_code)
        self.spreading_ = KNNLabelSpreading(n_neighbors=self.n_neighbors,
                                            alpha=self.spread_alpha,
                                            scaling=self.scaling).fit(X, y_code)

    def _proba_encoded(self, X):
        w = float(self.m2_weight)
        k = self.classes_.size
        m2, spreading = (align_proba(model.predict_proba(X), model.classes_.astype(int), k)
                         for model in (self.m2_, self.spreading_))
        return w * m2 + (1.0 - w) * spreading


register_variants(
    M2SpreadingBlend,
    raw=Variant("m2-spreading", "Average of M2's and label spreading's class probabilities on "
                "the encoded table", family="generative"),
)
