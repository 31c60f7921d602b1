"""Content-hash cache of fitted representations: plain tensors / arrays plus JSON, never
pickled code.

A cache entry is a folder ``<cache_dir>/<kind>-<key>`` holding ``weights.pt`` (a dict of
tensors, read with ``torch.load(..., weights_only=True)``) or ``mixture.npz`` (read with
``allow_pickle=False``), and ``meta.json`` (parameters, block layout, diagnostics), written
last so its presence marks a complete entry. Every file is written through semisup._atomic.
"""

from __future__ import annotations

import hashlib
import io
import json
import logging
import pickle
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import torch

from .. import __version__
from .._atomic import atomic_write_bytes, atomic_write_text
from .._errors import StoreError
from ._likelihood import BlockLayout
from ._mixture import MixtureTransformer
from ._vae import VAEModule
from ._vae_transformer import VAETransformer

__all__ = ["cache_key", "entry_dir", "load_entry", "save_entry"]

logger = logging.getLogger(__name__)

_FORMAT = 1
#: How every damaged-entry message ends (fit_representation replaces it: it refits itself).
REFIT_FIX = "; delete the folder to refit"
_HASH_CHUNK_ROWS = 65536


def _plain(value: Any) -> Any:
    """JSON-ready copy: tuples -> lists, numpy scalars -> Python, blocks -> lists."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in sorted(value.items())}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    if hasattr(value, "kind") and hasattr(value, "start") and hasattr(value, "stop"):
        return [value.kind, int(value.start), int(value.stop), str(getattr(value, "column", ""))]
    return value


def blocks_to_json(blocks: Sequence | None) -> list | None:
    return None if blocks is None else [_plain(b) for b in blocks]


def blocks_from_json(data: list | None) -> tuple | None:
    if data is None:
        return None
    from ..data import FeatureBlock

    return tuple(FeatureBlock(kind, int(a), int(b), column) for kind, a, b, column in data)


def cache_key(
    kind: str, X: np.ndarray, *, blocks: Sequence | None, params: dict[str, Any], seed: int
) -> str:
    """SHA-256 over the data bytes (with dtype and shape), kind, params, blocks, seed and the
    semisup version."""
    X = np.asarray(X)
    header = {
        "format": _FORMAT,
        "kind": kind,
        "params": _plain(params),
        "blocks": blocks_to_json(blocks),
        "seed": int(seed),
        "version": __version__,
        "dtype": X.dtype.str,
        "shape": list(X.shape),
    }
    digest = hashlib.sha256(json.dumps(header, sort_keys=True).encode("utf-8"))
    for start in range(0, X.shape[0], _HASH_CHUNK_ROWS):
        digest.update(np.ascontiguousarray(X[start : start + _HASH_CHUNK_ROWS]).tobytes())
    return digest.hexdigest()


def entry_dir(cache_dir: str | Path, kind: str, key: str) -> Path:
    return Path(cache_dir) / f"{kind}-{key[:32]}"


# -- saving ---------------------------------------------------------------------------------


def save_entry(folder: Path, key: str, estimator: Any) -> Path:
    """Write a fitted VAETransformer or MixtureTransformer into ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    params = {k: v for k, v in estimator.get_params(deep=False).items() if k != "blocks"}
    meta: dict[str, Any] = {
        "format": _FORMAT,
        "key": key,
        "version": __version__,
        "params": _plain(params),
        "n_features_in": int(estimator.n_features_in_),
        "diagnostics": _plain(estimator.diagnostics_),
    }
    if isinstance(estimator, VAETransformer):
        meta["kind"] = "vae"
        meta["blocks"] = blocks_to_json(estimator.blocks)
        meta["n_epochs"] = int(estimator.n_epochs_)
        meta["history"] = _plain(estimator.history_)
        tensors = {
            f"module.{k}": v.detach().clone() for k, v in estimator.module_.state_dict().items()
        }
        tensors["mean"] = torch.from_numpy(np.asarray(estimator.mean_, dtype=np.float64))
        tensors["scale"] = torch.from_numpy(np.asarray(estimator.scale_, dtype=np.float64))
        tensors["score_draws"] = torch.from_numpy(estimator.score_draws_.copy())
        buffer = io.BytesIO()
        torch.save(tensors, buffer)
        atomic_write_bytes(folder / "weights.pt", buffer.getvalue())
    elif isinstance(estimator, MixtureTransformer):
        meta["kind"] = "mixture"
        meta["n_components"] = int(estimator.n_components_)
        meta["covariance_type"] = estimator.covariance_type_
        meta["selection"] = _plain(estimator.selection_)
        buffer = io.BytesIO()
        np.savez(
            buffer,
            weights=estimator.weights_,
            means=estimator.means_,
            covariances=estimator.covariances_,
            precisions_cholesky=estimator.precisions_cholesky_,
        )
        atomic_write_bytes(folder / "mixture.npz", buffer.getvalue())
    else:  # pragma: no cover - internal misuse
        raise TypeError(f"cannot cache {type(estimator).__name__}")
    atomic_write_text(folder / "meta.json", json.dumps(meta, indent=1, sort_keys=True))
    return folder


# -- loading --------------------------------------------------------------------------------


def load_entry(folder: Path, key: str) -> Any | None:
    """The estimator stored in ``folder``, or None when there is no complete entry for
    ``key``. A damaged entry raises StoreError naming the file."""
    meta_path = folder / "meta.json"
    if not meta_path.is_file():
        return None
    try:
        meta = json.loads(meta_path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise StoreError(
            f"cache entry {folder}: meta.json cannot be read ({type(exc).__name__}){REFIT_FIX}"
        ) from None
    if not isinstance(meta, dict) or meta.get("key") != key or meta.get("format") != _FORMAT:
        return None
    try:
        if meta["kind"] == "vae":
            return _load_vae(folder, meta)
        return _load_mixture(folder, meta)
    except pickle.UnpicklingError:
        # torch's weights-only loader refused a pickled object; its long advice to turn the
        # safety off is not for our users: the entry is simply not plain tensors.
        raise StoreError(
            f"cache entry {folder} holds something other than plain tensors (a pickled "
            f"object?) and is not loaded{REFIT_FIX}"
        ) from None
    except Exception as exc:  # noqa: BLE001  (any damage: truncated zip, wrong shapes, ...)
        detail = (str(exc).strip().splitlines() or [""])[0][:200]
        raise StoreError(
            f"cache entry {folder} is damaged ({type(exc).__name__}: {detail}){REFIT_FIX}"
        ) from None


def _params(meta: dict[str, Any]) -> dict[str, Any]:
    params = dict(meta["params"])
    for name in ("hidden", "n_components_grid", "covariance_types"):
        if isinstance(params.get(name), list):
            params[name] = tuple(params[name])
    return params


def _loaded_diagnostics(meta: dict[str, Any]) -> dict[str, Any]:
    diagnostics = dict(meta["diagnostics"])
    diagnostics["loaded_from_cache"] = True
    return diagnostics


def _load_vae(folder: Path, meta: dict[str, Any]) -> VAETransformer:
    with warnings.catch_warnings():  # torch's notes on odd pickle protocols are not ours
        warnings.simplefilter("ignore")
        tensors = torch.load(folder / "weights.pt", weights_only=True, map_location="cpu")
    blocks = blocks_from_json(meta["blocks"])
    est = VAETransformer(**_params(meta), blocks=blocks)
    cfg = est.config()
    n_features = int(meta["n_features_in"])
    from ._likelihood import layout_from_blocks

    layout: BlockLayout = layout_from_blocks(blocks, n_features)
    module = VAEModule.from_config(cfg, n_features, layout)
    state = {k[len("module.") :]: v for k, v in tensors.items() if k.startswith("module.")}
    module.load_state_dict(state, strict=True)
    module.eval()
    est.module_ = module
    est.layout_ = layout
    est.mean_ = tensors["mean"].numpy().copy()
    est.scale_ = tensors["scale"].numpy().copy()
    est.score_draws_ = tensors["score_draws"].numpy().copy()
    est.n_features_in_ = n_features
    est.n_epochs_ = int(meta["n_epochs"])
    est.history_ = meta["history"]
    est.diagnostics_ = _loaded_diagnostics(meta)
    return est


def _load_mixture(folder: Path, meta: dict[str, Any]) -> MixtureTransformer:
    with np.load(folder / "mixture.npz", allow_pickle=False) as arrays:
        data = {name: arrays[name].copy() for name in arrays.files}
    est = MixtureTransformer(**_params(meta))
    est.n_components_ = int(meta["n_components"])
    est.covariance_type_ = str(meta["covariance_type"])
    est.weights_ = data["weights"]
    est.means_ = data["means"]
    est.covariances_ = data["covariances"]
    est.precisions_cholesky_ = data["precisions_cholesky"]
    est.selection_ = meta["selection"]
    est.n_iter_ = int(meta["diagnostics"]["n_iter"])
    est.converged_ = bool(meta["diagnostics"]["converged"])
    est.n_features_in_ = int(meta["n_features_in"])
    est.diagnostics_ = _loaded_diagnostics(meta)
    return est
