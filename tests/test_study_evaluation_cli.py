"""Evaluation options through the command line: a separate labeled test file, and bad input
(a test file that does not fit the table) as one line, exit 2."""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from _study_support import ensure_methods, pca_representation

from semisup.cli import main

ROOT = Path(__file__).resolve().parents[1]


def _iris_frames(seed: int = 0):
    """scikit-learn's bundled iris: 120 table rows (about half labeled), 30 test rows."""
    from sklearn.datasets import load_iris

    X, y = load_iris(return_X_y=True)
    names = np.array(["setosa", "versicolor", "virginica"])
    frame = pd.DataFrame(X, columns=["sl", "sw", "pl", "pw"])
    frame.insert(0, "flower", [f"f{i}" for i in range(len(y))])
    frame["species"] = names[y]
    rng = np.random.default_rng(seed)
    order = rng.permutation(len(y))
    test = frame.iloc[np.sort(order[:30])].reset_index(drop=True)
    table = frame.iloc[np.sort(order[30:])].reset_index(drop=True)
    hide = rng.random(len(table)) < 0.5
    table.loc[hide, "species"] = ""
    return table, test


@pytest.fixture()
def files(tmp_path):
    table, test = _iris_frames()
    table.to_csv(tmp_path / "table.csv", index=False)
    test.to_csv(tmp_path / "test.csv", index=False)
    return tmp_path / "table.csv", tmp_path / "test.csv", table, test


def _spec(table_path, test_path, names, **kw):
    from semisup.study import StudySpec

    base = {"data": str(table_path), "label_column": "species", "id_column": "flower",
            "test_data": str(test_path), "methods": names, "budgets": [6, 12, 24],
            "repeats": 2, "trials": 1, "pretrain": {"vae": {"n_components": 2}}}
    base.update(kw)
    return StudySpec.build(overrides=base)


def test_test_file_rows_are_the_only_evaluation_rows(tmp_path, files):
    from sklearn.linear_model import LogisticRegression

    from semisup._seeding import derive_seed
    from semisup.data import load_dataset
    from semisup.selection import stratified_order
    from semisup.study import run_study

    table_path, test_path, _, test = files
    roles = ensure_methods()
    spec = _spec(table_path, test_path, [roles["logreg"], roles["selftrain"]])
    assert spec.evaluation == "test-file"  # a test file alone switches the protocol
    out = tmp_path / "study"
    result = run_study(spec, out, jobs=1, representation_fn=pca_representation,
                       progress=False)
    cells = result.cells
    assert (cells["status"] == "ok").all()
    assert set(cells["n_eval"]) == {30} and set(cells["fold"]) == {0}
    ds = load_dataset(table_path, label_column="species", id_column="flower")
    X_test = ds.encoder.transform(test[["sl", "sw", "pl", "pw"]])
    y_test = np.searchsorted(ds.class_names, test["species"].to_numpy())
    labeled = np.flatnonzero(ds.y >= 0)
    for r in range(2):
        draw = labeled[stratified_order(ds.y[labeled], derive_seed(0, "draw", r))[:24]]
        # scikit-learn's LogisticRegression with the stand-in's defaults is the reference,
        # trained on the table's draw and scored on the 30 test rows alone.
        ref = LogisticRegression(C=1.0, max_iter=300).fit(ds.X[draw], ds.y[draw])
        want = float(np.mean(ref.predict(X_test) == y_test))
        got = cells.query(f"method == '{roles['logreg']}' and n_labels == 24 and repeat == {r}")
        assert got["accuracy"].iloc[0] == pytest.approx(want)
    info = json.loads((out / "study.json").read_text())
    ev = info["evaluation"]
    assert ev["protocol"] == "test-file" and ev["shared_across_repeats"] is True
    assert ev["test_file"]["n_rows"] == 30 and ev["n_rows_evaluated"] == 30
    assert ev["n_pool_min"] == len(labeled) and info["holdout"]["n_rows"] == 30
    assert ev["representation_fit"]["includes_evaluation_features"] is False
    # the unsupervised stage saw the table's rows only (one draw per repeat)
    assert (out / "cache" / "fits-vae.txt").read_text().split() == [str(len(ds.y))] * 2
    npz = np.load(out / "candidates.npz")
    assert len(npz["row_ids"]) == int((ds.y < 0).sum())  # candidates are table rows only
    assert not set(npz["row_ids"]) & set(test["flower"])


def test_transductive_test_file_features_reach_the_unsupervised_stage(tmp_path, files):
    from semisup.study import run_study

    table_path, test_path, table, _ = files
    roles = ensure_methods()
    spec = _spec(table_path, test_path, [roles["selftrain"]], transductive=True, budgets=[6],
                 repeats=1)
    run_study(spec, tmp_path / "s", jobs=1, representation_fn=pca_representation,
              progress=False)
    fits = (tmp_path / "s" / "cache" / "fits-vae.txt").read_text().split()
    assert fits == [str(len(table) + 30)]


def test_cli_options_choose_the_protocol(tmp_path, files, capsys):
    table_path, test_path, _, _ = files
    roles = ensure_methods()
    common = ["study", str(table_path), "--label-column", "species", "--id-column", "flower",
              "--methods", roles["logreg"], "--budgets", "6,12", "--repeats", "2", "--trials",
              "1", "--jobs", "1", "-q"]
    for extra, protocol, folds in (
        (["--test-file", str(test_path)], "test-file", 1),
        (["--evaluation", "holdout", "--holdout", "0.25"], "holdout", 1),
        (["--folds", "3"], "cross-fit", 3),
    ):
        out = tmp_path / protocol
        assert main([*common, *extra, "--out", str(out)]) == 0
        ev = json.loads((out / "study.json").read_text())["evaluation"]
        assert (ev["protocol"], ev["folds"]) == (protocol, folds)
    capsys.readouterr()


# ------------------------------------------------------------------------------ bad input
def _run(args: list[str], cwd: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-m", "semisup", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=300)


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _bad_test_file(test: pd.DataFrame, case: str) -> pd.DataFrame:
    bad = test.copy()
    if case == "missing column":
        bad = bad.drop(columns=["pw"])
    elif case == "extra column":
        bad["colour"] = "blue"
    elif case == "unknown class":
        bad.loc[3, "species"] = "rose"
    elif case == "shared row id":
        bad.loc[5, "flower"] = "f7"  # f7 is a row of the table (see _iris_frames)
    elif case == "unlabeled row":
        bad.loc[2, "species"] = ""
    return bad


# case -> (extra CLI arguments, substrings the one-line error must contain)
BAD = {
    "missing column": (["--test-file", "bad.csv"],
                       ["bad.csv", "column 'pw' of the table is missing", "same columns"]),
    "extra column": (["--test-file", "bad.csv"],
                     ["bad.csv", "column 'colour' is not a column of the table", "same columns"]),
    "unknown class": (["--test-file", "bad.csv"],
                      ["bad.csv", "label 'rose' at line 5", "not a class of the table",
                       "setosa, versicolor, virginica", "fix the labels"]),
    "shared row id": (["--test-file", "bad.csv"],
                      ["bad.csv", "row id 'f7' at line 7", "also a row of the table",
                       "remove the shared rows"]),
    "unlabeled row": (["--test-file", "bad.csv"],
                      ["bad.csv", "label column 'species' is empty at line 4",
                       "every test row needs a label"]),
    "test file with another protocol": (
        ["--test-file", "test.csv", "--evaluation", "holdout"],
        ["'test_data' is given but 'evaluation' is 'holdout'", "use evaluation 'test-file'"]),
}


@pytest.mark.slow
@pytest.mark.parametrize("case", sorted(BAD))
def test_bad_evaluation_input_is_one_line_and_exit_2(tmp_path, case):
    table, test = _iris_frames()
    assert "f7" in set(table["flower"]) and "f7" not in set(test["flower"])
    table.to_csv(tmp_path / "table.csv", index=False)
    test.to_csv(tmp_path / "test.csv", index=False)
    _bad_test_file(test, case).to_csv(tmp_path / "bad.csv", index=False)
    inputs = [tmp_path / n for n in ("table.csv", "test.csv", "bad.csv")]
    before = [_sha(p) for p in inputs]
    extra, wanted = BAD[case]
    result = _run(["study", "table.csv", "--label-column", "species", "--id-column", "flower",
                   "--methods", "supervised-logreg", "--out", "out", *extra], cwd=tmp_path)
    assert result.returncode == 2, (result.stdout, result.stderr)
    assert "Traceback" not in result.stderr
    lines = [line for line in result.stderr.splitlines() if line.startswith("error: ")]
    assert len(lines) == 1, result.stderr
    for text in wanted:
        assert text in lines[0], lines[0]
    # inputs only read: bytes unchanged (hashlib SHA-256); no study results written
    assert [_sha(p) for p in inputs] == before
    assert not (tmp_path / "out" / "cells.csv").exists()
