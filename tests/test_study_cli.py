"""`semisup study` on a small CSV (stand-in methods)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from _study_support import ensure_methods

from semisup import ConfigError
from semisup.cli import main


@pytest.fixture()
def table(tmp_path):
    from sklearn.datasets import load_iris

    X, y = load_iris(return_X_y=True)  # scikit-learn's bundled iris data
    rng = np.random.default_rng(0)
    names = np.array(["setosa", "versicolor", "virginica"])
    label = np.where(rng.random(len(y)) < 0.5, names[y], "")
    frame = pd.DataFrame(X, columns=["sl", "sw", "pl", "pw"])
    frame.insert(0, "flower", [f"f{i}" for i in range(len(y))])
    frame["species"] = label
    path = tmp_path / "iris.csv"
    frame.to_csv(path, index=False)
    return path


def test_cli_study_writes_the_study_folder(tmp_path, table, capsys):
    roles = ensure_methods()
    out = tmp_path / "study"
    code = main(["study", str(table), "--label-column", "species", "--id-column", "flower",
                 "--methods", f"{roles['logreg']},{roles['raises']}", "--budgets", "6,12",
                 "--repeats", "2", "--trials", "2", "--jobs", "1", "--out", str(out), "-q"])
    assert code == 0
    printed = capsys.readouterr().out
    assert "8 cells (4 ok, 4 failed, 0 skipped)" in printed
    for name in ("study.sqlite", "cells.csv", "cells.parquet", "curves.csv", "study.json",
                 "candidates.npz", "data_card.md"):
        assert (out / name).exists(), name
    info = json.loads((out / "study.json").read_text())
    assert info["data"]["class_names"] == ["setosa", "versicolor", "virginica"]
    npz = np.load(out / "candidates.npz")
    assert len(npz["row_ids"]) == info["data"]["n_unlabeled"]
    assert npz["row_ids"][0].startswith("f")
    # a changed spec in the same folder is refused with a one-line error (exit code 2)
    code = main(["study", str(table), "--label-column", "species", "--id-column", "flower",
                 "--methods", roles["logreg"], "--budgets", "6,12", "--repeats", "3",
                 "--jobs", "1", "--out", str(out), "-q"])
    assert code == 2
    assert "--restart" in capsys.readouterr().err


def test_cli_bad_method_and_budget(tmp_path, table, capsys):
    ensure_methods()
    code = main(["study", str(table), "--label-column", "species", "--methods", "no-such",
                 "--out", str(tmp_path / "s"), "-q"])
    assert code == 2 and "unknown method 'no-such'" in capsys.readouterr().err
    from semisup.study import StudySpec, run_study

    spec = StudySpec.build(None, {"data": str(table), "label_column": "species",
                                  "methods": ["studytest-logreg"], "budgets": [5000]})
    with pytest.raises(ConfigError, match="'budgets': 5000 is larger than the pool"):
        run_study(spec, tmp_path / "t", jobs=1, progress=False)
