"""A damaged or tampered representation cache is never unpickled: the entry is discarded with
a FitWarning and the stage refitted, giving the same numbers as a clean fit."""

from __future__ import annotations

import io
import os
import pickle

import numpy as np
import pytest

from semisup import FitWarning
from semisup.pretrain import fit_representation

SMALL_VAE = {"latent_dim": 2, "hidden": (8,), "max_epochs": 3, "batch_size": 32}
SMALL_MIXTURE = {"n_components_grid": (1, 2), "covariance_types": ("diag",)}


class _Payload:
    """Unpickling this would run code; the loaders must refuse it."""

    def __reduce__(self):
        return (os.system, ("echo pwned > /dev/null",))


def _data(n: int = 150) -> np.ndarray:
    return np.random.default_rng(1).normal(size=(n, 4)).astype(np.float32)


def _pickle_payload() -> bytes:
    return pickle.dumps({"module.weight": _Payload()})


def _object_npz() -> bytes:
    buffer = io.BytesIO()
    np.savez(buffer, weights=np.array([{"a": 1}, None], dtype=object),
             means=np.zeros((1, 4)), covariances=np.ones((1, 4)),
             precisions_cholesky=np.ones((1, 4)))
    return buffer.getvalue()


@pytest.mark.parametrize("kind,params,file,content", [
    ("vae", SMALL_VAE, "weights.pt", _pickle_payload),
    ("mixture", SMALL_MIXTURE, "meta.json", lambda: b"{not json"),
    ("mixture", SMALL_MIXTURE, "mixture.npz", _object_npz),
    ("mixture", SMALL_MIXTURE, "mixture.npz", lambda: b"PK\x03\x04truncated"),
])
def test_tampered_entry_is_refitted_with_a_warning(tmp_path, kind, params, file, content):
    X = _data()
    clean, diag = fit_representation(kind, X, params=params, seed=2, cache_dir=tmp_path)
    folder = tmp_path / os.path.basename(diag["cache_path"])
    (folder / file).write_bytes(content())
    with pytest.warns(FitWarning) as record:
        again, diag2 = fit_representation(kind, X, params=params, seed=2, cache_dir=tmp_path)
    message = str(record[0].message)
    assert str(folder) in message and "refitted" in message
    assert "weights_only" not in message  # torch's advice to switch the safety off is not shown
    assert len(message.splitlines()) == 1
    assert diag2["loaded_from_cache"] is False
    # the refit is the same deterministic fit (same seed), and it is cached again
    np.testing.assert_allclose(again.transform(X), clean.transform(X), rtol=1e-5, atol=1e-6)
    _, diag3 = fit_representation(kind, X, params=params, seed=2, cache_dir=tmp_path)
    assert diag3["loaded_from_cache"] is True
