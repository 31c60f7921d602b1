"""A study's fingerprint covers the unsupervised stage's defaults (real VAE, tiny and fast)."""

from __future__ import annotations

import pytest
from _study_support import make_dataset

from semisup import StoreError
from semisup.pretrain import VAETransformer
from semisup.study import StudySpec, run_study

TINY_VAE = {"max_epochs": 2, "hidden": [16], "latent_dim": 2}


def _spec(pretrain):
    return StudySpec.build(overrides={
        "data": "digits-standin", "label_column": "digit", "methods": ["latent-logreg"],
        "repeats": 1, "trials": 1, "budgets": [6], "pretrain": {"vae": pretrain}})


def test_explicit_default_resumes_and_a_changed_value_is_refused(tmp_path):
    ds = make_dataset(n_labeled_per_class=10, n_unlabeled=60)
    out = tmp_path / "study"
    first = run_study(_spec(TINY_VAE), out, dataset=ds, jobs=1, progress=False)
    assert (first.cells["status"] == "ok").all()
    # Naming a default explicitly is the same study (resumes, nothing to redo) ...
    default_beta = VAETransformer().beta
    again = run_study(_spec({**TINY_VAE, "beta": default_beta}), out, dataset=ds, jobs=1,
                      progress=False)
    assert again.cells.drop(columns=["seconds", "tune_seconds", "fit_seconds"]).equals(
        first.cells.drop(columns=["seconds", "tune_seconds", "fit_seconds"]))
    # ... while another value is another representation, so the old cells must not be reused.
    with pytest.raises(StoreError, match="different spec"):
        run_study(_spec({**TINY_VAE, "beta": default_beta * 2}), out, dataset=ds, jobs=1,
                  progress=False)
