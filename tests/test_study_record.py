"""The study folder's typed records (semisup/study/_folder.py): what the study writes is what
the readers get, by the writers' own names; damaged files are one line."""

from __future__ import annotations

import json

import pandas as pd
import pytest
from _study_support import ensure_methods, make_dataset, pca_representation

from semisup import StoreError
from semisup.study import StudySpec, run_study
from semisup.study._folder import StudyRecord, read_curves, read_study_record


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    roles = ensure_methods()
    out = tmp_path_factory.mktemp("record")
    spec = StudySpec.build(overrides={
        "data": "digits-standin", "label_column": "digit", "repeats": 2, "folds": 3,
        "methods": [roles["logreg"], roles["selftrain"]], "trials": 1, "budgets": [6, 12],
        "pretrain": {"vae": {"n_components": 3}}})
    result = run_study(spec, out, dataset=make_dataset(n_labeled_per_class=10, n_unlabeled=40),
                       representation_fn=pca_representation, jobs=1, progress=False)
    return out, result


def test_study_json_read_back_as_the_study_wrote_it(folder):
    out, result = folder
    raw = json.loads((out / "study.json").read_text())  # the json module is the reference
    rec = read_study_record(out / "study.json", StoreError)
    assert rec.fingerprint == raw["fingerprint"] == result.info["fingerprint"]
    assert rec.seed == raw["spec"]["seed"] == 0
    assert rec.data.n_labeled == raw["data"]["n_labeled"] == 30
    assert rec.data.class_names == ("0", "1", "2")
    assert rec.data.class_counts == {"0": 10, "1": 10, "2": 10}
    assert rec.evaluation.protocol == "cross-fit" and rec.evaluation.folds == 3
    assert rec.evaluation.n_repeats == 2 and rec.evaluation.n_round_rows == 0
    assert rec.evaluation.raw == raw["evaluation"]
    assert rec.holdout_rows == raw["holdout"]["n_rows"] == 10
    assert rec.pool_rows == raw["pool"]["n_rows"] == 20
    assert rec.budgets == (6, 12)
    assert set(rec.representation) == {"vae"} and rec.representation_errors == {}
    assert rec.protocol == tuple(raw["protocol"])


def test_curves_typed_and_equal_to_a_plain_read(folder):
    out, _ = folder
    plain = pd.read_csv(out / "curves.csv")
    typed = read_curves(out / "curves.csv", StoreError)
    assert typed["measured"].dtype == bool and typed["measured"].all()
    assert typed["n_labels"].dtype.kind == "i"
    pd.testing.assert_series_equal(typed["mean"], plain["mean"].astype(float))
    assert set(typed["method"]) == set(plain["method"].astype(str))


def test_missing_partial_and_damaged_files(tmp_path):
    assert read_study_record(tmp_path / "study.json", StoreError) == StudyRecord()
    assert read_curves(tmp_path / "curves.csv", StoreError) is None
    rec = StudyRecord.from_dict({"evaluation": {"protocol": "holdout", "n_eval_min": 7}})
    assert rec.evaluation.n_eval_min == 7 and rec.data.n_rows is None and rec.seed is None
    (tmp_path / "study.json").write_text("{not json")
    with pytest.raises(StoreError, match="study.json is not valid JSON"):
        read_study_record(tmp_path / "study.json", StoreError)
    (tmp_path / "study.json").write_text("[1, 2]")
    with pytest.raises(StoreError, match="should hold a JSON object"):
        read_study_record(tmp_path / "study.json", StoreError)
    (tmp_path / "curves.csv").write_text("method,strategy,metric,n_labels,mean,low,high,"
                                         "measured\nm,random,accuracy,ten,0.5,0.4,0.6,True\n")
    with pytest.raises(StoreError, match="'n_labels' has the value 'ten'"):
        read_curves(tmp_path / "curves.csv", StoreError)
