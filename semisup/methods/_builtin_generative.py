"""Registers the semi-supervised Gaussian-mixture EM methods (Nigam et al. 2000, Gaussian)."""

from __future__ import annotations

from . import _spaces as s
from ._registry import MethodSpec, register

register(MethodSpec(
    name="mixture-em",
    description="Semi-supervised Gaussian-mixture EM on the encoded table",
    representation="raw", semi_supervised=True, family="generative",
    search_space=s.em_space_raw, build=s.build_em_raw, default_params=dict(s.EM_DEFAULTS_RAW),
))
register(MethodSpec(
    name="latent-mixture-em",
    description="Semi-supervised Gaussian-mixture EM in the VAE latent space",
    representation="vae", semi_supervised=True, family="generative",
    search_space=s.em_space_latent, build=s.build_em_latent,
    default_params=dict(s.EM_DEFAULTS_LATENT),
))
