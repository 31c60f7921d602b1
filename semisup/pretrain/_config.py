"""Frozen settings of the VAE stage, checked in one place."""

from __future__ import annotations

from dataclasses import asdict, dataclass, fields
from typing import Any

from .._errors import ConfigError
from .._rules import Choice, Integer, Number, OfType, Refused, Rule, check_rules

__all__ = ["VAEConfig", "VAE_KINDS", "DECODER_VARIANCES", "SCALINGS", "check_integer",
           "check_number"]

VAE_KINDS = ("vae", "ae")
DECODER_VARIANCES = ("feature", "isotropic")
SCALINGS = ("standard", "none")


@dataclass(frozen=True)
class VAEConfig:
    """Settings of a VAE (Kingma & Welling 2014) or plain autoencoder fit.

    The defaults fit scikit-learn's digits (1,797 x 64) in a few seconds on 2 CPU cores.
    """

    latent_dim: int = 16  # size of z
    hidden: tuple[int, ...] = (128, 64)  # encoder widths; the decoder mirrors them; () = linear
    # Weight of the KL term after warm-up (1.0 = the ELBO). A beta below 1 weights the
    # reconstruction over the prior (the beta-VAE of Higgins et al. 2017 uses beta != 1); for
    # representation learning with few labels this trades ELBO for more informative latent
    # means (common practice, no source). Measured on scikit-learn's digits, 5 repeats, mean
    # holdout accuracy of latent-spreading / latent-mixture-em / latent-logreg over 20-200
    # labels: beta 1: 0.824/0.796/0.732; 0.5: 0.847/0.822/0.755; 0.3: 0.856/0.816/0.759;
    # 0.1: 0.868/0.812/0.774; 0.05: 0.870/0.807/0.778 (benchmarks/results/methods.md).
    # score_samples / score stay the true ELBO (KL weight 1) whatever beta is.
    beta: float = 0.1
    learning_rate: float = 3e-3  # Adam step size
    max_epochs: int = 150  # upper bound on passes over the training rows
    batch_size: int = 256  # rows per minibatch
    patience: int = 10  # epochs without held-out improvement before stopping
    validation_fraction: float = 0.1  # share of rows held out for early stopping
    kl_warmup_epochs: int = 10  # KL weight rises linearly from 0 to beta over these epochs
    grad_clip: float | None = 10.0  # max global gradient norm; None = no clipping
    kind: str = "vae"  # "vae" or "ae" (deterministic autoencoder, no KL)
    decoder_variance: str = "feature"  # Gaussian variance: per numeric column or one shared
    min_variance: float = 1e-3  # floor on the Gaussian variance (in scaled units)
    scale: str = "standard"  # standardise numeric columns inside the model, or "none"
    tol: float = 1e-4  # held-out ELBO gain (nats per row) that counts as an improvement
    n_threads: int | None = 1  # torch.set_num_threads during fit/transform; None = as is
    random_state: int | None = 0  # seed; None draws a fresh one
    progress: bool = False  # tqdm bar on a terminal (logging otherwise)

    def __post_init__(self) -> None:
        # whole numbers of any integer type are kept as int
        for name, value in check_rules(self, _VAE_RULES).items():
            object.__setattr__(self, name, value)

    @classmethod
    def from_params(cls, params: dict[str, Any]) -> VAEConfig:
        """Build from a parameter dict; unknown keys are a ConfigError naming the key."""
        names = {f.name for f in fields(cls)}
        unknown = sorted(set(params) - names)
        if unknown:
            raise ConfigError(
                f"unknown VAE parameter {unknown[0]!r}; allowed: {', '.join(sorted(names))}"
            )
        values = dict(params)
        if "hidden" in values and isinstance(values["hidden"], list):
            values["hidden"] = tuple(values["hidden"])
        return cls(**values)

    def to_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out["hidden"] = list(self.hidden)
        return out


@dataclass(frozen=True)
class _Widths(Rule):
    """Hidden layer widths: a tuple of whole numbers >= 1 (() = a linear model)."""

    def clean(self, value: Any) -> tuple[int, ...]:
        if not isinstance(value, tuple) or not all(
                isinstance(h, int) and not isinstance(h, bool) and h >= 1 for h in value):
            raise Refused(self.describe())
        return value

    def describe(self) -> str:
        return "give a tuple of positive integers such as (128, 64), or () for a linear model"


def _choice(choices: tuple[str, ...]) -> Choice:
    return Choice(choices, words="choose one of {}", quote=True)


#: The VAE's settings -> the values each takes (VAEConfig checks them all in one loop).
_VAE_RULES: dict[str, Rule] = {
    "latent_dim": Integer(1),
    "hidden": _Widths(),
    "beta": Number(0.0),
    "learning_rate": Number(0.0, low_open=True),
    "max_epochs": Integer(1),
    "batch_size": Integer(1),
    "patience": Integer(1),
    "validation_fraction": Number(0.0, 0.9),
    "kl_warmup_epochs": Integer(0),
    "grad_clip": Number(0.0, low_open=True, optional=True),
    "kind": _choice(VAE_KINDS),
    "decoder_variance": _choice(DECODER_VARIANCES),
    "min_variance": Number(0.0, 1.0, low_open=True),
    "scale": _choice(SCALINGS),
    "tol": Number(0.0),
    "n_threads": Integer(1, optional=True),
    "random_state": Integer(0, optional=True),
    "progress": OfType(bool, "give True or False"),
}


def check_integer(name: str, value: object, low: int) -> None:
    """ConfigError naming ``name`` unless ``value`` is a whole number (not a bool) >=
    ``low``."""
    check_rules({name: value}, {name: Integer(low)})


def check_number(
    name: str, value: object, low: float, high: float, *, low_open: bool = False
) -> None:
    """ConfigError naming ``name`` unless ``value`` is a number in [low, high] (or (low,
    high] with ``low_open``); +inf passes only when ``high`` is inf."""
    check_rules({name: value}, {name: Number(low, high, low_open=low_open)})
