"""The VAE's loss terms against torch.distributions (an outside reference)."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from torch.distributions import Bernoulli, Categorical, Normal, kl_divergence

from semisup import ConfigError
from semisup.data import FeatureBlock
from semisup.pretrain import (
    VAETransformer,
    bernoulli_log_likelihood,
    categorical_log_likelihood,
    gaussian_log_likelihood,
    kl_standard_normal,
    layout_from_blocks,
)
from semisup.pretrain._likelihood import reconstruction_log_likelihood


def _torch_kl(mu: torch.Tensor, logvar: torch.Tensor) -> torch.Tensor:
    q = Normal(mu, torch.exp(0.5 * logvar))
    p = Normal(torch.zeros_like(mu), torch.ones_like(mu))
    return kl_divergence(q, p).sum(-1)


def test_kl_matches_torch_distributions_on_random_parameters():
    gen = torch.Generator().manual_seed(0)
    mu = torch.randn(50, 6, generator=gen, dtype=torch.float64) * 2
    logvar = torch.randn(50, 6, generator=gen, dtype=torch.float64)
    # Reference: torch.distributions.kl_divergence(Normal, Normal), summed over dimensions.
    torch.testing.assert_close(
        kl_standard_normal(mu, logvar), _torch_kl(mu, logvar), atol=1e-5, rtol=0
    )


def test_kl_of_the_fitted_encoder_matches_torch_distributions():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(200, 5)).astype(np.float32)
    vae = VAETransformer(latent_dim=3, hidden=(16,), max_epochs=5, random_state=0).fit(X)
    with torch.no_grad():
        mu, logvar = vae.module_.encode(torch.from_numpy(X))
    # Reference: torch.distributions.kl_divergence between the encoder's diagonal Gaussian
    # and N(0, I), to 1e-5 as the issue asks.
    torch.testing.assert_close(
        kl_standard_normal(mu, logvar), _torch_kl(mu, logvar), atol=1e-5, rtol=0
    )


def test_elementwise_log_likelihoods_match_torch_distributions():
    gen = torch.Generator().manual_seed(2)
    x = torch.randn(30, 4, generator=gen, dtype=torch.float64)
    mean = torch.randn(30, 4, generator=gen, dtype=torch.float64)
    var = torch.rand(4, generator=gen, dtype=torch.float64) + 0.1
    # Reference: torch.distributions.Normal.log_prob.
    torch.testing.assert_close(
        gaussian_log_likelihood(x, mean, var), Normal(mean, var.sqrt()).log_prob(x)
    )
    bits = (torch.rand(30, 4, generator=gen) > 0.5).double()
    logits = torch.randn(30, 4, generator=gen, dtype=torch.float64) * 3
    # Reference: torch.distributions.Bernoulli(logits=...).log_prob.
    torch.testing.assert_close(
        bernoulli_log_likelihood(bits, logits), Bernoulli(logits=logits).log_prob(bits)
    )
    picks = torch.randint(0, 5, (30,), generator=gen)
    onehot = torch.nn.functional.one_hot(picks, 5).double()
    cat_logits = torch.randn(30, 5, generator=gen, dtype=torch.float64)
    # Reference: torch.distributions.Categorical(logits=...).log_prob.
    torch.testing.assert_close(
        categorical_log_likelihood(onehot, cat_logits),
        Categorical(logits=cat_logits).log_prob(picks),
    )


def test_mixed_block_likelihood_is_the_sum_of_its_parts():
    blocks = (
        FeatureBlock("numeric", 0, 1, "age"),
        FeatureBlock("missing", 1, 2, "age"),
        FeatureBlock("categorical", 2, 5, "colour"),
        FeatureBlock("numeric", 5, 6, "height"),
    )
    layout = layout_from_blocks(blocks, 6)
    gen = torch.Generator().manual_seed(3)
    x = torch.cat(
        [
            torch.randn(10, 1, generator=gen, dtype=torch.float64),
            (torch.rand(10, 1, generator=gen) > 0.5).double(),
            torch.nn.functional.one_hot(torch.randint(0, 3, (10,), generator=gen), 3).double(),
            torch.randn(10, 1, generator=gen, dtype=torch.float64),
        ],
        dim=1,
    )
    out = torch.randn(10, 6, generator=gen, dtype=torch.float64)
    var = torch.tensor([0.5, 2.0], dtype=torch.float64)
    got = reconstruction_log_likelihood(x, out, var, layout, layout.tensors())
    # Reference: the same sum built from torch.distributions objects.
    expected = (
        Normal(out[:, 0], var[0].sqrt()).log_prob(x[:, 0])
        + Bernoulli(logits=out[:, 1]).log_prob(x[:, 1])
        + Categorical(logits=out[:, 2:5]).log_prob(x[:, 2:5].argmax(1))
        + Normal(out[:, 5], var[1].sqrt()).log_prob(x[:, 5])
    )
    torch.testing.assert_close(got, expected)


def test_blocks_that_do_not_cover_the_columns_are_a_clear_error():
    with pytest.raises(ConfigError, match="blocks cover 2 columns but X has 3"):
        layout_from_blocks((FeatureBlock("numeric", 0, 2, "a"),), 3)
    with pytest.raises(ConfigError, match="'b'.*next column is 1"):
        layout_from_blocks(
            (FeatureBlock("numeric", 0, 1, "a"), FeatureBlock("numeric", 2, 3, "b")), 3
        )
    with pytest.raises(ConfigError, match="kind 'text'"):
        layout_from_blocks((FeatureBlock("text", 0, 1, "a"),), 1)  # type: ignore[arg-type]


@pytest.mark.parametrize("beta", [0.3, 1.0])
def test_score_samples_is_the_elbo_whatever_the_training_beta(beta):
    rng = np.random.default_rng(4)
    X = (rng.normal(size=(120, 5)) * [1.0, 2.0, 0.5, 3.0, 1.0] + 10.0).astype(np.float32)
    vae = VAETransformer(latent_dim=3, hidden=(16,), beta=beta, max_epochs=5, random_state=0)
    vae.fit(X)
    x = torch.from_numpy(X.astype(np.float64))
    mean = torch.from_numpy(np.asarray(vae.mean_, dtype=np.float64))
    scale = torch.from_numpy(np.asarray(vae.scale_, dtype=np.float64))
    with torch.no_grad():
        mu, logvar = vae.module_.encode(((x - mean) / scale).float())
        sd_out = scale * vae.module_.variance().double().sqrt()  # decoder sd, original units
        q = Normal(mu.double(), torch.exp(0.5 * logvar.double()))
        # Reference: torch.distributions -- KL(q(z|x) || N(0, I)) with weight 1 (the ELBO,
        # Kingma & Welling 2014 eq. 3) and the decoder's Normal log-density in the original
        # units of X, averaged over the model's fixed reparameterisation draws.
        kl = kl_divergence(q, Normal(torch.zeros_like(q.loc), torch.ones_like(q.loc))).sum(-1)
        recs = []
        for eps in torch.from_numpy(vae.score_draws_):
            z = q.loc + q.scale * eps.double()
            out = vae.module_.decode(z.float()).double()
            recs.append(Normal(mean + scale * out, sd_out).log_prob(x).sum(-1))
        rec = torch.stack(recs).mean(0)
    elbo = (rec - kl).numpy()
    np.testing.assert_allclose(vae.score_samples(X), elbo, rtol=1e-4, atol=1e-3)
    assert vae.score(X) == pytest.approx(float(elbo.mean()), rel=1e-4, abs=1e-3)
    if beta != 1.0:  # the training objective rec - beta * KL is a different number
        assert np.max(np.abs(vae.score_samples(X) - (rec - beta * kl).numpy())) > 1e-2
