"""Read a study folder (I/O edge): cells.csv, study.json, data_card.json, candidates.npz.

study.json is read into the study's one record, :class:`semisup.study.StudyRecord`.

Only cells.csv is required. Every key of the JSON files is optional; a missing fact just turns
off what depends on it (with a warning in the plan), a malformed file is a one-line error.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from pathlib import Path

import numpy as np
import pandas as pd

from .._errors import PlanError
from .._jsonio import read_json_object
from ..study import StudyRecord

__all__ = [
    "data_warnings",
    "read_candidates",
    "read_cells",
    "read_cells_file",
    "read_json",
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


def read_cells_file(study_dir: Path) -> pd.DataFrame:
    """cells.csv as written (untyped); a missing folder or file, or a file that is not CSV, is
    one line."""
    path = Path(study_dir) / "cells.csv"
    if not Path(study_dir).is_dir():
        raise PlanError(f"study folder {study_dir} does not exist; run 'semisup study' first")
    if not path.is_file():
        raise PlanError(f"{path} not found; run 'semisup study' to fill the study folder first")
    try:
        return pd.read_csv(path, keep_default_na=True)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise PlanError(f"{path} cannot be read as CSV ({exc}); rerun the study") from None


def read_cells(study_dir: Path, metrics: Iterable[str], raw: pd.DataFrame) -> pd.DataFrame:
    """The cells of ``raw`` (cells.csv as :func:`read_cells_file` read it; not changed),
    typed; ``metrics`` that are absent from the file are an error only when none of them is
    present."""
    path = Path(study_dir) / "cells.csv"
    cells = raw.copy()
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
    """A JSON object from ``path`` (the package's one reader); {} when the file does not
    exist, one :class:`PlanError` line when it is damaged."""
    return read_json_object(path, PlanError, fix="rerun the step that wrote it")


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


_SMALL_EVAL = re.compile(r"(?:evaluation rows|holdout) too small for tight estimates: "
                         r"(?P<detail>.*?)(?:; median Wilson 95% interval width on accuracy of "
                         r"one cell (?P<width>[\d.]+))?")


def _plain_warning(text: str, record: StudyRecord) -> str:
    """The study's small-evaluation warning said plainly: how many labeled rows the metric is
    tested on and how uncertain one repeat's accuracy is (half the median Wilson 95% interval
    of a cell, which the study's warning gives); other warnings as they are."""
    m = _SMALL_EVAL.fullmatch(str(text))
    cross_fit = record.evaluation_protocol == "cross_fit"
    n = record.n_rows_evaluated if cross_fit else record.n_eval
    if m is None or not n:
        return str(text)
    per = f" ({record.n_eval:,} per repeat)" if cross_fit and record.n_eval else ""
    width = m.group("width")
    sure = (f": one repeat's accuracy is uncertain by about \u00b1{float(width) / 2:.2f}"
            if width else "")
    return f"only {n:,} labeled rows to test on{per}{sure} ({m.group('detail')})"


def data_warnings(record: StudyRecord) -> list[str]:
    """Warnings about the data behind a study: its own, a small holdout, imbalanced classes
    (the data card's one rule, :attr:`StudyRecord.imbalanced`).

    The threshold of a holdout under 100 rows is common practice, no source.
    """
    out = [_plain_warning(w, record) for w in record.warnings]
    if record.evaluation_protocol == "cross_fit":
        if record.n_rows_evaluated is not None and record.n_rows_evaluated < 100:
            out.append(f"the study evaluated only {record.n_rows_evaluated} labeled rows in "
                       "all, so every measured metric is noisy")
    elif record.holdout_rows is not None and record.holdout_rows < 100:
        out.append(f"the holdout has only {record.holdout_rows} rows, so every measured metric "
                   "is noisy (one row moves accuracy by "
                   f"{1 / max(record.holdout_rows, 1):.3f})")
    if record.imbalanced:
        out.append(f"the labeled classes are imbalanced (largest/smallest = "
                   f"{record.imbalance_ratio:.1f}); watch balanced accuracy and macro-F1")
    return out
