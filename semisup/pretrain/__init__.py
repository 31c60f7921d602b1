"""Unsupervised stage: VAE and Gaussian-mixture representations, cached by content hash.

- :class:`VAETransformer`: VAE (Kingma & Welling 2014) with a mixed-type likelihood
  (Gaussian / Bernoulli / categorical per ``FeatureBlock``); ``transform`` gives latent means.
- :class:`MixtureTransformer`: BIC-selected Gaussian mixture (scikit-learn's
  GaussianMixture); ``transform`` gives responsibilities and/or log-densities.
- :func:`fit_representation`: fit one of them once, or load it from the cache.
"""

from __future__ import annotations

from ._config import VAEConfig
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
)
from ._mixture import MixtureTransformer, component_log_densities
from ._vae_transformer import VAETransformer

__all__ = [
    "REPRESENTATION_KINDS",
    "BlockLayout",
    "MixtureTransformer",
    "VAEConfig",
    "VAETransformer",
    "bernoulli_log_likelihood",
    "categorical_log_likelihood",
    "component_log_densities",
    "elbo",
    "fit_representation",
    "gaussian_log_likelihood",
    "kl_standard_normal",
    "layout_from_blocks",
    "representation_params",
    "representation_steps",
]
