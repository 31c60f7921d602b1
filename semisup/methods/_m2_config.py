"""Frozen settings of M2 (Kingma et al. 2014), checked in one place.

:class:`M2Config` is the one declaration of M2's settings: their defaults, meaning and
allowed values. :class:`~semisup.methods.M2Classifier` keeps them as keyword arguments only
because scikit-learn's estimator contract (``get_params`` / ``set_params`` / ``clone``) reads
an estimator's parameters from its ``__init__``; its defaults are this class's, and its
``config()`` hands training this frozen record.
"""

from __future__ import annotations

import numbers
from dataclasses import dataclass, fields
from typing import Any

from .._rules import Integer, Number, check_rules

__all__ = ["M2Config"]



#: M2's settings -> the values each takes (M2Config checks them all in one loop).
_M2_RULES = {
    "alpha": Number(0.0),
    "hidden": Integer(1),
    "latent_dim": Integer(1),
    "batch_size": Integer(1),
    "max_epochs": Integer(1),
    "patience": Integer(1),
    "min_validation_per_class": Integer(0),
    "learning_rate": Number(0.0, low_open=True),
    "validation_fraction": Number(0.0, 0.9),
    "refit_fraction": Number(0.0),
    "weight_decay": Number(0.0),
    "n_threads": Integer(1, optional=True),
    "random_state": Integer(0, optional=True),
}


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
        check_rules(self, _M2_RULES)

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
