"""The method registry: name -> how to describe, tune and build one method.

A method is a scikit-learn classifier whose ``fit(X, y)`` takes ``y == -1`` for unlabeled rows.
Supervised-only methods ignore those rows; semi-supervised ones use them. Methods that work on
a pretrained representation receive that representation as ``X`` (the study transforms the
encoded table once with the fitted unsupervised stage and hands every such method the result),
so a method never fits or loads the unsupervised stage itself.

Adding a method is one small module that defines its estimator (or reuses scikit-learn's) and
calls :func:`register` with a :class:`MethodSpec`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

from .._errors import ConfigError, SemisupError

__all__ = [
    "MethodSpec",
    "MethodUnavailable",
    "default_methods",
    "get_method",
    "list_methods",
    "register",
]

Representation = Literal["raw", "vae", "mixture"]


class MethodUnavailable(SemisupError, ValueError):
    """A method cannot run on this draw (say, too few labels per class); the reason is the text.

    The study records the cell as ``skipped`` with this reason instead of failing. It is also a
    ``ValueError`` so scikit-learn's checks (and callers) see the usual error for bad targets.
    """


@dataclass(frozen=True)
class MethodSpec:
    """How the study describes, tunes and builds one method.

    Parameters
    ----------
    name : str
        Lowercase with dashes, says what the method does (``latent-logreg``).
    description : str
        One line for reports and ``--help``.
    representation : {"raw", "vae", "mixture"}
        Which features the method is fitted on: the encoded table, the VAE latent means, or the
        Gaussian-mixture features.
    semi_supervised : bool
        True when the method learns from unlabeled rows (directly or through its
        representation); False for supervised-only baselines.
    search_space : callable
        ``search_space(trial) -> dict`` of hyperparameters, drawn with optuna's
        ``trial.suggest_*``.
    build : callable
        ``build(params, random_state) -> estimator`` (an unfitted scikit-learn classifier).
    default_params : dict
        Parameters used without tuning (also the first trial of every tuning run).
    family : str
        Group for reports: ``generative``, ``latent``, ``supervised``, ``classic-ssl``.
    """

    name: str
    description: str
    representation: Representation
    semi_supervised: bool
    search_space: Callable[[Any], dict[str, Any]]
    build: Callable[[dict[str, Any], int], Any]
    default_params: dict[str, Any]
    family: str = "supervised"

    @property
    def needs_pretraining(self) -> bool:
        return self.representation != "raw"


_REGISTRY: dict[str, MethodSpec] = {}


def register(spec: MethodSpec) -> MethodSpec:
    """Add ``spec`` to the registry (a second method of the same name is an error)."""
    if spec.name in _REGISTRY:
        raise ConfigError(
            f"method {spec.name!r} is registered twice; give the new one its own name"
        )
    if spec.name != spec.name.lower() or " " in spec.name or "_" in spec.name:
        raise ConfigError(f"method name {spec.name!r} must be lowercase with dashes")
    _REGISTRY[spec.name] = spec
    return spec


def _load_builtin() -> None:
    from . import _builtin  # noqa: F401  (registers the built-in methods on import)


def list_methods() -> list[MethodSpec]:
    """Every registered method, in registration order."""
    _load_builtin()
    return list(_REGISTRY.values())


def get_method(name: str) -> MethodSpec:
    """The method called ``name``; the error lists the known names."""
    _load_builtin()
    try:
        return _REGISTRY[name]
    except KeyError:
        known = ", ".join(sorted(_REGISTRY))
        raise ConfigError(f"unknown method {name!r}; known methods: {known}") from None


def default_methods() -> list[str]:
    """Names of the methods the default study runs (quick on a few thousand rows)."""
    _load_builtin()
    from ._builtin import DEFAULT_METHODS

    return [name for name in DEFAULT_METHODS if name in _REGISTRY]
