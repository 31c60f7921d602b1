"""The refit of the study's best method on every training label, scoring the unlabeled rows."""

from __future__ import annotations

import json
import logging
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._seeding import derive_seed
from ._exports import write_candidates, write_candidates_arrays
from ._representations import method_features
from ._tuning import fit_method

__all__ = ["add_cover_scores", "refit_candidates"]

log = logging.getLogger(__name__)


def refit_candidates(out: Path, ds: Any, ctx: Any, methods: dict[str, Any], cells: pd.DataFrame,
                     features: dict[str, np.ndarray], spec: Any,
                     train_idx: np.ndarray) -> dict[str, Any]:
    """Refit the best method on the rows ``train_idx``; write candidates.npz.

    ``train_idx`` is every labeled row of the table with cross-fitting or a test file, the pool
    with a holdout (the holdout stays unseen). The best method is the one with the highest mean
    accuracy at the largest budget (random draws when there are any); its parameters are those
    its first repeat tuned there. Returns the facts study.json records under ``candidates``.
    """
    unl = ctx.unlabeled_idx
    rep_kind = "vae" if "vae" in features else "raw"
    ok = cells[cells["status"] == "ok"]
    if (ok["strategy"] == "random").any():
        ok = ok[ok["strategy"] == "random"]
    proba = np.zeros((len(unl), ctx.n_classes), dtype=np.float32)
    best_name, top = None, 0
    note = "no finished cell; probabilities are zero"
    if len(ok):
        top = int(ok["n_labels"].max())
        means = ok[ok["n_labels"] == top].groupby("method")["accuracy"].mean()
        best_name = str(means.sort_values(ascending=False, kind="stable").index[0])
        method = methods[best_name]
        row = ok[(ok["method"] == best_name) & (ok["n_labels"] == top)].iloc[0]
        params = json.loads(row["params"]) if isinstance(row["params"], str) else {}
        X = method_features(features, method.representation)
        seed = derive_seed(spec.seed, "candidates", best_name)
        X_unl = None
        if method.semi_supervised and len(unl):
            rng = np.random.default_rng(seed)
            sub = unl if len(unl) <= spec.max_unlabeled else np.sort(
                rng.choice(unl, spec.max_unlabeled, replace=False))
            X_unl = X[sub]
        try:
            est = fit_method(method, params, seed, X[train_idx], ctx.y[train_idx], X_unl)
            if len(unl):
                from ..methods import align_proba

                proba = align_proba(est.predict_proba(X[unl]), est.classes_,
                                    ctx.n_classes).astype(np.float32)
            note = f"{best_name} refitted on {len(train_idx)} labeled rows"
        except Exception as exc:  # noqa: BLE001
            note = f"refit of {best_name} failed ({type(exc).__name__}: {exc}); zeros written"
            log.warning("candidates: %s", note)
    write_candidates(
        Path(out) / "candidates.npz", np.asarray(ds.row_ids)[unl], features[rep_kind][unl],
        proba, method=best_name, n_labels=len(train_idx), class_names=list(ds.class_names),
        representation_kind=rep_kind,
    )
    return {"method": best_name, "best_at_budget": top, "n_rows": int(len(unl)),
            "representation": rep_kind, "note": note}


def add_cover_scores(out: Path, ds: Any, ctx: Any, shift: dict[str, Any] | None) -> dict | None:
    """When the labeled-versus-pool check flags a shift, add to candidates.npz each candidate
    row's score of looking labeled (``cover_score``, from the check's own classifier:
    :func:`semisup.data._shift.pool_scores`) and the labeled-row count (``cover_n_labeled``);
    the plan then draws the rows to label next towards the pool regions the labels miss
    (:func:`semisup.selection.cover_select`). Without a flag nothing changes and None is
    returned; else the facts study.json records under ``candidates.cover``."""
    if not shift or not shift.get("clearly_different"):
        return None
    from ..data._shift import pool_scores, shift_seed

    path = Path(out) / "candidates.npz"
    labeled = np.asarray(ds.y) != -1
    unl = np.asarray(ctx.unlabeled_idx)
    if not path.is_file() or not len(unl) or np.any(labeled[unl]):
        return None
    scores = pool_scores(ds.X, labeled, seed=shift_seed())
    if scores is None:
        return None
    full = np.full(len(labeled), np.nan)
    full[~labeled] = scores
    with np.load(path, allow_pickle=False) as npz:
        arrays = {k: npz[k] for k in npz.files}
    arrays["cover_score"] = full[unl].astype(np.float32)
    arrays["cover_n_labeled"] = np.asarray(int(labeled.sum()), dtype=np.int64)
    arrays["cover_auc"] = np.asarray(float(shift.get("auc", np.nan)))
    write_candidates_arrays(path, arrays)
    return {"n_rows": int(len(unl)), "n_labeled": int(labeled.sum()),
            "note": "labeled rows unlike the pool: candidates.npz holds each row's score of "
                    "looking labeled, and the plan's rows to label next cover the pool "
                    "regions the labels miss"}
