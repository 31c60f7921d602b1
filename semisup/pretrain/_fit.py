"""fit_representation: fit (or load from the cache) the study's unsupervised stage."""

from __future__ import annotations

import logging
import os
import shutil
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from .._errors import ConfigError, DataError, FitWarning, StoreError
from .._seeding import derive_seed
from ._cache import REFIT_FIX, cache_key, entry_dir, load_entry, save_entry
from ._mixture import MixtureTransformer
from ._vae_transformer import VAETransformer

__all__ = ["REPRESENTATION_KINDS", "fit_representation", "representation_steps"]

logger = logging.getLogger(__name__)

REPRESENTATION_KINDS = ("vae", "mixture")


def representation_params(kind: str, params: dict[str, Any] | None = None) -> dict[str, Any]:
    """Every parameter of the ``kind`` stage that shapes its result, defaults filled in.

    Cache keys and study fingerprints hash this, so changing a default (in a new release, say)
    never reuses a representation fitted under the old one.
    """
    try:
        estimator = _estimator(kind, dict(params or {}), None, 0)
        # Check every value now, before a study starts, so a bad setting is one error line
        # (exit 2) and not a failed unsupervised stage with every cell after it.
        if kind == "vae":
            estimator.config()
        else:
            estimator._check_params()
    except ConfigError as exc:
        raise ConfigError(f"[pretrain.{kind}] in the study spec: {exc}") from None
    except TypeError as exc:  # e.g. a value of a type the constructor cannot take
        raise ConfigError(f"[pretrain.{kind}] in the study spec: settings are not valid "
                          f"({exc}); fix them") from None
    return {k: v for k, v in estimator.get_params(deep=False).items()
            if k not in ("blocks", "progress", "random_state")}


def representation_steps(kind: str, params: dict[str, Any] | None = None) -> int:
    """The most steps a fit of ``kind`` reports through ``on_step``: the VAE's
    ``max_epochs`` (early stopping may end sooner), the mixture's candidates plus its refit."""
    estimator = _estimator(kind, dict(params or {}), None, 0)
    if kind == "vae":
        return int(estimator.config().max_epochs)
    return int(estimator.n_steps())


def _estimator(kind: str, params: dict[str, Any], blocks: Sequence | None, seed: int):
    cls = VAETransformer if kind == "vae" else MixtureTransformer
    allowed = set(cls().get_params(deep=False)) - {"random_state", "blocks"}
    for name in params:
        if name in ("random_state", "blocks"):
            raise ConfigError(
                f"{kind} parameter {name!r} is set by fit_representation; pass seed= / blocks= "
                "instead"
            )
        if name not in allowed:
            raise ConfigError(
                f"unknown {kind} parameter {name!r}; allowed: {', '.join(sorted(allowed))}"
            )
    random_state = derive_seed(seed, "pretrain", kind)
    if kind == "vae":
        return VAETransformer(
            **params, blocks=None if blocks is None else tuple(blocks), random_state=random_state
        )
    return MixtureTransformer(**params, random_state=random_state)


def fit_representation(
    kind: str,
    X: Any,
    *,
    blocks: Sequence | None = None,
    params: dict[str, Any] | None = None,
    seed: int = 0,
    cache_dir: str | os.PathLike[str] | None = None,
    on_step: Callable[[int, int], None] | None = None,
) -> tuple[VAETransformer | MixtureTransformer, dict[str, Any]]:
    """Fit the unsupervised representation ``kind`` ("vae" or "mixture") on the rows of X.

    With ``cache_dir``, the fitted model is stored under a key hashed from the data bytes,
    kind, params, blocks, seed and semisup version; a later call with the same inputs loads it
    (``diagnostics["loaded_from_cache"]`` is True) and gives identical ``transform`` output.
    The estimator's seed is ``derive_seed(seed, "pretrain", kind)``. ``blocks`` (the
    Dataset's) set the VAE's per-column likelihood; the mixture models all columns jointly.
    ``on_step(done, total)`` reports the fit's progress (VAE epochs, mixture candidates; see
    :func:`representation_steps`); a load from the cache reports nothing.

    Returns
    -------
    transformer : VAETransformer or MixtureTransformer (fitted)
    diagnostics : dict
        The transformer's ``diagnostics_`` plus ``cache_key`` and ``cache_path``.
    """
    if kind not in REPRESENTATION_KINDS:
        raise ConfigError(
            f"representation kind {kind!r} is not known; use one of "
            f"{', '.join(REPRESENTATION_KINDS)}"
        )
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ConfigError(f"seed={seed!r} is not allowed; give a non-negative integer")
    params = dict(params or {})
    estimator = _estimator(kind, params, blocks, int(seed))
    X = np.asarray(X)
    if X.ndim != 2 or X.shape[0] == 0:
        raise DataError(
            f"X has shape {X.shape}; the {kind} stage needs a 2-D array with at least one row"
        )
    key = folder = None
    if cache_dir is not None:
        # Key on every resolved parameter, defaults included (the seed is keyed on its own).
        resolved = representation_params(kind, params)
        key = cache_key(
            kind, X, blocks=blocks if kind == "vae" else None, params=resolved, seed=int(seed)
        )
        folder = entry_dir(cache_dir, kind, key)
        try:
            loaded = load_entry(folder, key)
        except StoreError as exc:
            # Our own output, damaged or altered: nothing in it is trusted or unpickled.
            message = (f"{str(exc).removesuffix(REFIT_FIX)}; the entry is discarded and the "
                       f"{kind} stage refitted")
            logger.warning("%s", message)
            warnings.warn(message, FitWarning, stacklevel=2)
            shutil.rmtree(folder, ignore_errors=True)
            loaded = None
        if loaded is not None:
            logger.info("%s representation loaded from cache %s", kind, folder)
            return loaded, _with_cache(loaded.diagnostics_, key, folder)
    estimator.fit(X, on_step=on_step)
    if folder is not None:
        save_entry(folder, key, estimator)
        logger.info("%s representation saved to cache %s", kind, folder)
    return estimator, _with_cache(estimator.diagnostics_, key, folder)


def _with_cache(diagnostics: dict[str, Any], key: str | None, folder: Path | None) -> dict:
    out = dict(diagnostics)
    out["cache_key"] = key
    out["cache_path"] = None if folder is None else str(folder)
    return out
