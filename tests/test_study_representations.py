"""One draw of the unsupervised stage per repeat (semisup/study/_representations.py)."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest
from sklearn.random_projection import GaussianRandomProjection

from semisup.study._representations import (
    fit_representations,
    repeat_key,
    representation_seed,
)


def projection_stage(kind, X, *, blocks=None, params=None, seed=0, cache_dir=None):
    """Stand-in stage whose result depends on its seed (module level: picklable)."""
    return GaussianRandomProjection(n_components=3, random_state=seed).fit(X), {"kind": kind}


def failing_stage(kind, X, **kw):
    raise RuntimeError("no memory")


def _inputs(tmp_path):
    rng = np.random.default_rng(0)
    ds = SimpleNamespace(X=rng.normal(size=(60, 5)).astype(np.float32), blocks=None)
    spec = SimpleNamespace(seed=3, pretrain={})
    return ds, np.arange(10, 60), spec


@pytest.mark.parametrize("jobs", [1, pytest.param(2, marks=pytest.mark.slow)])
def test_each_repeat_gets_its_own_seeded_draw(tmp_path, jobs):
    # Reference: scikit-learn's GaussianRandomProjection fitted on the same rows with each
    # repeat's seed; in worker processes (jobs=2) the result is the same.
    ds, rows, spec = _inputs(tmp_path)
    feats, diag, errors, secs = fit_representations({"vae"}, ds, rows, spec, tmp_path,
                                                    projection_stage, repeats=3, jobs=jobs)
    assert not errors and set(feats) == {"raw", "vae", "vae@1", "vae@2"}
    for r in range(3):
        ref = GaussianRandomProjection(n_components=3,
                                       random_state=representation_seed(3, "vae", r))
        want = ref.fit(ds.X[rows]).transform(ds.X)
        np.testing.assert_allclose(feats[repeat_key("vae", r)], want, rtol=1e-5)
    assert not np.allclose(feats["vae"], feats["vae@1"])
    assert diag["vae"] == {"kind": "vae"} and secs["vae"] >= 0


def test_a_failing_stage_is_reported_once_and_its_features_left_out(tmp_path):
    ds, rows, spec = _inputs(tmp_path)
    feats, _, errors, _ = fit_representations({"vae"}, ds, rows, spec, tmp_path,
                                               failing_stage, repeats=2)
    assert errors == {"vae": "RuntimeError: no memory"} and set(feats) == {"raw"}
