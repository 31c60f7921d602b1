"""Data cards: content, leakage check, duplicates, JSON twin, atomic writes."""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pandas as pd
import pytest
from sklearn.tree import DecisionTreeClassifier

from semisup import DataWarning
from semisup.data import make_card, write_card
from semisup.data._card import find_leakage


def _table(n=400, seed=0, leak=False):
    rng = np.random.default_rng(seed)
    y = rng.choice(["ok", "late", "lost"], size=n, p=[0.7, 0.2, 0.1])
    frame = pd.DataFrame({
        "rid": [f"R{i:04d}" for i in range(n)],
        "weight": rng.normal(size=n),
        "depot": rng.choice(["north", "south", "east"], size=n),
        "status": y,
    })
    if leak:
        # a column filled in after the outcome: a noisy copy of the label
        frame["refund_code"] = pd.Series(y).map({"ok": "0", "late": "L", "lost": "X"})
        frame["days"] = pd.Series(y).map({"ok": 1.0, "late": 5.0, "lost": 30.0}) \
            + rng.uniform(0, 0.5, size=n)
    unlabeled = rng.random(n) < 0.5
    frame.loc[unlabeled, "status"] = None
    return frame


def test_card_content(tmp_path):
    frame = _table()
    frame.loc[3, "weight"] = np.nan
    frame = pd.concat([frame, frame.iloc[[5, 6]].assign(rid=["R9998", "R9999"])],
                      ignore_index=True)
    path = tmp_path / "parcels.csv"
    frame.to_csv(path, index=False)
    card = make_card(path, label_column="status", id_column="rid")
    d = card.to_dict()
    # reference: hashlib SHA-256 of the file's bytes
    assert d["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert d["n_rows"] == 402 and d["n_columns"] == 4
    assert d["kinds"] == {"id": ["rid"], "numeric": ["weight"], "categorical": ["depot"],
                          "label": ["status"]}
    labeled = frame["status"].notna()
    assert d["n_labeled"] == int(labeled.sum())
    # reference: pandas value_counts of the labeled rows
    assert d["class_counts"] == {k: int(v) for k, v in
                                 sorted(frame.loc[labeled, "status"].value_counts().items())}
    weight = next(c for c in d["columns"] if c["name"] == "weight")
    assert weight["missing"] == 1
    assert d["duplicate_rows"] == 2
    assert d["imbalance_ratio"] > 3 and "Imbalanced" in d["imbalance_note"]
    assert d["leakage"] == []
    md = card.to_markdown()
    for text in ("SHA-256", "## Missing values", "## Suspected leakage", "Provenance",
                 "License", "Collection dates", "Known biases", "health or safety"):
        assert text in md


def test_leakage_flagged(tmp_path):
    path = tmp_path / "parcels.parquet"
    _table(leak=True).to_parquet(path, index=False)
    card = make_card(path, label_column="status", id_column="rid")
    flagged = {item["column"] for item in card.leakage}
    assert flagged == {"refund_code", "days"}
    assert "refund\\_code" in card.to_markdown()  # escaped for Markdown


def test_leakage_numeric_agrees_with_sklearn_tree():
    rng = np.random.default_rng(3)
    y = rng.integers(0, 2, size=600)
    x = y + rng.normal(0, 0.05, size=600)  # separable by one threshold
    noise = rng.normal(size=600)
    frame = pd.DataFrame({"x": x, "noise": noise})
    found, note = find_leakage(frame, {"x": "numeric", "noise": "numeric"}, y.astype(np.int64))
    assert [f["column"] for f in found] == ["x"]
    # reference: scikit-learn's depth-1 tree on x alone separates the classes
    assert DecisionTreeClassifier(max_depth=1).fit(x.reshape(-1, 1), y).score(
        x.reshape(-1, 1), y) >= 0.98
    assert "labeled rows" in note


def test_conflicting_duplicates_and_warnings_recorded(tmp_path):
    frame = pd.DataFrame({"a": [1.0, 1.0, 2.0, 3.0, 4.0], "b": ["u", "u", "v", "v", "u"],
                          "label": ["x", "y", "x", "y", "z"]})
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    with pytest.warns(DataWarning, match="single labeled row"):
        card = make_card(path, label_column="label")
    assert card.duplicate_feature_rows_conflicting_labels == 2
    assert card.duplicate_rows == 0
    assert any("'z'" in w for w in card.warnings)


def test_write_card_twin_atomic_and_keeps_user_fields(tmp_path):
    path = tmp_path / "parcels.csv"
    _table().to_csv(path, index=False)
    card = make_card(path, label_column="status", id_column="rid")
    md, js = write_card(card, tmp_path / "cards" / "parcels.md")
    assert md.exists() and js == tmp_path / "cards" / "parcels.json"
    assert json.loads(js.read_text())["sha256"] == card.sha256
    # no temporary files left behind
    assert sorted(p.name for p in (tmp_path / "cards").iterdir()) == ["parcels.json",
                                                                      "parcels.md"]
    doc = json.loads(js.read_text())
    doc["user_fields"]["license"] = "CC BY 4.0"
    js.write_text(json.dumps(doc))
    again = make_card(path, label_column="status", id_column="rid")
    write_card(again, md)
    assert json.loads(js.read_text())["user_fields"]["license"] == "CC BY 4.0"
    assert "**License**: CC BY 4.0" in md.read_text()


def test_leakage_screen_misses_no_column_the_exact_check_flags(monkeypatch):
    """The vectorised screen only decides which columns get the exact one-column tree; with
    the screen switched off (every numeric column checked by scikit-learn's tree) the same
    columns are flagged, on leaks of several shapes and on near-leaks."""
    import semisup.data._card as card_module

    rng = np.random.default_rng(11)
    n = 900
    y = rng.integers(0, 3, size=n)
    cols = {
        "threshold": y + rng.normal(0, 0.05, n),  # one cut per class
        "interval": np.where(y == 1, 0.0, 1.0) * (y + 1) + rng.normal(0, 0.01, n),
        "with_missing": np.where(y == 0, np.nan, y * 10.0),  # missing means class 0
        "near_leak": y + rng.normal(0, 0.35, n),
        "noise": rng.normal(size=n),
        "ties": np.round(rng.normal(size=n)),
    }
    for i in range(40):
        cols[f"noise{i}"] = rng.normal(size=n)
    frame = pd.DataFrame(cols)
    kinds = dict.fromkeys(frame.columns, "numeric")
    screened, _ = find_leakage(frame, kinds, y.astype(np.int64))
    monkeypatch.setattr(card_module, "LEAKAGE_SCREEN_MARGIN", 1.0)  # every column exact
    exact, _ = find_leakage(frame, kinds, y.astype(np.int64))
    assert screened == exact
    assert {f["column"] for f in exact} >= {"threshold", "interval", "with_missing"}
