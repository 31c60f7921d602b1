"""The VAE's loss as pure functions (Kingma & Welling 2014, "Auto-Encoding Variational Bayes").

ELBO(x) = E_q(z|x)[log p(x|z)] - KL(q(z|x) || N(0, I)), with a diagonal Gaussian q and a
mixed-type decoder that matches the encoded columns:

- numeric columns: Gaussian with a learned variance per column (or one shared variance);
- missing indicators: Bernoulli with logits;
- each one-hot categorical block: one categorical (softmax) draw.

Everything is in nats per row; nothing here does I/O or keeps state.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import torch
import torch.nn.functional as F

__all__ = [
    "BlockLayout",
    "bernoulli_log_likelihood",
    "categorical_log_likelihood",
    "elbo",
    "gaussian_expected_log_likelihood",
    "gaussian_log_likelihood",
    "kl_standard_normal",
    "layout_from_blocks",
    "reconstruction_log_likelihood",
]

_LOG_2PI = math.log(2.0 * math.pi)


@dataclass(frozen=True)
class BlockLayout:
    """Which encoded columns take which likelihood (plain Python, picklable, hashable)."""

    n_features: int
    numeric: tuple[int, ...]
    missing: tuple[int, ...]
    categorical: tuple[tuple[int, int], ...]

    @property
    def all_numeric(self) -> bool:
        return len(self.numeric) == self.n_features

    def tensors(self) -> tuple[torch.Tensor, torch.Tensor]:
        """Index tensors of the numeric and missing-indicator columns."""
        return (
            torch.tensor(self.numeric, dtype=torch.long),
            torch.tensor(self.missing, dtype=torch.long),
        )


def layout_from_blocks(blocks: Sequence | None, n_features: int) -> BlockLayout:
    """Turn ``FeatureBlock``-like objects (kind, start, stop) into a :class:`BlockLayout`.

    ``None`` means every column is numeric. Blocks must cover ``0..n_features`` in order;
    a ``missing`` block and each ``numeric`` block may span several columns.
    """
    from .._errors import ConfigError

    if blocks is None:
        return BlockLayout(n_features, tuple(range(n_features)), (), ())
    numeric: list[int] = []
    missing: list[int] = []
    categorical: list[tuple[int, int]] = []
    position = 0
    for block in blocks:
        kind = getattr(block, "kind", None)
        start = getattr(block, "start", None)
        stop = getattr(block, "stop", None)
        column = getattr(block, "column", "?")
        if kind not in ("numeric", "missing", "categorical"):
            raise ConfigError(
                f"block for column {column!r} has kind {kind!r}; "
                "use 'numeric', 'missing' or 'categorical'"
            )
        if start != position or not isinstance(stop, int) or stop <= start:
            raise ConfigError(
                f"block for column {column!r} covers {start}:{stop} but the next column is "
                f"{position}; blocks must cover the encoded columns in order with no gap"
            )
        if kind == "numeric":
            numeric.extend(range(start, stop))
        elif kind == "missing":
            missing.extend(range(start, stop))
        else:
            categorical.append((start, stop))
        position = stop
    if position != n_features:
        raise ConfigError(
            f"blocks cover {position} columns but X has {n_features}; pass the blocks of the "
            "Dataset that produced X"
        )
    return BlockLayout(n_features, tuple(numeric), tuple(missing), tuple(categorical))


def kl_standard_normal(mu: torch.Tensor, logvar: torch.Tensor) -> torch.Tensor:
    """KL(N(mu, diag(exp(logvar))) || N(0, I)) per row, shape (batch,).

    Closed form from Kingma & Welling 2014, Appendix B:
    -1/2 * sum_j (1 + log sigma_j^2 - mu_j^2 - sigma_j^2).
    """
    return -0.5 * torch.sum(1.0 + logvar - mu.pow(2) - logvar.exp(), dim=-1)


def gaussian_log_likelihood(
    x: torch.Tensor, mean: torch.Tensor, variance: torch.Tensor
) -> torch.Tensor:
    """Elementwise log N(x | mean, variance), shape of ``x``."""
    return -0.5 * (_LOG_2PI + torch.log(variance) + (x - mean).pow(2) / variance)


def gaussian_expected_log_likelihood(
    x: torch.Tensor, mean: torch.Tensor, variance: torch.Tensor, extra: torch.Tensor
) -> torch.Tensor:
    """E_q[log N(x | W z + b, variance)] for a linear decoder, elementwise.

    With q(z) = N(mu, diag(s)) and ``mean = W mu + b``,
    E[(x - W z - b)^2] = (x - mean)^2 + ``extra`` where ``extra_j = sum_k W_jk^2 s_k``.
    Exact, so the linear model's ELBO needs no sampling.
    """
    return -0.5 * (_LOG_2PI + torch.log(variance) + ((x - mean).pow(2) + extra) / variance)


def bernoulli_log_likelihood(x: torch.Tensor, logits: torch.Tensor) -> torch.Tensor:
    """Elementwise log Bernoulli(x | sigmoid(logits)) = x * l - softplus(l)."""
    return x * logits - F.softplus(logits)


def categorical_log_likelihood(x_onehot: torch.Tensor, logits: torch.Tensor) -> torch.Tensor:
    """log Categorical(x | softmax(logits)) per row for one one-hot block, shape (batch,)."""
    return torch.sum(x_onehot * torch.log_softmax(logits, dim=-1), dim=-1)


def reconstruction_log_likelihood(
    x: torch.Tensor,
    out: torch.Tensor,
    variance: torch.Tensor,
    layout: BlockLayout,
    index: tuple[torch.Tensor, torch.Tensor],
    *,
    numeric_out: torch.Tensor | None = None,
    numeric_extra: torch.Tensor | None = None,
) -> torch.Tensor:
    """log p(x | decoder output) per row, shape (batch,), summed over all blocks.

    ``out`` (batch, n_features) holds numeric means, Bernoulli logits and categorical logits
    in the columns of their blocks. ``variance`` has one entry per numeric column (or one).
    ``numeric_out`` / ``numeric_extra`` replace the numeric means with the exact expectation
    of a linear decoder (see :func:`gaussian_expected_log_likelihood`).
    """
    numeric_idx, missing_idx = index
    parts: list[torch.Tensor] = []
    if layout.numeric:
        if layout.all_numeric:
            x_num = x
            mean = out if numeric_out is None else numeric_out
        else:
            x_num = x.index_select(1, numeric_idx)
            source = out if numeric_out is None else numeric_out
            mean = source.index_select(1, numeric_idx)
        if numeric_extra is None:
            terms = gaussian_log_likelihood(x_num, mean, variance)
        else:
            extra = (
                numeric_extra if layout.all_numeric else numeric_extra.index_select(1, numeric_idx)
            )
            terms = gaussian_expected_log_likelihood(x_num, mean, variance, extra)
        parts.append(terms.sum(dim=1))
    if layout.missing:
        x_mis = x.index_select(1, missing_idx)
        parts.append(bernoulli_log_likelihood(x_mis, out.index_select(1, missing_idx)).sum(1))
    for start, stop in layout.categorical:
        parts.append(categorical_log_likelihood(x[:, start:stop], out[:, start:stop]))
    if not parts:
        return x.new_zeros(x.shape[0])
    total = parts[0]
    for part in parts[1:]:
        total = total + part
    return total


def elbo(reconstruction: torch.Tensor, kl: torch.Tensor, beta: float = 1.0) -> torch.Tensor:
    """Per-row (beta-weighted) evidence lower bound: E_q[log p(x|z)] - beta * KL."""
    return reconstruction - beta * kl
