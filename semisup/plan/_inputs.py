"""Read a study folder (I/O edge): cells.csv, study.json, data_card.json, candidates.npz.

Only cells.csv is required. Every key of the JSON files is optional; a missing fact just turns
off what depends on it (with a warning in the plan), a malformed file is a one-line error.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._errors import PlanError

__all__ = [
    "StudyFacts",
    "data_warnings",
    "read_candidates",
    "read_cells",
    "read_json",
    "study_facts",
]

_REQUIRED = ("method", "n_labels", "repeat", "status")


def tidy_cells(cells: pd.DataFrame, path: Path, required: Iterable[str]) -> pd.DataFrame:
    """Check ``cells`` (read from ``path``) has the ``required`` columns; fill a missing
    strategy with "random" and make method and strategy strings. Changes ``cells`` in place."""
    missing = [c for c in required if c not in cells.columns]
    if missing:
        raise PlanError(f"{path} has no column {missing[0]!r}; it was not written by "
                        "'semisup study' or is damaged, rerun the study")
    if "strategy" not in cells.columns:
        cells["strategy"] = "random"
    cells["strategy"] = cells["strategy"].fillna("random").astype(str)
    cells["method"] = cells["method"].astype(str)
    return cells


def read_cells(study_dir: Path, metrics: Iterable[str]) -> pd.DataFrame:
    """Cells with status ok, typed; ``metrics`` that are absent from the file are an error
    only when none of them is present."""
    path = Path(study_dir) / "cells.csv"
    if not Path(study_dir).is_dir():
        raise PlanError(f"study folder {study_dir} does not exist; run 'semisup study' first")
    if not path.is_file():
        raise PlanError(f"{path} not found; run 'semisup study' to fill the study folder first")
    try:
        cells = pd.read_csv(path, keep_default_na=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise PlanError(f"{path} cannot be read as CSV ({exc}); rerun the study") from None
    cells = tidy_cells(cells, path, _REQUIRED)
    cells["status"] = cells["status"].astype(str).str.strip().str.lower()
    n_labels = pd.to_numeric(cells["n_labels"], errors="coerce")
    if n_labels.isna().any() or (n_labels <= 0).any():
        bad = cells.loc[n_labels.isna() | (n_labels <= 0), "n_labels"].iloc[0]
        raise PlanError(f"{path} column 'n_labels' has the value {bad!r}; budgets must be "
                        "positive whole numbers")
    cells["n_labels"] = n_labels.astype(int)
    present = [m for m in metrics if m in cells.columns]
    if not present:
        raise PlanError(f"{path} has none of the metric columns {', '.join(metrics)}")
    for m in present:
        cells[m] = pd.to_numeric(cells[m], errors="coerce")
    return cells


def read_json(path: Path) -> dict:
    """A JSON object from ``path``; {} when the file does not exist."""
    path = Path(path)
    if not path.is_file():
        return {}
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise PlanError(f"{path} is not valid JSON ({exc}); rerun the step that wrote it") \
            from None
    if not isinstance(data, dict):
        raise PlanError(f"{path} should hold a JSON object, found {type(data).__name__}")
    return data


def read_candidates(study_dir: Path) -> dict[str, np.ndarray] | None:
    """Arrays of candidates.npz (row_ids, Z or representation, proba), or None when absent."""
    path = Path(study_dir) / "candidates.npz"
    if not path.is_file():
        return None
    try:
        with np.load(path, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
    except (OSError, ValueError) as exc:
        raise PlanError(f"{path} cannot be read ({exc}); rerun the study") from None
    if "row_ids" not in arrays:
        raise PlanError(f"{path} has no array 'row_ids'; rerun the study")
    if "Z" not in arrays and "representation" in arrays:
        arrays["Z"] = arrays["representation"]
    n = len(arrays["row_ids"])
    for key in ("Z", "proba"):
        if key in arrays and len(arrays[key]) != n:
            raise PlanError(f"{path}: array {key!r} has {len(arrays[key])} rows but 'row_ids' "
                            f"has {n}; rerun the study")
    return arrays


def _lookup(sources: Iterable[Mapping], *names: str) -> Any:
    """First value found under any of ``names`` at the top level or one level down."""
    for src in sources:
        if not isinstance(src, Mapping):
            continue
        for name in names:
            if name in src and src[name] is not None:
                return src[name]
        for value in src.values():
            if isinstance(value, Mapping):
                for name in names:
                    if name in value and value[name] is not None:
                        return value[name]
    return None


def _as_int(value: Any) -> int | None:
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return int(out) if math.isfinite(out) else None


@dataclass
class StudyFacts:
    """The facts of a study the plan and report use; every one may be unknown."""

    seed: int = 0
    n_rows: int | None = None
    n_labeled: int | None = None
    n_unlabeled: int | None = None
    n_holdout: int | None = None
    class_counts: dict[str, float] = field(default_factory=dict)
    batch_size: int | None = None
    warnings: list[str] = field(default_factory=list)
    #: evaluation protocol: "holdout" (one fixed holdout), "cross_fit" (each repeat holds
    #: out a different fold) or "test_file" (a separate labeled file, evaluated only)
    protocol: str = "holdout"
    n_eval: int | None = None
    n_rows_evaluated: int | None = None
    folds: int | None = None
    n_repeats: int | None = None
    evaluation: dict | None = None

    @property
    def shared_eval_rows(self) -> float | None:
        """Effective size of the evaluation rows that all repeats share.

        Their sampling error moves every repeat together, so the spread over repeats cannot
        contain it and the plan adds it as ``p (1 - p) / shared_eval_rows``. A fixed holdout
        or a test file: its size. Cross-fitting with at most one repeat per fold: None (each
        repeat is scored on its own fold; the spread already holds that error). With more
        repeats than folds the repeats of one fold share rows: the study's own
        ``p (1 - p) / n_rows_evaluated * (R - folds) / (R - 1)`` as an effective size.
        """
        if self.protocol == "cross_fit":
            r, k, n = self.n_repeats, self.folds, self.n_rows_evaluated
            if not (r and k and n) or r <= k:
                return None
            return n * (r - 1) / (r - k)
        return self.n_eval if self.n_eval is not None else self.n_holdout

    @property
    def eval_floor_rows(self) -> int | None:
        """Under cross-fitting, the labeled rows evaluated over the whole study: the binomial
        error of a proportion on that many rows is the least evaluation error the curve's
        level can have (a floor for the spread over few folds); None otherwise."""
        return self.n_rows_evaluated if self.protocol == "cross_fit" else None


def study_facts(study: Mapping, card: Mapping | None = None) -> StudyFacts:
    """Pull the facts the plan needs out of study.json (and data_card.json as a fallback)."""
    sources = [study, card or {}]
    facts = StudyFacts()
    facts.seed = _as_int(_lookup(sources, "seed", "study_seed")) or 0
    facts.n_rows = _as_int(_lookup(sources, "n_rows"))
    facts.n_labeled = _as_int(_lookup(sources, "n_labeled", "n_labelled", "labeled_rows"))
    facts.n_unlabeled = _as_int(_lookup(sources, "n_unlabeled", "unlabeled_rows"))
    holdout = _lookup(sources, "n_holdout", "holdout_size", "holdout_rows")
    if holdout is None:
        raw = _lookup(sources, "holdout")
        holdout = raw if not isinstance(raw, Mapping) else _lookup([raw], "n_rows", "n", "size",
                                                                    "rows")
        if isinstance(holdout, float) and 0 < holdout < 1:
            holdout = None  # a fraction, not a size
    facts.n_holdout = _as_int(holdout)
    evaluation = study.get("evaluation") if isinstance(study, Mapping) else None
    if isinstance(evaluation, Mapping):
        proto = str(evaluation.get("protocol") or "holdout").strip().lower().replace("-", "_")
        facts.protocol = {"crossfit": "cross_fit", "cross_fitted": "cross_fit",
                          "test": "test_file"}.get(proto, proto)
        facts.n_eval = _as_int(evaluation.get("n_eval_min"))
        facts.n_rows_evaluated = _as_int(evaluation.get("n_rows_evaluated"))
        facts.folds = _as_int(evaluation.get("folds"))
        per_repeat = evaluation.get("per_repeat")
        facts.n_repeats = (len(per_repeat) if isinstance(per_repeat, list) and per_repeat
                           else _as_int(_lookup(sources, "repeats")))
    facts.evaluation = dict(evaluation) if isinstance(evaluation, Mapping) else None
    data = study.get("data") if isinstance(study, Mapping) else None
    counts = _lookup([data or {}, *sources], "labeled_class_counts", "class_counts")
    if isinstance(counts, Mapping):
        parsed = {str(k): float(v) for k, v in counts.items()
                  if _as_int(v) is not None and float(v) >= 0}
        facts.class_counts = parsed
    facts.batch_size = _as_int(_lookup(sources, "uncertainty_batch", "selection_batch"))
    warns = study.get("warnings") if isinstance(study, Mapping) else None
    if isinstance(warns, list):
        facts.warnings = [str(w) for w in warns]
    return facts


def data_warnings(facts: StudyFacts) -> list[str]:
    """Warnings about the data behind a study: its own, a small holdout, imbalanced classes.

    Thresholds (holdout under 100 rows, class ratio 5 or more) are common practice, no source.
    """
    out = list(facts.warnings)
    if facts.protocol == "cross_fit":
        if facts.n_rows_evaluated is not None and facts.n_rows_evaluated < 100:
            out.append(f"the study evaluated only {facts.n_rows_evaluated} labeled rows in "
                       "all, so every measured metric is noisy")
    elif facts.n_holdout is not None and facts.n_holdout < 100:
        out.append(f"the holdout has only {facts.n_holdout} rows, so every measured metric "
                   "is noisy (one row moves accuracy by "
                   f"{1 / max(facts.n_holdout, 1):.3f})")
    counts = [c for c in facts.class_counts.values() if c > 0]
    if len(counts) >= 2 and max(counts) / min(counts) >= 5:
        out.append(f"the labeled classes are imbalanced (largest/smallest = "
                   f"{max(counts) / min(counts):.1f}); watch balanced accuracy and macro-F1")
    return out
