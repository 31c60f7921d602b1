"""The VAE network (Kingma & Welling 2014): encoder, reparameterisation, decoder. No I/O."""

from __future__ import annotations

import math
from typing import Any

import torch
from torch import nn
from torch.nn import functional as F

from ._likelihood import BlockLayout, kl_standard_normal, reconstruction_log_likelihood

__all__ = ["VAEModule", "row_terms"]


def _mlp(sizes: list[int]) -> nn.Sequential:
    layers: list[nn.Module] = []
    for width_in, width_out in zip(sizes[:-1], sizes[1:], strict=True):
        layers += [nn.Linear(width_in, width_out), nn.ReLU()]
    return nn.Sequential(*layers)


class VAEModule(nn.Module):
    """Encoder q(z|x) = N(mu(x), diag(exp(logvar(x)))) and a decoder whose single output
    layer holds, column by column, Gaussian means, Bernoulli logits and categorical logits.

    ``hidden=()`` gives the linear model (affine encoder and decoder) used to check the ELBO
    against probabilistic PCA / factor analysis. ``variational=False`` is a plain
    deterministic autoencoder (z = mu, no KL).
    """

    @classmethod
    def from_config(cls, cfg: Any, n_features: int, layout: BlockLayout) -> VAEModule:
        """The module a :class:`VAEConfig` describes for ``n_features`` columns laid out as
        ``layout`` (one learned variance per numeric column, or one shared)."""
        return cls(
            n_features,
            cfg.latent_dim,
            cfg.hidden,
            n_variances=len(layout.numeric) if cfg.decoder_variance == "feature" else 1,
            variational=cfg.kind == "vae",
            min_variance=cfg.min_variance,
        )

    def __init__(
        self,
        n_features: int,
        latent_dim: int,
        hidden: tuple[int, ...],
        *,
        n_variances: int,
        variational: bool = True,
        min_variance: float = 1e-3,
    ) -> None:
        super().__init__()
        self.n_features = n_features
        self.latent_dim = latent_dim
        self.hidden = tuple(hidden)
        self.variational = variational
        self.min_variance = float(min_variance)
        enc_sizes = [n_features, *self.hidden]
        dec_sizes = [latent_dim, *reversed(self.hidden)]
        self.encoder = _mlp(enc_sizes)
        self.enc_mu = nn.Linear(enc_sizes[-1], latent_dim)
        self.enc_logvar = nn.Linear(enc_sizes[-1], latent_dim) if variational else None
        self.decoder = _mlp(dec_sizes)
        self.dec_out = nn.Linear(dec_sizes[-1], n_features)
        # variance = min_variance + softplus(raw); start at variance 1 (scaled units)
        start = math.log(math.expm1(max(1.0 - self.min_variance, 1e-6)))
        self.raw_variance = nn.Parameter(torch.full((max(n_variances, 1),), start))

    @property
    def linear(self) -> bool:
        return not self.hidden

    def encode(self, x: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor | None]:
        h = self.encoder(x)  # (batch, hidden[-1])
        logvar = self.enc_logvar(h) if self.enc_logvar is not None else None
        return self.enc_mu(h), logvar  # (batch, latent) each

    @staticmethod
    def reparameterize(
        mu: torch.Tensor, logvar: torch.Tensor, eps: torch.Tensor | None = None
    ) -> torch.Tensor:
        """z = mu + sigma * eps with eps ~ N(0, I) (Kingma & Welling 2014, section 2.4)."""
        if eps is None:
            eps = torch.randn_like(mu)
        return mu + eps * torch.exp(0.5 * logvar)  # (batch, latent)

    def decode(self, z: torch.Tensor) -> torch.Tensor:
        return self.dec_out(self.decoder(z))  # (batch, n_features)

    def variance(self) -> torch.Tensor:
        """Gaussian variance of the numeric columns, (n_numeric,) or (1,)."""
        return self.min_variance + F.softplus(self.raw_variance)


def row_terms(
    module: VAEModule,
    x: torch.Tensor,
    layout: BlockLayout,
    index: tuple[torch.Tensor, torch.Tensor],
    eps: torch.Tensor | None = None,
) -> tuple[torch.Tensor, torch.Tensor, torch.Tensor]:
    """Per-row reconstruction log-likelihood, KL and latent mean: (batch,), (batch,), (batch, k).

    ``eps`` (latent,) or (batch, latent) fixes the reparameterisation noise; None draws it.
    For a linear decoder the Gaussian part is the exact expectation over q (no noise).
    """
    mu, logvar = module.encode(x)
    if logvar is None:  # plain autoencoder
        out = module.decode(mu)
        rec = reconstruction_log_likelihood(x, out, module.variance(), layout, index)
        return rec, torch.zeros_like(rec), mu
    kl = kl_standard_normal(mu, logvar)
    if module.linear and layout.numeric:
        numeric_out = module.decode(mu)  # (batch, n_features)
        weight_sq = module.dec_out.weight.pow(2)  # (n_features, latent)
        extra = logvar.exp() @ weight_sq.T  # (batch, n_features)
        if layout.all_numeric:
            out = numeric_out
        else:
            out = module.decode(module.reparameterize(mu, logvar, eps))
        rec = reconstruction_log_likelihood(
            x,
            out,
            module.variance(),
            layout,
            index,
            numeric_out=numeric_out,
            numeric_extra=extra,
        )
        return rec, kl, mu
    out = module.decode(module.reparameterize(mu, logvar, eps))
    rec = reconstruction_log_likelihood(x, out, module.variance(), layout, index)
    return rec, kl, mu
