"""Labels, ids and dataset_from_frame."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.preprocessing import LabelEncoder

from semisup import DataError, DataWarning
from semisup.data import UNLABELED, dataset_from_frame
from semisup.data._labels import label_variants, sort_class_names


def test_class_names_and_y_match_sklearn_label_encoder():
    rng = np.random.default_rng(0)
    labels = rng.choice(["beta", "alpha", "gamma"], size=200).astype(object)
    labels[rng.random(200) < 0.6] = None
    frame = pd.DataFrame({"v": rng.normal(size=200), "label": labels})
    ds = dataset_from_frame(frame, label_column="label")
    present = frame["label"].notna().to_numpy()
    # reference: scikit-learn's LabelEncoder (sorted classes, index codes)
    ref = LabelEncoder().fit(frame.loc[present, "label"])
    assert ds.class_names == list(ref.classes_)
    np.testing.assert_array_equal(ds.y[present], ref.transform(frame.loc[present, "label"]))
    assert (ds.y[~present] == UNLABELED).all() and ds.y.dtype == np.int64


def test_unlabeled_markers_blank_and_numeric_labels():
    frame = pd.DataFrame({"v": np.arange(8.0) * 0.3,
                          "label": [1.0, 2.0, np.nan, 10.0, 2.0, 1.0, 10.0, np.nan]})
    ds = dataset_from_frame(frame, label_column="label", unlabeled_markers=["10"])
    assert ds.class_names == ["1", "2"]  # floats 1.0 read as '1'; '10' marks unlabeled
    assert ds.y.tolist() == [0, 1, -1, -1, 1, 0, -1, -1]
    frame = pd.DataFrame({"v": [0.1, 0.2, 0.3, 0.4, 0.5], "label": ["2", "10", " ", "10", "2"]})
    ds = dataset_from_frame(frame, label_column="label")
    assert ds.class_names == ["2", "10"]  # integer labels sort by value
    assert ds.y[2] == UNLABELED  # a blank cell is unlabeled


def test_sort_and_variants_helpers():
    assert sort_class_names(["b", "A", "a"]) == ["A", "a", "b"]
    assert sort_class_names(["-1", "3", "20"]) == ["-1", "3", "20"]
    assert label_variants(["Cat", "cat", "cat ", "dog", "Big  dog", "big dog"]) == [
        ["Cat", "cat", "cat "], ["Big  dog", "big dog"]]


def test_typo_like_labels_warn_but_are_kept():
    frame = pd.DataFrame({"v": np.arange(6.0), "label": ["yes", "Yes", "yes", "no", "no", "no"]})
    with pytest.warns(DataWarning, match="'Yes' \\(1 rows\\) and 'yes' \\(2 rows\\)"), \
            pytest.warns(DataWarning, match="single labeled row \\('Yes'\\)"):
        ds = dataset_from_frame(frame, label_column="label")
    assert ds.class_names == ["Yes", "no", "yes"]


def test_frame_errors_name_the_problem():
    frame = pd.DataFrame({"v": [1.0, 2.0, 3.0], "label": ["a", "b", "a"],
                          "id": ["x", "y", "x"]})
    with pytest.raises(DataError, match="duplicate id 'x' at row 0 \\(0-based\\) and row 2"):
        dataset_from_frame(frame, label_column="label", id_column="id")
    with pytest.raises(DataError, match="no column named 'lbl'"):
        dataset_from_frame(frame, label_column="lbl")
    with pytest.raises(DataError, match="kind override names column 'w'"):
        dataset_from_frame(frame, label_column="label", kinds={"w": "drop"})


def test_frame_is_not_changed_and_dataset_fields_are_complete():
    frame = pd.DataFrame({"v": [1.0, np.nan, 3.0, 4.0] * 3, "c": ["u", "u", "w", "w"] * 3,
                          "label": ["a", "b", None, "a"] * 3})
    before = frame.copy()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataWarning)
        ds = dataset_from_frame(frame, label_column="label", source="inline.csv")
    pd.testing.assert_frame_equal(frame, before)
    assert ds.feature_names == ["v", "v__missing", "c=u", "c=w", "c=(other)"]
    assert ds.X.shape == (12, 5) and ds.row_ids.tolist() == [str(i) for i in range(12)]
    assert ds.column_kinds == {"v": "numeric", "c": "categorical", "label": "label"}
    assert ds.label_column == "label" and str(ds.source) == "inline.csv"
    assert ds.encoder.transform(frame.drop(columns="label")).tolist() == ds.X.tolist()
