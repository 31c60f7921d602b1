"""Frozen settings of M2 (Kingma et al. 2014), checked in one place.

:class:`M2Config` is the one declaration of M2's settings: their defaults, meaning and
allowed values. :class:`~semisup.methods.M2Classifier` keeps them as keyword arguments only
because scikit-learn's estimator contract (``get_params`` / ``set_params`` / ``clone``) reads
an estimator's parameters from its ``__init__``; its defaults are this class's, and its
``config()`` hands training this frozen record.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, fields
from typing import Any

from ..pretrain import check_integer, check_number

__all__ = ["M2Config"]


@dataclass(frozen=True)
class M2Config:
    """Settings of an M2 fit (see :class:`~semisup.methods.M2Classifier` for the model).

    The defaults fit scikit-learn's digits (1,797 x 64, 2 labels per class) in about a minute
    on one CPU thread.
    """

    # weight of the classifier's labeled log-likelihood: the paper's alpha divided by the row
    # count (the paper uses 0.1)
    alpha: float = 0.1
    hidden: int = 128  # units of the one hidden layer of encoder, decoder and classifier
    latent_dim: int = 16  # size of z
    learning_rate: float = 3e-3  # Adam step size
    batch_size: int = 128  # unlabeled rows per step (each step also draws labeled rows)
    max_epochs: int = 60  # most passes over the unlabeled rows
    patience: int = 8  # epochs without a better validation log-loss before stopping
    # share of the labeled rows held out for early stopping (stratified)
    validation_fraction: float = 0.2
    # early stopping only when the held-out share holds at least this many rows per class on
    # average; with fewer, max_epochs are trained on every label
    min_validation_per_class: int = 5
    # after early stopping, resume from the best state with every label for
    # ceil(refit_fraction * best_epoch) more epochs (0: keep the best state)
    refit_fraction: float = 0.25
    weight_decay: float = 1e-4  # L2 penalty of Adam
    n_threads: int | None = 1  # torch threads during fit and predict; None leaves them
    random_state: int | None = None  # seed; None = 0

    def __post_init__(self) -> None:
        check_number("alpha", self.alpha, 0.0, math.inf)
        for name in ("hidden", "latent_dim", "batch_size", "max_epochs", "patience"):
            check_integer(name, getattr(self, name), 1)
        check_integer("min_validation_per_class", self.min_validation_per_class, 0)
        check_number("learning_rate", self.learning_rate, 0.0, math.inf, low_open=True)
        check_number("validation_fraction", self.validation_fraction, 0.0, 0.9)
        check_number("refit_fraction", self.refit_fraction, 0.0, math.inf)
        check_number("weight_decay", self.weight_decay, 0.0, math.inf)
        if self.n_threads is not None:
            check_integer("n_threads", self.n_threads, 1)
        if self.random_state is not None:
            check_integer("random_state", self.random_state, 0)

    @classmethod
    def from_params(cls, params: dict[str, Any]) -> M2Config:
        """Build from an estimator's parameters; whole numbers of any numeric type (numpy's
        too) count as integers, as M2 always took them."""
        values: dict[str, Any] = {}
        for f in fields(cls):
            value = params.get(f.name, f.default)
            if isinstance(value, bool):
                pass  # refused by the checks
            elif f.type == "float" and isinstance(value, numbers.Real):
                value = float(value)
            elif isinstance(value, numbers.Integral):
                value = int(value)
            values[f.name] = value
        return cls(**values)
