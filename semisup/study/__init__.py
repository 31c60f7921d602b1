"""Label-budget studies: spec, holdout and nested draws, tuning, metrics, store, backends."""

from __future__ import annotations

from ._draws import default_budgets, nested_draws, split_holdout
from ._metrics import METRICS, holdout_metrics, summarize_curves, wilson_interval
from ._representations import STAGE_SAMPLE_ROWS
from ._rounds import ADDED_LABELS_FILE, SHEET_STUDY_COLUMN, AddResult, add_labels, study_id
from ._runner import StudyResult, run_study
from ._settings import (
    EVALUATIONS,
    SETTINGS,
    STAGE_DRAWS,
    Option,
    Setting,
    add_setting_arguments,
    check_setting,
    setting_values,
)
from ._spec import StudySpec

__all__ = [
    "ADDED_LABELS_FILE",
    "EVALUATIONS",
    "METRICS",
    "SETTINGS",
    "SHEET_STUDY_COLUMN",
    "STAGE_DRAWS",
    "STAGE_SAMPLE_ROWS",
    "AddResult",
    "Option",
    "Setting",
    "StudyResult",
    "StudySpec",
    "add_labels",
    "add_setting_arguments",
    "check_setting",
    "default_budgets",
    "holdout_metrics",
    "nested_draws",
    "run_study",
    "setting_values",
    "split_holdout",
    "study_id",
    "summarize_curves",
    "wilson_interval",
]
