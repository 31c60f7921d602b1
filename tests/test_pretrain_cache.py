"""fit_representation: content-hash cache round trips, loaded without unpickling code."""

from __future__ import annotations

import json

import numpy as np
import pytest
import torch

from semisup import ConfigError
from semisup.data import FeatureBlock
from semisup.pretrain import (
    MixtureTransformer,
    VAETransformer,
    _vae_transformer,
    fit_representation,
)

SMALL_VAE = {"latent_dim": 2, "hidden": (8,), "max_epochs": 5, "batch_size": 32}


def _data(n: int = 200, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.normal(size=(n, 5)).astype(np.float32)


def test_vae_second_call_loads_instead_of_training(tmp_path, monkeypatch):
    X = _data()
    first, diag1 = fit_representation("vae", X, params=SMALL_VAE, seed=3, cache_dir=tmp_path)
    assert diag1["loaded_from_cache"] is False
    assert isinstance(first, VAETransformer)
    # A second call must not train: make training impossible and count calls.
    calls = []
    monkeypatch.setattr(
        _vae_transformer,
        "train_module",
        lambda *a, **k: calls.append(1) or pytest.fail("trained again"),
    )
    second, diag2 = fit_representation("vae", X, params=SMALL_VAE, seed=3, cache_dir=tmp_path)
    assert calls == [] and diag2["loaded_from_cache"] is True
    assert diag2["cache_key"] == diag1["cache_key"]
    np.testing.assert_array_equal(first.transform(X), second.transform(X))
    np.testing.assert_array_equal(first.score_samples(X), second.score_samples(X))
    np.testing.assert_array_equal(first.sample(4), second.sample(4))


def test_vae_weights_are_plain_tensors_readable_with_weights_only(tmp_path):
    X = _data()
    _, diag = fit_representation("vae", X, params=SMALL_VAE, seed=0, cache_dir=tmp_path)
    folder = tmp_path / diag["cache_path"].split("/")[-1]
    # Reference: torch.load(weights_only=True) refuses anything but tensors and plain
    # containers, so no code can be unpickled from the cache.
    state = torch.load(folder / "weights.pt", weights_only=True)
    assert all(isinstance(v, torch.Tensor) for v in state.values())
    meta = json.loads((folder / "meta.json").read_text())
    assert meta["kind"] == "vae" and meta["params"]["latent_dim"] == 2


def test_mixed_blocks_survive_the_cache(tmp_path):
    rng = np.random.default_rng(1)
    group = rng.integers(0, 2, size=150)
    X = np.column_stack([rng.normal(size=150), np.eye(2)[group]]).astype(np.float32)
    blocks = (FeatureBlock("numeric", 0, 1, "size"), FeatureBlock("categorical", 1, 3, "kind"))
    first, _ = fit_representation("vae", X, blocks=blocks, params=SMALL_VAE, cache_dir=tmp_path)
    second, diag = fit_representation(
        "vae", X, blocks=blocks, params=SMALL_VAE, cache_dir=tmp_path
    )
    assert diag["loaded_from_cache"] and second.blocks == blocks
    np.testing.assert_array_equal(first.transform(X), second.transform(X))


def test_mixture_round_trip_through_npz(tmp_path):
    X = _data(n=300)
    params = {"n_components_grid": (1, 2, 3), "features": "both"}
    first, d1 = fit_representation("mixture", X, params=params, seed=1, cache_dir=tmp_path)
    second, d2 = fit_representation("mixture", X, params=params, seed=1, cache_dir=tmp_path)
    assert isinstance(second, MixtureTransformer)
    assert not d1["loaded_from_cache"] and d2["loaded_from_cache"]
    np.testing.assert_array_equal(first.transform(X), second.transform(X))
    folder = tmp_path / d2["cache_path"].split("/")[-1]
    with np.load(folder / "mixture.npz", allow_pickle=False) as arrays:
        assert set(arrays.files) == {"weights", "means", "covariances", "precisions_cholesky"}


def test_key_changes_with_data_params_and_seed(tmp_path):
    X = _data()
    keys = set()
    for data, params, seed in [
        (X, SMALL_VAE, 0),
        (X + 1, SMALL_VAE, 0),
        (X, {**SMALL_VAE, "beta": 0.5}, 0),
        (X, SMALL_VAE, 1),
    ]:
        _, diag = fit_representation("vae", data, params=params, seed=seed, cache_dir=tmp_path)
        assert not diag["loaded_from_cache"]
        keys.add(diag["cache_key"])
    assert len(keys) == 4


def test_without_cache_dir_nothing_is_written(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    _, diag = fit_representation("mixture", _data(), params={"n_components": 2})
    assert diag["cache_path"] is None and list(tmp_path.iterdir()) == []


def test_bad_requests_are_clear_errors():
    with pytest.raises(ConfigError, match="representation kind 'pca'"):
        fit_representation("pca", _data())
    with pytest.raises(ConfigError, match="unknown vae parameter 'layers'"):
        fit_representation("vae", _data(), params={"layers": 3})
    with pytest.raises(ConfigError, match="'random_state' is set by fit_representation"):
        fit_representation("mixture", _data(), params={"random_state": 3})
