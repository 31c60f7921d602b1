"""The four commands in a row on a real open data set, through the real command line."""

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
from sklearn.datasets import load_wine

ROOT = Path(__file__).resolve().parents[1]

# scikit-learn's wine data (UCI wine recognition, 178 rows, 13 numeric features, 3 cultivars):
# real open data that the library ships.
METHODS = "supervised-logreg,latent-logreg,mixture-em"
BUDGETS = [6, 12, 24]
REPEATS = 2


def run_cli(*args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-m", "semisup", *args], capture_output=True,
                          text=True, env=env, timeout=600)


@pytest.fixture(scope="module")
def wine_csv(tmp_path_factory) -> Path:
    data = load_wine(as_frame=True)
    frame = data.frame.rename(columns={"target": "cultivar"})
    frame["cultivar"] = frame["cultivar"].map(dict(enumerate(data.target_names)))
    rng = np.random.default_rng(0)
    hidden = rng.random(len(frame)) > 0.6  # keep about 40% of the labels
    frame.loc[hidden, "cultivar"] = None
    frame.insert(0, "sample_id", [f"W{i:04d}" for i in range(len(frame))])
    path = tmp_path_factory.mktemp("wine") / "wine.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.mark.slow
def test_card_study_plan_report(wine_csv, tmp_path):
    before = hashlib.sha256(wine_csv.read_bytes()).hexdigest()
    out = tmp_path / "study"
    common = ["--label-column", "cultivar", "--id-column", "sample_id"]

    card = run_cli("card", str(wine_csv), *common, "--out", str(tmp_path / "wine.card.md"))
    assert card.returncode == 0, card.stderr
    assert (tmp_path / "wine.card.md").exists() and (tmp_path / "wine.card.json").exists()

    study = run_cli("study", str(wine_csv), *common, "--out", str(out), "--methods", METHODS,
                    "--budgets", ",".join(map(str, BUDGETS)), "--repeats", str(REPEATS),
                    "--trials", "2", "--jobs", "1", "--quiet")
    assert study.returncode == 0, study.stderr
    cells = pd.read_csv(out / "cells.csv")
    fixed = ["method", "n_labels", "repeat", "strategy", "status", "accuracy",
             "balanced_accuracy", "macro_f1", "log_loss", "seconds", "error"]
    assert list(cells.columns[: len(fixed)]) == fixed  # the fixed columns, first and in order
    assert len(cells) == len(METHODS.split(",")) * len(BUDGETS) * REPEATS
    assert (cells["status"] == "ok").all(), cells[["method", "error"]]
    # Three well-separated cultivars: every method should beat chance (1/3) by far at 24 labels.
    # (common practice, no source: a sanity floor, not a quality claim)
    top = cells[cells["n_labels"] == 24]
    assert (top["accuracy"] > 0.6).all()

    again = run_cli("study", str(wine_csv), *common, "--out", str(out), "--methods", METHODS,
                    "--budgets", ",".join(map(str, BUDGETS)), "--repeats", str(REPEATS),
                    "--trials", "2", "--jobs", "1", "--quiet")
    assert again.returncode == 0, again.stderr
    pd.testing.assert_frame_equal(pd.read_csv(out / "cells.csv"), cells)

    plan = run_cli("plan", str(out), "--target", "accuracy=0.9", "--cost-per-label", "3",
                   "--next", "10")
    doc = json.loads((out / "plan.json").read_text())
    # exit status 3: the plan was made, but no option reaches the target (README)
    assert plan.returncode == (0 if doc["reached"] else 3), plan.stderr
    for key in ("target", "confidence", "cost_per_label", "chosen", "options", "backtest",
                "warnings"):
        assert key in doc
    assert doc["target"] == {"metric": "accuracy", "value": 0.9}
    label_next = pd.read_csv(out / "label_next.csv")
    assert list(label_next.columns[:3]) == ["rank", "row_id", "reason"]
    ids = set(pd.read_csv(wine_csv)["sample_id"][pd.read_csv(wine_csv)["cultivar"].isna()])
    assert set(label_next["row_id"]) <= ids  # only unlabeled rows are worth paying for

    curves = pd.read_csv(out / "curves.csv")
    assert {"method", "strategy", "metric", "n_labels", "mean", "low", "high",
            "measured"} <= set(curves.columns)

    report = run_cli("report", str(out))
    assert report.returncode == 0, report.stderr
    html = (out / "report.html").read_text()
    assert "badly wrong" in html and "<img" in html
    assert hashlib.sha256(wine_csv.read_bytes()).hexdigest() == before
