"""Synthetic study folders for the plan and report tests (no study runner needed).

Cells follow a known inverse power law error(n) = a + b * n**(-c) plus Gaussian noise, so the
tests know the truth the plan should recover.
"""

from __future__ import annotations

import json
from collections import namedtuple
from pathlib import Path

import numpy as np
import pandas as pd

# (a, b, c) of the error curve of each method; invented values for tests only.
TRUTH = {
    "latent-logreg": (0.03, 1.5, 0.6),
    "supervised-logreg": (0.08, 1.2, 0.5),
}
BUDGETS = (20, 40, 80, 160, 320)

Selection = namedtuple("Selection", "indices reasons")


def stand_in_select_rows(strategy, Z, n, *, seed, proba=None, exclude=None):
    """Tiny stand-in for semisup.selection.select_rows with the same signature."""
    Z = np.asarray(Z)
    if strategy == "random":
        order = np.random.default_rng(seed).permutation(len(Z))[:n]
        return Selection(order, ["random"] * len(order))
    if strategy == "uncertainty":
        p = np.sort(np.asarray(proba), axis=1)
        margin = p[:, -1] - p[:, -2]
        order = np.argsort(margin, kind="stable")[:n]
        return Selection(order, [f"margin {margin[i]:.3f}" for i in order])
    order = np.argsort(Z[:, 0], kind="stable")[:n]
    return Selection(order, [f"cluster {i % 3}" for i in range(len(order))])


def write_study(
    folder: Path,
    *,
    truth: dict | None = None,
    budgets=BUDGETS,
    repeats: int = 5,
    noise: float = 0.01,
    seed: int = 0,
    strategies=("random",),
    class_names=("cat", "dog"),
    class_counts=None,
    column_names=("x1", "x2"),
    n_labeled: int = 400,
    n_holdout: int = 150,
    candidates: bool = True,
    study_json: bool = True,
    failed: int = 0,
    row_prefix: str = "r",
    curves: bool = True,
) -> Path:
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    truth = truth or TRUTH
    rng = np.random.default_rng(seed)
    rows = []
    for method, (a, b, c) in truth.items():
        for strategy in strategies:
            shift = 0.02 if strategy == "representative" else 0.0
            for n in budgets:
                for r in range(repeats):
                    err = a + b * n ** (-c) - shift * (n <= 40) + rng.normal(0, noise)
                    acc = float(np.clip(1 - err, 0, 1))
                    rows.append({
                        "method": method, "n_labels": n, "repeat": r, "strategy": strategy,
                        "status": "ok", "accuracy": acc,
                        "balanced_accuracy": float(np.clip(acc - 0.01, 0, 1)),
                        "macro_f1": float(np.clip(acc - 0.02, 0, 1)),
                        "log_loss": float(-np.log(max(acc, 1e-3))), "seconds": 0.1,
                        "error": "",
                    })
    for i in range(failed):
        rows.append({"method": "broken-method", "n_labels": budgets[0], "repeat": i,
                     "strategy": "random", "status": "failed", "accuracy": np.nan,
                     "balanced_accuracy": np.nan, "macro_f1": np.nan, "log_loss": np.nan,
                     "seconds": 0.0, "error": "ValueError: synthetic failure"})
    pd.DataFrame(rows).to_csv(folder / "cells.csv", index=False)
    if curves:  # the study's measured points, written as the study writes them
        from semisup.study import summarize_curves

        summarize_curves(pd.DataFrame(rows)).to_csv(folder / "curves.csv", index=False)
    counts = class_counts or {name: n_labeled // len(class_names) for name in class_names}
    if study_json:
        study = {
            "spec": {"seed": seed, "methods": list(truth), "budgets": list(budgets),
                     "repeats": repeats, "strategies": list(strategies)},
            "data": {"n_rows": 5000, "n_labeled": n_labeled, "n_unlabeled": 5000 - n_labeled,
                     "class_names": list(class_names), "class_counts": counts,
                     "feature_names": list(column_names)},
            # the study's layout (semisup/study/_folder.py): the holdout's size under holdout
            "holdout": {"n_rows": n_holdout},
            "protocol": ["stratified nested draws", "equal tuning budget per method"],
            "warnings": [],
            "representation": {"diagnostics": {"vae": {"elbo": -12.5}}, "errors": {}},
        }
        (folder / "study.json").write_text(json.dumps(study), encoding="utf-8")
    if candidates:
        n_cand = 60
        z = rng.normal(size=(n_cand, 3)).astype(np.float32)
        logits = rng.normal(size=(n_cand, len(class_names)))
        proba = np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True)
        ids = np.array([f"{row_prefix}{i}" for i in range(n_cand)])
        np.savez(folder / "candidates.npz", row_ids=ids, Z=z, proba=proba)
    return folder
