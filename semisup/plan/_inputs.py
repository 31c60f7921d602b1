"""Read a study folder (I/O edge): cells.csv, study.json, data_card.json, candidates.npz.

Only cells.csv is required. Every key of the JSON files is optional; a missing fact just turns
off what depends on it (with a warning in the plan), a malformed file is a one-line error.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

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
    #: labeled rows returned by labeling rounds (``add-labels``): they train, never evaluate
    n_round_rows: int = 0

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
    """Pull the facts the plan needs out of study.json (read by the names the study writes,
    :class:`semisup.study._folder.StudyRecord`), with data_card.json's counts as a fallback."""
    from ..study._folder import StudyRecord, as_int

    record = StudyRecord.from_dict(study)
    card = card if isinstance(card, Mapping) else {}
    facts = StudyFacts()
    facts.seed = record.seed or 0
    facts.n_rows = record.data.n_rows if record.data.n_rows is not None else \
        as_int(card.get("n_rows"))
    facts.n_labeled = record.data.n_labeled if record.data.n_labeled is not None else \
        as_int(card.get("n_labeled"))
    facts.n_unlabeled = record.data.n_unlabeled
    if facts.n_unlabeled is None and facts.n_rows is not None and facts.n_labeled is not None:
        facts.n_unlabeled = facts.n_rows - facts.n_labeled
    facts.n_holdout = record.holdout_rows
    evaluation = record.evaluation
    if evaluation is not None:
        proto = str(evaluation.protocol or "holdout").strip().lower().replace("-", "_")
        facts.protocol = proto
        facts.n_eval = evaluation.n_eval_min
        facts.n_rows_evaluated = evaluation.n_rows_evaluated
        facts.folds = evaluation.folds
        facts.n_repeats = evaluation.n_repeats or as_int(record.spec.get("repeats"))
        facts.evaluation = dict(evaluation.raw)
        facts.n_round_rows = int(evaluation.n_round_rows or 0)
    counts = record.data.class_counts or card.get("class_counts")
    if isinstance(counts, Mapping):
        facts.class_counts = {str(k): float(v) for k, v in counts.items()
                              if as_int(v) is not None and float(v) >= 0}
    facts.warnings = list(record.warnings)
    return facts


_SMALL_EVAL = re.compile(r"(?:evaluation rows|holdout) too small for tight estimates: "
                         r"(?P<detail>.*?)(?:; median Wilson 95% interval width on accuracy of "
                         r"one cell (?P<width>[\d.]+))?")


def _plain_warning(text: str, facts: StudyFacts) -> str:
    """The study's small-evaluation warning said plainly: how many labeled rows the metric is
    tested on and how uncertain one repeat's accuracy is (half the median Wilson 95% interval
    of a cell, which the study's warning gives); other warnings as they are."""
    m = _SMALL_EVAL.fullmatch(str(text))
    n = facts.n_rows_evaluated if facts.protocol == "cross_fit" else facts.n_eval
    if m is None or not n:
        return str(text)
    per = (f" ({facts.n_eval:,} per repeat)" if facts.protocol == "cross_fit" and facts.n_eval
           else "")
    width = m.group("width")
    sure = (f": one repeat's accuracy is uncertain by about \u00b1{float(width) / 2:.2f}"
            if width else "")
    return f"only {n:,} labeled rows to test on{per}{sure} ({m.group('detail')})"


def data_warnings(facts: StudyFacts) -> list[str]:
    """Warnings about the data behind a study: its own, a small holdout, imbalanced classes.

    Thresholds (holdout under 100 rows, class ratio 5 or more) are common practice, no source.
    """
    out = [_plain_warning(w, facts) for w in facts.warnings]
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
