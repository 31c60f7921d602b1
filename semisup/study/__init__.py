"""Label-budget studies: spec, holdout and nested draws, tuning, metrics, store, backends.

A study folder's record is :class:`StudyRecord` (``_folder.py``): study.json typed and frozen,
with the derived facts (row counts, evaluation protocol and rows, lead metric, summary budget,
the one imbalance rule) as properties. The study writes study.json; the plan, the report, the
final model and the labeling rounds read it only through this record.
"""

from __future__ import annotations

from ._draws import default_budgets, nested_draws, split_holdout
from ._folder import StudyRecord, read_curves, read_study_record
from ._metrics import (
    MEASURED_INTERVAL,
    METRICS,
    holdout_metrics,
    summarize_curves,
    wilson_interval,
)
from ._representations import STAGE_SAMPLE_ROWS
from ._rounds import ADDED_LABELS_FILE, SHEET_STUDY_COLUMN, AddResult, add_labels, study_id
from ._runner import StudyResult, run_study
from ._spec import StudySpec

__all__ = [
    "ADDED_LABELS_FILE",
    "MEASURED_INTERVAL",
    "METRICS",
    "SHEET_STUDY_COLUMN",
    "STAGE_SAMPLE_ROWS",
    "AddResult",
    "StudyRecord",
    "StudyResult",
    "StudySpec",
    "add_labels",
    "default_budgets",
    "holdout_metrics",
    "nested_draws",
    "read_curves",
    "read_study_record",
    "run_study",
    "split_holdout",
    "study_id",
    "summarize_curves",
    "wilson_interval",
]
