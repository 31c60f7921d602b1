"""Registers the built-in methods (each module registers itself on import).

``DEFAULT_METHODS`` is the subset the default study runs: one strong supervised baseline, the
classic graph baseline, and the generative-stage methods that are quick on a few thousand rows.
"""

from __future__ import annotations

from . import _builtin_baselines, _builtin_generative, _builtin_latent  # noqa: F401

DEFAULT_METHODS: tuple[str, ...] = (
    "supervised-logreg",
    "supervised-svm",
    "label-spreading",
    "latent-logreg",
    "latent-spreading",
    "latent-mixture-em",
    "mixture-logreg",
)
