"""Unsupervised stage: VAE and Gaussian-mixture representations, cached by content hash."""

from __future__ import annotations

from ._config import VAEConfig
from ._vae_transformer import VAETransformer

__all__ = ["VAEConfig", "VAETransformer"]
