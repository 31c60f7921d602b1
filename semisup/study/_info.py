"""What study.json says about a study: data facts, evaluation rows, warnings, timing."""

from __future__ import annotations

import statistics
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

__all__ = [
    "MIN_HOLDOUT_PER_CLASS", "PROTOCOL_NOTES", "evaluation_facts", "protocol_notes",
    "rare_class_warnings", "study_info",
]

#: Below this many holdout labels in a class, estimates are called loose (common practice,
#: no source: the usual "about 30" rule for a normal approximation).
MIN_HOLDOUT_PER_CLASS = 30

_EVALUATION_NOTES = {
    "cross-fit": [
        "cross-fitted evaluation: the labeled rows are dealt into stratified folds (a seeded "
        "hash of each row id orders each class); repeat r is evaluated on fold r % folds and "
        "draws its budgets from the other folds only, so every labeled row is evaluated and "
        "none is trained or tuned on in the repeat that evaluates it; repeats beyond the fold "
        "count start a fresh, differently seeded fold assignment",
        "unsupervised stage fitted once per repeat (its own seeded draw) on the features of "
        "every row of the table (unlabeled and labeled rows, never a label), as the model is "
        "used later on rows whose "
        "features it has seen; cached under cache/, reused by the repeat's cells",
    ],
    "holdout": [
        "holdout carved once from the labeled rows, stratified by class, never trained or "
        "tuned on, shared by every repeat",
        "unsupervised stage fitted once per repeat on the unlabeled rows and the pool's "
        "features (plus the holdout's features only when transductive), cached under "
        "cache/, reused by the repeat's cells",
    ],
    "test-file": [
        "evaluation on the labeled rows of a separate test file only, shared by every repeat; "
        "its labels are never trained or tuned on",
        "unsupervised stage fitted once per repeat on the table's features (plus the test "
        "file's features only when transductive), cached under cache/, reused by the "
        "repeat's cells",
    ],
}

_COMMON_NOTES = [
    "per repeat the labeled draws are nested (a budget's rows contain every smaller budget's "
    "rows) and stratified, with every class present once the budget reaches the class count; "
    "all methods share the same draws",
    "every method gets the same number of optuna trials (TPE sampler seeded from the study "
    "seed), tuned by stratified cross-validation inside the labeled draw only; the first trial "
    "is the default parameters; with no class of two labels tuning is skipped",
    "semi-supervised methods see the unlabeled rows (and the pool rows outside the draw, labels "
    "hidden; the evaluation rows' features only when transductive) during tuning and fitting, "
    "capped at max_unlabeled rows per cell (seeded sample)",
    "metrics on the repeat's evaluation rows: accuracy with a Wilson 95% interval, balanced "
    "accuracy, macro-F1, log-loss over all study classes (probabilities clipped to "
    "[1e-15, 1-1e-15]), per-class recall; curves.csv gives the across-repeat mean with a "
    "Student-t 95% interval, widened by the evaluation rows' binomial variance where repeats "
    "share evaluation rows and, for accuracy on stratified folds, by the variance of the "
    "labeled sample's class mix",
]


#: The note of a study grown by labeling rounds (labels_added.csv).
ROUNDS_NOTE = (
    "labels returned in labeling rounds (labels_added.csv) are training rows only: they join "
    "every repeat's pool after the table's own labeled rows, round after round, each round in "
    "its own stratified random order, so the draws of the smaller pool stay as they were; they "
    "are never evaluated (the plan chose them, so they are no random sample) and the "
    "evaluation rows stay the table's own"
)


#: The note of a study whose cells pass max_unlabeled (study/_cell.py, ``large_cell``).
LARGE_CELLS_NOTE = (
    "large cells: a cell with more unlabeled rows than max_unlabeled fits its tuning folds, "
    "trials and final model on the same rows in one order (validation labels hidden in place) "
    "and searches each k-nearest-neighbour graph once for all of them; smaller cells search in "
    "every fit"
)


def protocol_notes(protocol: str, rounds: bool = False, one_draw: bool = False,
                   stage_sample: int | None = None, large_cells: bool = False) -> list[str]:
    """The protocol lines study.json records for evaluation ``protocol`` (``rounds``: the
    study holds labels returned in labeling rounds; ``one_draw``: ``stage_draws = "one"``;
    ``stage_sample``: the stage is fitted on a seeded sample of that many of its rows;
    ``large_cells``: some cells pass ``max_unlabeled``)."""
    notes = [*_EVALUATION_NOTES[protocol], *_COMMON_NOTES, *([ROUNDS_NOTE] if rounds else []),
             *([LARGE_CELLS_NOTE] if large_cells else [])]
    if stage_sample is not None:
        notes.insert(len(_EVALUATION_NOTES[protocol]), (
            f"large table: the unsupervised stage is fitted on a seeded random sample of "
            f"{stage_sample:,} of the rows named above (stage_rows) and then encodes every row"))
    if one_draw:
        shared = ("fitted once for the study (stage_draws = \"one\": one seeded draw shared "
                  "by every repeat, so its randomness is in no interval)")
        notes = [n.replace("fitted once per repeat (its own seeded draw)", shared)
                 .replace("fitted once per repeat", shared) for n in notes]
    return notes


#: The default (cross-fit) protocol's notes.
PROTOCOL_NOTES = protocol_notes("cross-fit")


def _counts(y: np.ndarray, idx: np.ndarray, names: list[str]) -> dict[str, int]:
    return dict(zip(names, map(int, np.bincount(y[idx], minlength=len(names))), strict=True))


def evaluation_facts(design: Any) -> dict[str, Any]:
    """study.json's ``evaluation`` block (field names in DEVELOPERS.md)."""
    spec, y = design.spec, design.y
    names = list(design.ds.class_names)
    repeats = range(len(design.repeat_fold))
    n_eval = [int(len(design.eval_idx(r))) for r in repeats]
    n_pool = [int(len(design.pool_idx(r))) for r in repeats]
    rep_rows = design.representation_rows
    test = design.test
    parts = design.pool_parts.get(design.repeat_fold[0], []) if design.pool_parts else []
    rounds = [{"round": int(r), "n_rows": int(n)} for r, n in parts if r > 0]
    return {
        "protocol": design.protocol,
        "folds": int(design.n_folds),
        "cycles": (len(design.repeat_fold) + design.n_folds - 1) // design.n_folds
        if design.protocol == "cross-fit" else 1,
        "shared_across_repeats": design.protocol != "cross-fit",
        "n_labeled": int(len(design.labeled)),
        "n_rows_evaluated": design.n_rows_evaluated,
        "n_eval_min": min(n_eval), "n_eval_max": max(n_eval),
        "n_pool_min": min(n_pool), "n_pool_max": max(n_pool),
        # rows labeled in rounds (labels_added.csv): in every pool, never evaluated
        "rounds": rounds,
        "n_round_rows": int(sum(r["n_rows"] for r in rounds)),
        "per_repeat": [{"repeat": r, "fold": int(design.repeat_fold[r]), "n_eval": n_eval[r],
                        "n_pool": n_pool[r]} for r in repeats],
        "evaluated_class_counts": _counts(
            y, np.unique(np.concatenate([design.eval_idx(r) for r in repeats])), names),
        **_rare_classes(design, names),
        "representation_fit": {
            "n_rows": int(len(rep_rows)),
            "includes_evaluation_features": bool(np.isin(
                np.concatenate([design.eval_idx(r) for r in repeats]), rep_rows).any()),
            "includes_labels": False,
        },
        "transductive_methods": bool(spec.transductive),
        "test_file": None if test is None else {
            "path": test.path, "sha256": test.sha256, "n_rows": int(len(test.y)),
            "class_counts": _counts(test.y, np.arange(len(test.y)), names),
        },
    }


def _large_cells(design: Any) -> bool:
    """Whether some cell of the study can pass ``max_unlabeled`` (the largest fold's rows to
    see unlabeled, less the smallest budget; the rule is ``study._cell.large_cell``)."""
    from ._cell import large_cell

    spec = design.spec
    n_pool = max(int(len(design.pool_idx(r))) for r in range(len(design.repeat_fold)))
    n_eval = max(int(len(design.eval_idx(r))) for r in range(len(design.repeat_fold)))
    n_seen = len(design.unlabeled_idx) + n_pool + (n_eval if spec.transductive else 0)
    return large_cell(n_seen, min(spec.budgets), spec.max_unlabeled)


def _sample_rows(design: Any) -> int | None:
    stage = getattr(design, "stage", None)
    if not design.kinds or stage is None or stage.fit_rows >= stage.n_rows:
        return None
    return int(stage.fit_rows)


def _rare_classes(design: Any, names: list[str]) -> dict[str, Any]:
    """Which classes the evaluation cannot score, or scores in only some repeats."""
    y = design.y
    repeats = range(len(design.repeat_fold))
    labeled = np.bincount(y[design.labeled], minlength=len(names))
    not_evaluated = {}
    some = {}
    for i, name in enumerate(names):
        seen = sum(bool(np.any(y[design.eval_idx(r)] == i)) for r in repeats)
        if seen == 0:
            not_evaluated[name] = int(labeled[i])
        elif seen < len(design.repeat_fold):
            some[name] = {"n_labeled": int(labeled[i]), "repeats_evaluated": int(seen)}
    return {"classes_not_evaluated": not_evaluated, "classes_evaluated_in_some_repeats": some}


def rare_class_warnings(evaluation: dict[str, Any]) -> list[str]:
    """study.json's warnings on classes that are never, or not always, evaluated."""
    out = []
    missing = evaluation.get("classes_not_evaluated") or {}
    if missing:
        listed = ", ".join(f"{name!r} ({n} label{'s' if n != 1 else ''})"
                           for name, n in missing.items())
        out.append(
            f"class(es) {listed} are never evaluated: a class needs two labeled rows of the "
            "table to be trained on and scored in the same repeat (rows labeled in rounds are "
            "training rows only); they train in every repeat, but accuracy, balanced accuracy "
            "and macro-F1 are measured on the other classes' rows and say nothing about them. "
            "Label a second row of each to evaluate it"
        )
    some = evaluation.get("classes_evaluated_in_some_repeats") or {}
    if some:
        repeats = len(evaluation.get("per_repeat") or []) or None
        listed = ", ".join(f"{name!r} ({v['n_labeled']} labels, {v['repeats_evaluated']} of "
                           f"{repeats} repeats)" for name, v in some.items())
        out.append(
            f"class(es) {listed} have fewer labels than the folds and are evaluated only in "
            "the repeats whose fold holds one of their rows (they train in every repeat); "
            "balanced accuracy and macro-F1 of the other repeats average over fewer classes"
        )
    return out


def study_info(design: Any, cells: pd.DataFrame, diagnostics: dict, rep_errors: dict,
               rep_seconds: dict, order_kind: str, jobs: int, cluster: Any) -> dict[str, Any]:
    """The content of study.json (the runner adds the candidates and this run's timing)."""
    spec, ds, y = design.spec, design.ds, design.y
    labeled, unlabeled_idx, budgets = design.labeled, design.unlabeled_idx, design.budgets
    names = list(ds.class_names)
    evaluation = evaluation_facts(design)
    # The smallest evaluation set and pool of a repeat (with a holdout or a test file every
    # repeat has the same ones).
    small_r = min(range(spec.repeats), key=lambda r: len(design.eval_idx(r)))
    pool_r = min(range(spec.repeats), key=lambda r: len(design.pool_idx(r)))
    hold_counts = np.bincount(y[design.eval_idx(small_r)], minlength=len(names))
    pool_counts = np.bincount(y[design.pool_idx(pool_r)], minlength=len(names))
    eval_counts = np.array(list(evaluation["evaluated_class_counts"].values()))
    warnings_: list[str] = []
    ok = cells[cells["status"] == "ok"]
    widths = (ok["accuracy_high"] - ok["accuracy_low"]).to_numpy() if len(ok) else []
    width = float(statistics.median(widths)) if len(widths) else None
    small = [names[i] for i, n in enumerate(eval_counts) if n < MIN_HOLDOUT_PER_CLASS]
    if small:
        w = f"; median Wilson 95% interval width on accuracy of one cell {width:.3f}" if width \
            else ""
        what = {"cross-fit": "labeled rows (every one is evaluated once per fold cycle)",
                "holdout": "holdout labels", "test-file": "test file rows"}[design.protocol]
        lead = "holdout" if design.protocol == "holdout" else "evaluation rows"
        warnings_.append(
            f"{lead} too small for tight estimates: {len(small)} class(es) have fewer than "
            f"{MIN_HOLDOUT_PER_CLASS} {what} (smallest {int(eval_counts.min())}, "
            f"{evaluation['n_rows_evaluated']} rows evaluated in all){w}"
        )
    warnings_.extend(rare_class_warnings(evaluation))
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
    n_table = design.n_table_rows
    return {
        "spec": spec.to_dict(),
        "fingerprint": design.fingerprint,
        "data": {
            "source": str(ds.source) if getattr(ds, "source", None) else spec.data,
            # where the table is whatever folder a later command runs in, and its content;
            # both are checked by add-labels, fit and plan (study/_integrity.py)
            "path": str(Path(spec.data).resolve()) if spec.data else None,
            "sha256": getattr(ds, "sha256", None),
            "n_rows": int(n_table), "n_labeled": int(len(labeled)),
            "n_unlabeled": int(len(unlabeled_idx)), "n_features": int(ds.X.shape[1]),
            "class_names": names,
            "class_counts": _counts(y, labeled, names),
        },
        # Kept for readers of the fixed-holdout layout: the smallest evaluation set of a repeat.
        "holdout": {"n_rows": int(hold_counts.sum()),
                    "class_counts": dict(zip(names, map(int, hold_counts), strict=True)),
                    "median_accuracy_interval_width": width},
        "pool": {"n_rows": int(pool_counts.sum()),
                 "class_counts": dict(zip(names, map(int, pool_counts), strict=True))},
        "evaluation": evaluation,
        "budgets": [int(b) for b in budgets],
        "max_unlabeled_per_cell": spec.max_unlabeled,
        "selection_representation": order_kind,
        "status_counts": {k: int(v) for k, v in counts.items()},
        "protocol": protocol_notes(design.protocol, bool(evaluation["rounds"]),
                                   design.spec.stage_draws == "one", _sample_rows(design),
                                   _large_cells(design)),
        "warnings": warnings_,
        "representation": {"diagnostics": diagnostics, "errors": rep_errors},
        # rows and draws of the unsupervised stage, and why (study/_representations.py)
        "unsupervised_stage": design.stage.to_dict() if design.kinds and design.stage else None,
        "timing": timing,
        "execution": {"jobs": jobs, "cluster": None if cluster is None else str(cluster)},
    }
