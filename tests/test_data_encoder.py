"""TableEncoder against scikit-learn's own imputer, scaler and encoder, and its contract."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.impute import SimpleImputer
from sklearn.preprocessing import OneHotEncoder, RobustScaler
from sklearn.utils.estimator_checks import parametrize_with_checks

from semisup import DataError
from semisup.data import TableEncoder, infer_column_kinds


def _frame(n=300, seed=0):
    rng = np.random.default_rng(seed)
    x = rng.lognormal(size=n)
    x[rng.random(n) < 0.1] = np.nan
    colour = rng.choice(["red", "green", "blue", "rare1", "rare2"], size=n,
                        p=[0.5, 0.3, 0.19, 0.005, 0.005])
    return pd.DataFrame({
        "x": x,
        "z": rng.normal(size=n),
        "colour": colour,
        "const": 7,
        "row": np.arange(n),
    })


def test_numeric_matches_sklearn_imputer_and_robust_scaler():
    frame = _frame()
    enc = TableEncoder().fit(frame)
    X = enc.transform(frame)
    # reference: scikit-learn's SimpleImputer(strategy="median") then RobustScaler()
    imputed = SimpleImputer(strategy="median").fit_transform(frame[["x"]])
    expected = RobustScaler().fit_transform(imputed)[:, 0]
    start = next(b.start for b in enc.blocks_ if b.kind == "numeric" and b.column == "x")
    np.testing.assert_allclose(X[:, start], expected, rtol=1e-5, atol=1e-6)
    # reference: SimpleImputer(add_indicator=True) gives the same missing indicator
    indicator = SimpleImputer(strategy="median", add_indicator=True).fit_transform(
        frame[["x"]])[:, 1]
    np.testing.assert_array_equal(X[:, start + 1], indicator)
    assert X.dtype == np.float32
    # a column without missing values: no indicator, same as RobustScaler alone
    z = next(b for b in enc.blocks_ if b.column == "z")
    assert z.width == 1 and enc.blocks_[enc.blocks_.index(z) + 1].kind != "missing"
    np.testing.assert_allclose(X[:, z.start], RobustScaler().fit_transform(frame[["z"]])[:, 0],
                               rtol=1e-5, atol=1e-6)


def test_categorical_matches_sklearn_one_hot_with_infrequent_levels():
    frame = _frame()
    enc = TableEncoder(min_level_count=5).fit(frame)
    X = enc.transform(frame)
    block = next(b for b in enc.blocks_ if b.kind == "categorical")
    # reference: scikit-learn's OneHotEncoder pools levels seen < 5 times the same way
    ref = OneHotEncoder(min_frequency=5, sparse_output=False).fit(frame[["colour"]])
    expected = ref.transform(frame[["colour"]])
    kept = [c for c in ref.categories_[0] if c not in ref.infrequent_categories_[0]]
    levels = enc.categories_["colour"]
    assert levels == [*sorted(kept), "(other)"]
    got = X[:, block.start:block.stop]
    np.testing.assert_array_equal(got[:, :len(kept)], expected[:, :len(kept)])
    np.testing.assert_array_equal(got[:, -1], expected[:, -1])  # sklearn's infrequent column
    assert (got.sum(axis=1) == 1).all()  # exactly one 1 per row


def test_blocks_cover_output_in_order_and_drop_constant_and_id():
    frame = _frame()
    enc = TableEncoder().fit(frame)
    X = enc.transform(frame)
    assert enc.kinds_["const"] == "constant" and enc.kinds_["row"] == "id-like"
    position = 0
    for block in enc.blocks_:
        assert block.start == position and block.stop > block.start
        position = block.stop
    assert position == X.shape[1] == len(enc.get_feature_names_out())
    assert [b.kind for b in enc.blocks_] == ["numeric", "missing", "numeric", "categorical"]
    assert any("'const' has a single value" in n for n in enc.notes_)
    assert any("'row' looks like an id" in n for n in enc.notes_)


def test_level_cap_and_unseen_levels_go_to_other():
    rng = np.random.default_rng(1)
    frame = pd.DataFrame({"c": rng.integers(0, 100, size=5000).astype(str),
                          "v": rng.normal(size=5000)})
    enc = TableEncoder(max_levels=10, min_level_count=1).fit(frame)
    assert len(enc.categories_["c"]) == 10 and enc.categories_["c"][-1] == "(other)"
    new = pd.DataFrame({"c": ["never-seen", None], "v": [0.0, np.nan]})
    X = enc.transform(new)
    block = enc.blocks_[0]
    assert X[0, block.stop - 1] == 1.0 and X[1, block.stop - 1] == 1.0
    assert X[1, -1] == 0.0  # numeric v imputed by its median -> 0 after centring


def test_zero_iqr_falls_back_to_std():
    x = np.zeros(100)
    x[:3] = 16.0
    frame = pd.DataFrame({"x": x, "y": np.arange(100.0) * 0.5})
    X = TableEncoder().fit_transform(frame)
    # reference: numpy's standard deviation (IQR is 0 here; common practice, no source)
    np.testing.assert_allclose(X[:3, 0], 16.0 / np.std(x), rtol=1e-6)


def test_transform_needs_fitted_columns():
    enc = TableEncoder().fit(_frame())
    with pytest.raises(DataError, match="lacks column 'x'"):
        enc.transform(_frame().drop(columns=["x"]))


def test_infer_column_kinds_rules():
    n = 60
    frame = pd.DataFrame({
        "num": np.linspace(0, 1, n),
        "cat": ["a", "b", "c"] * (n // 3),
        "code": [f"F-{i:05d}" for i in range(n)],
        "comment": [f"the box {i} was smudged" for i in range(n)],
        "const": ["k"] * n,
        "flag": [True, False] * (n // 2),
        "idx": np.arange(10, 10 + n),
    })
    kinds = infer_column_kinds(frame)
    assert kinds == {"num": "numeric", "cat": "categorical", "code": "id-like",
                     "comment": "text", "const": "constant", "flag": "categorical",
                     "idx": "id-like"}
    assert infer_column_kinds(frame, overrides={"idx": "numeric"})["idx"] == "numeric"


# TableEncoder also accepts plain arrays (columns become x0, x1, ...), so scikit-learn's own
# estimator checks apply to it.
@parametrize_with_checks([TableEncoder()])
def test_sklearn_estimator_checks(estimator, check):
    check(estimator)


# Property check (hypothesis): any mix of numeric / categorical columns with missing values
# encodes to a finite float32 matrix whose blocks tile the columns and whose one-hot blocks
# hold exactly one 1 per row (the FeatureBlock contract the VAE relies on).
from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@st.composite
def _mixed_frames(draw):
    n = draw(st.integers(min_value=2, max_value=40))
    n_cols = draw(st.integers(min_value=1, max_value=5))
    columns = {}
    for j in range(n_cols):
        if draw(st.booleans()):
            values = draw(st.lists(st.one_of(st.none(), st.floats(-1e6, 1e6)), min_size=n,
                                   max_size=n))
            columns[f"n{j}"] = pd.Series([np.nan if v is None else v for v in values],
                                         dtype=float)
        else:
            values = draw(st.lists(st.one_of(st.none(), st.sampled_from("abcde")),
                                   min_size=n, max_size=n))
            columns[f"c{j}"] = pd.Series(values, dtype=object)
    return pd.DataFrame(columns)


@settings(max_examples=40, deadline=None)
@given(_mixed_frames())
def test_blocks_tile_output_for_any_mixed_frame(frame):
    kinds = {c: ("numeric" if c.startswith("n") else "categorical") for c in frame.columns}
    encoder = TableEncoder(kinds=kinds, min_level_count=1)
    X = encoder.fit_transform(frame)
    enc_blocks = encoder.blocks_
    assert X.dtype == np.float32 and np.isfinite(X).all()
    assert enc_blocks[0].start == 0 and enc_blocks[-1].stop == X.shape[1]
    for left, right in zip(enc_blocks, enc_blocks[1:], strict=False):
        assert left.stop == right.start
    for block in enc_blocks:
        if block.kind == "categorical":
            assert (X[:, block.start:block.stop].sum(axis=1) == 1).all()
        if block.kind == "missing":
            np.testing.assert_array_equal(X[:, block.start], frame[block.column].isna())


# The state as model folders' manifest.json has stored it under "encoder" since the first
# model format: a fitted encoder must write exactly this and read it back.
_SAVED_STATE = {
    "params": {"kinds": {}, "min_level_count": 1, "max_levels": 30},
    "kinds": {"x": "numeric", "colour": "categorical"},
    "numeric": {"x": [2.5, 1.5, False]},
    "categories": {"colour": ["blue", "red", "(other)"]},
    "blocks": [["numeric", 0, 1, "x"], ["categorical", 1, 4, "colour"]],
    "feature_names_in": ["x", "colour"],
    "feature_names_out": ["x", "colour=blue", "colour=red", "colour=(other)"],
    "notes": [],
}


def test_saved_state_round_trips_and_older_states_still_read():
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0], "colour": ["red", "blue", "red", "blue"]})
    enc = TableEncoder(min_level_count=1).fit(frame)
    assert enc.to_state() == _SAVED_STATE
    again = TableEncoder.from_state(_SAVED_STATE)
    new = pd.DataFrame({"x": [0.5, np.nan, 10.0], "colour": ["blue", "green", "red"]})
    np.testing.assert_array_equal(again.transform(new), enc.transform(new))
    # reference: scikit-learn's RobustScaler fitted on the same column (median 2.5, IQR 1.5)
    # and OneHotEncoder(handle_unknown="infrequent_if_exist") for the level columns
    scaler = RobustScaler().fit(frame[["x"]])
    np.testing.assert_allclose(again.transform(new.fillna({"x": 2.5}))[:, 0],
                               scaler.transform(new[["x"]].fillna(2.5))[:, 0], rtol=1e-6)
    one_hot = OneHotEncoder(sparse_output=False, handle_unknown="ignore").fit(frame[["colour"]])
    np.testing.assert_array_equal(again.transform(new)[:, 1:3],
                                  one_hot.transform(new[["colour"]]))
    assert list(again.get_feature_names_out()) == _SAVED_STATE["feature_names_out"]
    with pytest.raises(KeyError):
        TableEncoder.from_state({k: v for k, v in _SAVED_STATE.items() if k != "blocks"})
