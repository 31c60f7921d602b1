"""The refit of the study's best method on every training label, scoring the unlabeled rows."""

from __future__ import annotations

import json
import logging
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._seeding import derive_seed
from ._exports import write_candidates
from ._representations import method_features
from ._tuning import fit_method

__all__ = ["refit_candidates"]

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
