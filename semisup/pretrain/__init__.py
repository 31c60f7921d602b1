"""Unsupervised stage: VAE and Gaussian-mixture representations, cached by content hash.

- :class:`VAETransformer`: VAE (Kingma & Welling 2014) with a mixed-type likelihood
  (Gaussian / Bernoulli / categorical per ``FeatureBlock``); ``transform`` gives latent means.
- :class:`MixtureTransformer`: BIC-selected Gaussian mixture (scikit-learn's
  GaussianMixture); ``transform`` gives responsibilities and/or log-densities.
- :func:`fit_representation`: fit one of them once, or load it from the cache.
- :func:`train_epochs`: the one torch training loop (epochs, optimiser steps, early stopping,
  best-state copy, progress) that the VAE and M2 (``semisup.methods``) both train with;
  :func:`torch_state` / :func:`pinned_threads` seed torch and pin its threads around it.
"""

from __future__ import annotations

from ._cache import load_entry
from ._config import VAEConfig, check_integer, check_number
from ._fit import (
    REPRESENTATION_KINDS,
    fit_representation,
    representation_params,
    representation_steps,
)
from ._likelihood import (
    BlockLayout,
    bernoulli_log_likelihood,
    categorical_log_likelihood,
    elbo,
    gaussian_log_likelihood,
    kl_standard_normal,
    layout_from_blocks,
    reconstruction_log_likelihood,
)
from ._mixture import COVARIANCE_TYPES, MixtureTransformer, component_log_densities
from ._train import EpochLoop, pinned_threads, torch_state, train_epochs
from ._vae_transformer import VAETransformer

__all__ = [
    "COVARIANCE_TYPES",
    "REPRESENTATION_KINDS",
    "BlockLayout",
    "EpochLoop",
    "MixtureTransformer",
    "VAEConfig",
    "VAETransformer",
    "bernoulli_log_likelihood",
    "categorical_log_likelihood",
    "check_integer",
    "check_number",
    "component_log_densities",
    "elbo",
    "fit_representation",
    "gaussian_log_likelihood",
    "kl_standard_normal",
    "layout_from_blocks",
    "load_entry",
    "pinned_threads",
    "reconstruction_log_likelihood",
    "representation_params",
    "representation_steps",
    "torch_state",
    "train_epochs",
]
