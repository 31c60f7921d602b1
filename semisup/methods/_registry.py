"""The method registry's look-ups: name -> how to describe, tune and build one method.

A method is a scikit-learn classifier whose ``fit(X, y)`` takes ``y == -1`` for unlabeled rows.
Supervised-only methods ignore those rows; semi-supervised ones use them. Methods that work on
a pretrained representation receive that representation as ``X`` (the study transforms the
encoded table once with the fitted unsupervised stage and hands every such method the result),
so a method never fits or loads the unsupervised stage itself.

Each estimator module registers its own variants (see :func:`._spec.register_variants`); this
module imports them, so the built-in methods are registered once ``semisup.methods`` is.
"""

from __future__ import annotations

from .._errors import ConfigError

# The estimator modules register their methods on import (order = registration order).
from . import (  # noqa: F401
    _classic,
    _density_self_training,
    _m2,
    _m2_spreading,
    _mixture_em,
    _supervised,
)
from ._spec import MethodSpec, MethodUnavailable, default_rules, register, registered

__all__ = [
    "FAMILY_ORDER",
    "MethodSpec",
    "MethodUnavailable",
    "default_methods",
    "get_method",
    "list_methods",
    "register",
]


def list_methods() -> list[MethodSpec]:
    """Every registered method, in registration order."""
    return list(registered().values())


def get_method(name: str) -> MethodSpec:
    """The method called ``name``; the error lists the known names."""
    table = registered()
    try:
        return table[name]
    except KeyError:
        known = ", ".join(sorted(table))
        raise ConfigError(f"unknown method {name!r}; known methods: {known}") from None


def default_methods(*, pool_size: int | None = None) -> list[str]:
    """Names of the methods the default study runs (quick on a few thousand rows).

    Parameters
    ----------
    pool_size : int or None
        Labeled rows of the study. Methods that need many labels to be tuned (their
        registration names the smallest count) join only when ``pool_size`` reaches it; None
        leaves them out.
    """
    table = registered()
    names = [
        name for name, smallest in default_rules().items()
        if name in table and (smallest == 0 or (pool_size is not None and pool_size >= smallest))
    ]
    # Baselines first, then by family (a stable order for reports, whatever the import order).
    return sorted(names, key=lambda n: FAMILY_ORDER.get(table[n].family, len(FAMILY_ORDER)))


#: Method families from the simplest to the most involved: labeled rows only, then methods
#: that use the unlabeled rows without a model of them, then those on a fitted stage. The
#: default set is listed in this order and the plan prefers the simpler of equal options.
FAMILY_ORDER = {"supervised": 0, "classic-ssl": 1, "latent": 2, "generative": 3}
