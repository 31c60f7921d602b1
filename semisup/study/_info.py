"""What study.json says about a study: data facts, evaluation rows, warnings, timing."""

from __future__ import annotations

import statistics
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["MIN_HOLDOUT_PER_CLASS", "PROTOCOL_NOTES", "study_info"]

#: Below this many holdout labels in a class, estimates are called loose (common practice,
#: no source: the usual "about 30" rule for a normal approximation).
MIN_HOLDOUT_PER_CLASS = 30

PROTOCOL_NOTES = [
    "holdout carved once from the labeled rows, stratified by class, never trained or tuned on",
    "unsupervised stage fitted once per study on the unlabeled rows and the pool's features "
    "(plus the holdout's features only when transductive), cached under cache/, reused by "
    "every cell",
    "per repeat the labeled draws are nested (a budget's rows contain every smaller budget's "
    "rows) and stratified, with every class present once the budget reaches the class count; "
    "all methods share the same draws",
    "every method gets the same number of optuna trials (TPE sampler seeded from the study "
    "seed), tuned by stratified cross-validation inside the labeled draw only; the first trial "
    "is the default parameters; with no class of two labels tuning is skipped",
    "semi-supervised methods see the unlabeled rows (and the pool rows outside the draw, labels "
    "hidden) during tuning and fitting, capped at max_unlabeled rows per cell (seeded sample)",
    "metrics on the holdout: accuracy with a Wilson 95% interval, balanced accuracy, macro-F1, "
    "log-loss over all study classes (probabilities clipped to [1e-15, 1-1e-15]), per-class "
    "recall; curves.csv gives the across-repeat mean with a Student-t 95% interval",
]


def study_info(design: Any, cells: pd.DataFrame, diagnostics: dict, rep_errors: dict,
               rep_seconds: dict, order_kind: str, jobs: int, cluster: Any) -> dict[str, Any]:
    """The content of study.json (the runner adds the candidates and this run's timing)."""
    spec, ds, y = design.spec, design.ds, design.y
    labeled, unlabeled_idx = design.labeled, design.unlabeled_idx
    holdout_idx, pool_idx, budgets = design.holdout_idx, design.pool_idx, design.budgets
    names = list(ds.class_names)
    hold_counts = np.bincount(y[holdout_idx], minlength=len(names))
    pool_counts = np.bincount(y[pool_idx], minlength=len(names))
    warnings_: list[str] = []
    ok = cells[cells["status"] == "ok"]
    small = [names[i] for i, n in enumerate(hold_counts) if n < MIN_HOLDOUT_PER_CLASS]
    widths = (ok["accuracy_high"] - ok["accuracy_low"]).to_numpy() if len(ok) else []
    width = float(statistics.median(widths)) if len(widths) else None
    if small:
        w = f"; median Wilson 95% interval width on accuracy {width:.3f}" if width else ""
        warnings_.append(
            f"holdout too small for tight estimates: {len(small)} class(es) have fewer than "
            f"{MIN_HOLDOUT_PER_CLASS} holdout labels (smallest {int(hold_counts.min())}, "
            f"holdout {len(holdout_idx)} rows){w}"
        )
    missing = [names[i] for i, n in enumerate(hold_counts) if n == 0]
    if missing:
        warnings_.append(f"class(es) {', '.join(missing)} have no holdout rows and are not "
                         "evaluated; label more rows of them")
    if min(budgets) < len(names):
        warnings_.append(f"budget {min(budgets)} is below the class count {len(names)}: those "
                         "draws cannot hold every class")
    for kind, err in rep_errors.items():
        warnings_.append(f"unsupervised stage {kind!r} failed, its methods were not run: {err}")
    counts = cells["status"].value_counts().to_dict() if len(cells) else {}
    if counts.get("failed"):
        warnings_.append(f"{counts['failed']} cell(s) failed; see the error column of cells.csv")
    timing = {
        "pretrain_seconds": rep_seconds,
        "cells_seconds_total": float(cells["seconds"].fillna(0).sum()),
        "tune_seconds_total": float(cells["tune_seconds"].fillna(0).sum()),
        "fit_seconds_total": float(cells["fit_seconds"].fillna(0).sum()),
    }
    return {
        "spec": spec.to_dict(),
        "fingerprint": design.fingerprint,
        "data": {
            "source": str(ds.source) if getattr(ds, "source", None) else spec.data,
            "sha256": getattr(ds, "sha256", None),
            "n_rows": int(len(y)), "n_labeled": int(len(labeled)),
            "n_unlabeled": int(len(unlabeled_idx)), "n_features": int(ds.X.shape[1]),
            "class_names": names,
            "class_counts": {n: int(c) for n, c in zip(names, np.bincount(
                y[labeled], minlength=len(names)), strict=True)},
        },
        "holdout": {"n_rows": int(len(holdout_idx)),
                    "class_counts": dict(zip(names, map(int, hold_counts), strict=True)),
                    "median_accuracy_interval_width": width},
        "pool": {"n_rows": int(len(pool_idx)),
                 "class_counts": dict(zip(names, map(int, pool_counts), strict=True))},
        "budgets": [int(b) for b in budgets],
        "max_unlabeled_per_cell": spec.max_unlabeled,
        "selection_representation": order_kind,
        "status_counts": {k: int(v) for k, v in counts.items()},
        "protocol": PROTOCOL_NOTES,
        "warnings": warnings_,
        "representation": {"diagnostics": diagnostics, "errors": rep_errors},
        "timing": timing,
        "execution": {"jobs": jobs, "cluster": None if cluster is None else str(cluster)},
    }
