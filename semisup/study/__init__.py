"""Label-budget studies: spec, holdout and nested draws, tuning, metrics, store, backends.

A study folder's record is :class:`StudyRecord` (``_folder.py``): study.json typed and frozen,
with the derived facts (row counts, evaluation protocol and rows, lead metric, summary budget,
the one imbalance rule) as properties. The study writes study.json; the plan, the report, the
final model and the labeling rounds read it only through this record.

Settings: every study option is one row of :data:`SETTINGS` (``study/_settings.py``): its
rule, its meaning and the command-line arguments that give it. :class:`StudySpec` checks
values with those rules, ``semisup card`` / ``semisup study`` build their arguments and
overrides from them and README's TOML reference is generated from them (DEVELOPERS.md,
"Settings"). A new option is one ``StudySpec`` field and one row.
"""

from __future__ import annotations

from ._draws import default_budgets, nested_draws, split_holdout
from ._folder import StudyRecord, as_int, read_curves, read_study_record, truthy
from ._integrity import check_exports, recorded_table, study_json, study_table
from ._layout import OUTPUT_FILES, OUTPUT_FOLDERS
from ._lock import study_lock
from ._metrics import (
    CURVE_CONFIDENCE,
    METRICS,
    holdout_metrics,
    summarize_curves,
    wilson_interval,
)
from ._representations import STAGE_SAMPLE_ROWS, stage_fit_rows
from ._rounds import (
    ADDED_LABELS_FILE,
    SHEET_STUDY_COLUMN,
    AddResult,
    add_labels,
    apply_added_labels,
    read_added_labels,
    study_id,
)
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
from ._tuning import cv_splits, fit_method, tune_params

__all__ = [
    "ADDED_LABELS_FILE",
    "CURVE_CONFIDENCE",
    "EVALUATIONS",
    "METRICS",
    "OUTPUT_FILES",
    "OUTPUT_FOLDERS",
    "SETTINGS",
    "SHEET_STUDY_COLUMN",
    "STAGE_DRAWS",
    "STAGE_SAMPLE_ROWS",
    "AddResult",
    "Option",
    "Setting",
    "StudyRecord",
    "StudyResult",
    "StudySpec",
    "add_labels",
    "add_setting_arguments",
    "apply_added_labels",
    "as_int",
    "check_exports",
    "check_setting",
    "cv_splits",
    "default_budgets",
    "fit_method",
    "holdout_metrics",
    "nested_draws",
    "read_added_labels",
    "read_curves",
    "read_study_record",
    "recorded_table",
    "run_study",
    "setting_values",
    "split_holdout",
    "stage_fit_rows",
    "study_id",
    "study_json",
    "study_lock",
    "study_table",
    "summarize_curves",
    "truthy",
    "tune_params",
    "wilson_interval",
]
