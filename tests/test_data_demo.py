"""The bundled demo table against scikit-learn's digits, which it is built from."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.datasets import load_digits

from semisup.data import (
    DEMO_ID_COLUMN,
    DEMO_LABEL_COLUMN,
    demo_table,
    load_dataset,
    write_demo_table,
)

ROOT = Path(__file__).resolve().parents[1]
PIXELS = [f"px_{r}_{c}" for r in range(8) for c in range(8)]


def test_demo_table_matches_sklearn_digits(tmp_path):
    digits = load_digits()  # reference: scikit-learn's bundled copy of the UCI digits test set
    path = write_demo_table(tmp_path / "forms.csv")
    table = pd.read_csv(path)
    assert table.shape[0] == 1797 == digits.data.shape[0]
    assert len(PIXELS) == 64 == digits.data.shape[1]
    np.testing.assert_array_equal(table[PIXELS].to_numpy(), digits.data.astype(int))
    labeled = table[DEMO_LABEL_COLUMN].notna().to_numpy()
    # the clerk's labels are the true digits where given
    np.testing.assert_array_equal(table.loc[labeled, DEMO_LABEL_COLUMN].astype(int),
                                  digits.target[labeled])

    full = demo_table(all_labeled=True)
    counts = full[DEMO_LABEL_COLUMN].astype(int).value_counts().sort_index()
    # reference: class counts of load_digits().target (10 classes, 1797 rows)
    assert counts.index.tolist() == list(range(10))
    assert counts.tolist() == np.bincount(digits.target).tolist()


def test_demo_table_loads_with_enough_labels(tmp_path):
    path = write_demo_table(tmp_path / "forms.csv")
    ds = load_dataset(path, label_column=DEMO_LABEL_COLUMN, id_column=DEMO_ID_COLUMN)
    assert ds.n_rows == 1797 and ds.class_names == [str(d) for d in range(10)]
    n_labeled = int(ds.labeled_mask.sum())
    # 30% holdout leaves a pool for budgets up to ~250 (common practice, no source)
    assert 350 <= n_labeled <= 450 and int(0.7 * n_labeled) >= 250
    assert np.bincount(ds.y[ds.labeled_mask]).min() >= 20
    assert ds.column_kinds[DEMO_ID_COLUMN] == "id"
    assert ds.column_kinds["scan_batch"] == "categorical"
    assert ds.column_kinds["ink_density"] == "numeric"
    assert ds.X.dtype == np.float32 and ds.X.shape[0] == 1797
    assert any(b.kind == "missing" and b.column == "ink_density" for b in ds.blocks)
    assert ds.row_ids[0].startswith("F-")


def test_demo_table_is_deterministic_and_parquet_matches_csv(tmp_path):
    a = write_demo_table(tmp_path / "a.csv").read_bytes()
    b = write_demo_table(tmp_path / "b.csv").read_bytes()
    assert a == b
    write_demo_table(tmp_path / "c.parquet")
    pd.testing.assert_frame_equal(pd.read_parquet(tmp_path / "c.parquet"), demo_table())


def test_committed_card_describes_todays_demo_table(tmp_path):
    card = json.loads((ROOT / "data_cards" / "digits_forms.json").read_text())
    data = write_demo_table(tmp_path / "digits_forms.csv").read_bytes()
    # reference: hashlib SHA-256 of the table written now
    assert card["sha256"] == hashlib.sha256(data).hexdigest()
    assert card["n_rows"] == 1797
    assert all(card["user_fields"][k] for k in ("provenance", "license", "collection_dates",
                                                "known_biases"))


def test_fewer_labels_are_the_first_of_the_same_clerk_labels():
    digits = load_digits()  # reference: scikit-learn's bundled digits (the true classes)
    full = demo_table()
    few = demo_table(n_labeled=250)
    mask = few[DEMO_LABEL_COLUMN].notna().to_numpy()
    assert mask.sum() == 250
    assert full[DEMO_LABEL_COLUMN].notna().to_numpy()[mask].all()   # a subset of the 400
    np.testing.assert_array_equal(few.loc[mask, DEMO_LABEL_COLUMN].astype(int),
                                  digits.target[mask])
    pd.testing.assert_frame_equal(few.drop(columns=DEMO_LABEL_COLUMN),
                                  full.drop(columns=DEMO_LABEL_COLUMN))
