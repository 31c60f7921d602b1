"""VAETransformer: the VAE (Kingma & Welling 2014) as a scikit-learn transformer."""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from typing import Any

import numpy as np
import torch
from sklearn.base import BaseEstimator, ClassNamePrefixFeaturesOutMixin, TransformerMixin
from sklearn.utils import check_random_state
from sklearn.utils.validation import check_is_fitted

from .._errors import ConfigError, DataError
from .._seeding import derive_seed, int_seed
from ._config import VAEConfig
from ._likelihood import BlockLayout, layout_from_blocks
from ._train import EVAL_CHUNK_ROWS, evaluate_rows, pinned_threads, torch_state, train_module
from ._vae import VAEModule
from ._validation import checked_rows

__all__ = ["VAETransformer"]

logger = logging.getLogger(__name__)

#: Reparameterisation draws (shared by all rows) averaged in ``score_samples``.
N_SCORE_DRAWS = 16
#: Rows used for the diagnostics computed after fitting.
DIAGNOSTIC_ROWS = 20000
#: Threshold on the variance of posterior means for an "active" latent unit (Burda et al. 2016).
ACTIVE_UNIT_THRESHOLD = 0.01


class VAETransformer(ClassNamePrefixFeaturesOutMixin, TransformerMixin, BaseEstimator):
    """Variational autoencoder (Kingma & Welling 2014) fitted on CPU; transforms rows to the
    means of q(z|x).

    Parameters mirror :class:`VAEConfig` (see there for meanings and defaults), plus
    ``blocks``: a tuple of ``semisup.data.FeatureBlock`` telling which encoded columns are
    numeric (Gaussian with learned variance), missing indicators (Bernoulli) or one-hot
    categorical blocks (categorical). ``None`` treats every column as numeric.

    ``kind="ae"`` gives a plain deterministic autoencoder with the same likelihood and no KL
    term; its ``score_samples`` is then the reconstruction log-likelihood, not an ELBO. With
    ``kind="vae"``, ``score_samples`` is the ELBO (KL weight 1) whatever the training ``beta``.

    Attributes
    ----------
    module_ : VAEModule
        The trained network (numeric columns in scaled units).
    mean_, scale_ : ndarray of shape (n_features,)
        Per-column centring and scaling applied before the network (0 and 1 off numeric).
    layout_ : BlockLayout
        Likelihood of each column.
    n_epochs_ : int
        Epochs run.
    history_ : list of dict
        Per-epoch training and held-out ELBO (nats per row, scaled units).
    diagnostics_ : dict
        Final train / held-out ELBO (nats per row, original units), reconstruction error per
        block kind, active latent units, seconds, epochs.
    n_features_in_ : int
    """

    def __init__(
        self,
        latent_dim: int = 16,
        hidden: tuple[int, ...] = (128, 64),
        beta: float = 0.1,
        learning_rate: float = 3e-3,
        max_epochs: int = 150,
        batch_size: int = 256,
        patience: int = 10,
        validation_fraction: float = 0.1,
        kl_warmup_epochs: int = 10,
        grad_clip: float | None = 10.0,
        kind: str = "vae",
        decoder_variance: str = "feature",
        min_variance: float = 1e-3,
        scale: str = "standard",
        tol: float = 1e-4,
        n_threads: int | None = 1,
        random_state: int | None = 0,
        progress: bool = False,
        blocks: tuple | None = None,
    ) -> None:
        self.latent_dim = latent_dim
        self.hidden = hidden
        self.beta = beta
        self.learning_rate = learning_rate
        self.max_epochs = max_epochs
        self.batch_size = batch_size
        self.patience = patience
        self.validation_fraction = validation_fraction
        self.kl_warmup_epochs = kl_warmup_epochs
        self.grad_clip = grad_clip
        self.kind = kind
        self.decoder_variance = decoder_variance
        self.min_variance = min_variance
        self.scale = scale
        self.tol = tol
        self.n_threads = n_threads
        self.random_state = random_state
        self.progress = progress
        self.blocks = blocks

    # -- configuration -----------------------------------------------------------------------

    def config(self, seed: int | None = None) -> VAEConfig:
        """The frozen :class:`VAEConfig` of the current parameters."""
        params = {k: v for k, v in self.get_params(deep=False).items() if k != "blocks"}
        if isinstance(params["hidden"], list):
            params["hidden"] = tuple(params["hidden"])
        if seed is not None:
            params["random_state"] = seed
        elif params["random_state"] is not None and not isinstance(params["random_state"], int):
            raise ConfigError(
                f"random_state={params['random_state']!r} is not allowed; give an int or None"
            )
        return VAEConfig(**params)

    @property
    def _n_features_out(self) -> int:
        return int(self.latent_dim)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = False
        return tags

    # -- fitting -----------------------------------------------------------------------------

    def fit(self, X: Any, y: Any = None, *,
            on_step: Callable[[int, int], None] | None = None) -> VAETransformer:
        """Fit on the rows of ``X`` (labels, if given, are ignored).

        ``on_step(epoch, max_epochs)``, if given, is called after every epoch (a study's
        progress; early stopping may end before ``max_epochs``).
        """
        started = time.perf_counter()
        seed = self._seed()
        cfg = self.config(seed)
        X = checked_rows(self, X, dtype=np.float32, reset=True)
        n_rows, n_features = X.shape
        layout = layout_from_blocks(self.blocks, n_features)
        _check_block_values(X, layout, self.blocks)
        mean, scale = _column_scaling(X, layout, cfg.scale)

        n_val = int(np.floor(n_rows * cfg.validation_fraction))
        if n_rows - n_val < 1:
            n_val = 0
        split = np.random.default_rng(derive_seed(seed, "vae", "split")).permutation(n_rows)
        val_index = np.sort(split[:n_val])
        train_index = np.sort(split[n_val:])
        draws = (
            np.random.default_rng(derive_seed(seed, "vae", "score-draws"))
            .standard_normal((N_SCORE_DRAWS, cfg.latent_dim))
            .astype(np.float32)
        )

        with torch_state(derive_seed(seed, "vae", "torch"), cfg.n_threads):
            X_t = torch.from_numpy(_scaled(X, mean, scale))
            X_val = X_t.index_select(0, torch.from_numpy(val_index)) if n_val else None
            train_t = torch.from_numpy(train_index) if n_val else None
            module = VAEModule.from_config(cfg, n_features, layout)
            result = train_module(
                module,
                X_t,
                train_t,
                X_val,
                layout,
                cfg,
                shuffle_seed=derive_seed(seed, "vae", "shuffle"),
                monitor_eps=torch.from_numpy(draws[0]),
                on_epoch=on_step,
            )
            self.module_ = module
            self.layout_ = layout
            self.mean_ = mean
            self.scale_ = scale
            self.score_draws_ = draws
            self.n_epochs_ = result.epochs
            self.history_ = result.history
            # a random subset of the training rows (split[n_val:] is in random order)
            some_train = torch.from_numpy(np.sort(split[n_val:][:DIAGNOSTIC_ROWS]))
            train_rows = X_t.index_select(0, some_train)
            diag_rows = X_val if X_val is not None else train_rows
            self.diagnostics_ = self._diagnostics(train_rows, X_val, diag_rows)
            del X_t
        self.diagnostics_.update(
            epochs=result.epochs,
            best_epoch=result.best_epoch,
            stopped_early=result.stopped_early,
            steps=result.steps,
            n_rows=int(n_rows),
            n_train_rows=int(n_rows - n_val),
            n_heldout_rows=int(n_val),
            seconds=time.perf_counter() - started,
            loaded_from_cache=False,
        )
        logger.info(
            "%s fitted on %d x %d in %.1fs (%d epochs): train ELBO %.3f, held-out ELBO %s",
            cfg.kind.upper(),
            n_rows,
            n_features,
            self.diagnostics_["seconds"],
            result.epochs,
            self.diagnostics_["train_elbo"],
            "n/a"
            if self.diagnostics_["heldout_elbo"] is None
            else f"{self.diagnostics_['heldout_elbo']:.3f}",
        )
        return self

    def _seed(self) -> int:
        seed = int_seed(self.random_state)
        if isinstance(seed, int) and not isinstance(seed, bool):
            return seed
        if seed is None:
            return int(check_random_state(None).randint(0, 2**31 - 1))
        raise ConfigError(
            f"random_state={self.random_state!r} is not allowed; give a non-negative int, a "
            "numpy RandomState or None"
        )

    @property
    def _log_jacobian(self) -> float:
        """log |d x_scaled / d x| summed over numeric columns (turns scaled-unit densities
        into densities of the original columns)."""
        numeric = list(self.layout_.numeric)
        return float(-np.sum(np.log(self.scale_[numeric]))) if numeric else 0.0

    def _diagnostics(
        self, train_rows: torch.Tensor, val_rows: torch.Tensor | None, diag_rows: torch.Tensor
    ) -> dict[str, Any]:
        layout = self.layout_
        train_elbo = float(self._elbo_scaled(train_rows).mean()) + self._log_jacobian
        heldout = (
            float(self._elbo_scaled(val_rows).mean()) + self._log_jacobian
            if val_rows is not None
            else None
        )
        with torch.no_grad():
            mu = (
                torch.cat(
                    [
                        self.module_.encode(diag_rows[s : s + EVAL_CHUNK_ROWS])[0]
                        for s in range(0, diag_rows.shape[0], EVAL_CHUNK_ROWS)
                    ]
                )
                if diag_rows.shape[0]
                else diag_rows.new_zeros((0, self.latent_dim))
            )
            out = self.module_.decode(mu) if mu.shape[0] else None
        recon: dict[str, float] = {}
        if out is not None:
            x = diag_rows
            if layout.numeric:
                idx = list(layout.numeric)
                recon["numeric_rmse"] = float(torch.sqrt(((x[:, idx] - out[:, idx]) ** 2).mean()))
            if layout.missing:
                idx = list(layout.missing)
                recon["missing_error_rate"] = float(
                    ((out[:, idx] > 0).float() != x[:, idx]).float().mean()
                )
            if layout.categorical:
                wrong = [
                    (out[:, a:b].argmax(1) != x[:, a:b].argmax(1)).float().mean()
                    for a, b in layout.categorical
                ]
                recon["categorical_error_rate"] = float(torch.stack(wrong).mean())
        unit_var = (
            mu.var(dim=0, unbiased=False) if mu.shape[0] > 1 else torch.zeros(self.latent_dim)
        )
        return {
            "kind": self.kind,
            "train_elbo": train_elbo,
            "heldout_elbo": heldout,
            "reconstruction": recon,
            "active_units": int((unit_var > ACTIVE_UNIT_THRESHOLD).sum()),
            "latent_dim": int(self.latent_dim),
            "latent_variances": [float(v) for v in unit_var],
        }

    # -- using a fitted model ----------------------------------------------------------------

    def _scaled_chunks(self, X: Any):
        """Validated rows of X, scaled chunk by chunk (no full scaled copy is held)."""
        check_is_fitted(self, "module_")
        X = checked_rows(self, X, dtype=np.float32, reset=False)
        for start in range(0, X.shape[0], EVAL_CHUNK_ROWS):
            part = X[start : start + EVAL_CHUNK_ROWS]
            yield torch.from_numpy(_scaled(part, self.mean_, self.scale_))

    def _elbo_scaled(self, X_t: torch.Tensor) -> torch.Tensor:
        """Per-row ELBO (scaled units) averaged over the fixed reparameterisation draws."""
        index = self.layout_.tensors()
        draws = torch.from_numpy(self.score_draws_)
        single = self.kind != "vae" or (self.module_.linear and self.layout_.all_numeric)
        n_draws = 1 if single else draws.shape[0]
        total = torch.zeros(X_t.shape[0], dtype=torch.float64)
        for d in range(n_draws):
            rec, kl = evaluate_rows(self.module_, X_t, self.layout_, index, draws[d])
            total += (rec - kl).double()
        return total / n_draws

    def transform(self, X: Any) -> np.ndarray:
        """Latent means E_q[z | x], shape (n_samples, latent_dim), float64."""
        with pinned_threads(self.n_threads), torch.no_grad():
            parts = [self.module_.encode(chunk)[0].double() for chunk in self._scaled_chunks(X)]
        return torch.cat(parts).numpy()

    def score_samples(self, X: Any) -> np.ndarray:
        """Per-row ELBO in nats (a lower bound on log p(x) in the original units of X)."""
        with pinned_threads(self.n_threads):
            parts = [self._elbo_scaled(chunk) for chunk in self._scaled_chunks(X)]
        return torch.cat(parts).numpy() + self._log_jacobian

    def score(self, X: Any, y: Any = None) -> float:
        """Mean per-row ELBO in nats."""
        return float(np.mean(self.score_samples(X)))

    def sample(self, n_samples: int = 1, *, random_state: int | None = None) -> np.ndarray:
        """Draw rows from the generative model p(z) p(x|z), in the original units.

        Numeric columns are Gaussian draws, missing indicators 0/1, categorical blocks one-hot.
        """
        check_is_fitted(self, "module_")
        if self.kind != "vae":
            raise ConfigError("sample() needs kind='vae'; a plain autoencoder has no prior")
        if (
            isinstance(n_samples, bool)
            or not isinstance(n_samples, (int, np.integer))
            or (n_samples < 1)
        ):
            raise ConfigError(f"n_samples={n_samples!r} is not allowed; give an integer >= 1")
        seed = derive_seed(self._seed() if random_state is None else random_state, "sample")
        gen = torch.Generator().manual_seed(seed)
        layout = self.layout_
        with pinned_threads(self.n_threads), torch.no_grad():
            z = torch.randn((int(n_samples), self.latent_dim), generator=gen)
            out = self.module_.decode(z)
            X = torch.zeros_like(out)
            if layout.numeric:
                idx = list(layout.numeric)
                noise = torch.randn((int(n_samples), len(idx)), generator=gen)
                X[:, idx] = out[:, idx] + noise * self.module_.variance().sqrt()
            if layout.missing:
                idx = list(layout.missing)
                X[:, idx] = torch.bernoulli(torch.sigmoid(out[:, idx]), generator=gen)
            for a, b in layout.categorical:
                probs = torch.softmax(out[:, a:b], dim=1)
                pick = torch.multinomial(probs, 1, generator=gen).squeeze(1)
                X[:, a:b] = torch.nn.functional.one_hot(pick, b - a).to(X.dtype)
        values = X.double().numpy()
        return values * self.scale_ + self.mean_


def _column_scaling(
    X: np.ndarray, layout: BlockLayout, how: str, chunk_rows: int = 65536
) -> tuple[np.ndarray, np.ndarray]:
    """Per-column mean and standard deviation of the numeric columns, computed in float64
    chunks; (0, 1) for other columns and for constant columns' scale."""
    n_features = X.shape[1]
    mean = np.zeros(n_features)
    scale = np.ones(n_features)
    numeric = np.asarray(layout.numeric, dtype=np.intp)
    if how == "none" or numeric.size == 0 or X.shape[0] == 0:
        return mean, scale
    total = np.zeros(numeric.size)
    for s in range(0, X.shape[0], chunk_rows):
        total += X[s : s + chunk_rows][:, numeric].sum(axis=0, dtype=np.float64)
    m = total / X.shape[0]
    sq = np.zeros(numeric.size)
    for s in range(0, X.shape[0], chunk_rows):
        sq += ((X[s : s + chunk_rows][:, numeric].astype(np.float64) - m) ** 2).sum(axis=0)
    sd = np.sqrt(sq / X.shape[0])
    mean[numeric] = m
    scale[numeric] = np.where(sd > 1e-8, sd, 1.0)
    return mean, scale


def _scaled(X: np.ndarray, mean: np.ndarray, scale: np.ndarray, chunk_rows: int = 65536):
    """(X - mean) / scale as a new C-contiguous float32 array, in chunks."""
    out = np.empty(X.shape, dtype=np.float32)
    mean32 = mean.astype(np.float32)
    inv32 = (1.0 / scale).astype(np.float32)
    for s in range(0, X.shape[0], chunk_rows):
        np.multiply(X[s : s + chunk_rows] - mean32, inv32, out=out[s : s + chunk_rows])
    return out


def _check_block_values(X: np.ndarray, layout: BlockLayout, blocks, chunk_rows=65536) -> None:
    """Missing indicators must be 0/1 and every one-hot block must hold exactly one 1."""
    if not layout.missing and not layout.categorical:
        return
    names = {}
    for block in blocks or ():
        for j in range(block.start, block.stop):
            names[j] = block.column
    missing = np.asarray(layout.missing, dtype=np.intp)
    for s in range(0, X.shape[0], chunk_rows):
        part = X[s : s + chunk_rows]
        if missing.size:
            bad = ~np.isin(part[:, missing], (0.0, 1.0))
            if bad.any():
                col = int(missing[np.argwhere(bad)[0][1]])
                raise DataError(
                    f"missing-indicator column {col} (from {names.get(col)!r}) holds a value "
                    "other than 0/1; pass the blocks that match X"
                )
        for a, b in layout.categorical:
            block_part = part[:, a:b]
            ok = np.isin(block_part, (0.0, 1.0)).all(axis=1) & (block_part.sum(axis=1) == 1)
            if not ok.all():
                row = s + int(np.argmin(ok))
                raise DataError(
                    f"categorical block {names.get(a)!r} (columns {a}:{b}) is not one-hot in "
                    f"row {row}; pass the blocks that match X"
                )
