"""Learning curves, their backtest, the cost model, the plan and the rows to label next.

``make_plan(study_dir, PlanRequest(...))`` (``read_inputs``, then ``build_plan``, which writes
nothing, then ``write_plan``) reads a finished study folder and writes the plan
under its own name in ``plans/`` (with the study state it was made from and its forecast
points), ``plan.json`` (the latest plan, with the earlier plans' track record) and the
annotator sheet ``label_next.csv`` (or ``.xlsx``); the maths underneath is exposed as pure
functions (the curve families and their fits, the bootstrap, the rolling-origin backtests,
the family weights, the calibration, the shrinkage, the cost helpers and ``choose``) so it
can be checked on its own. What the plan knows of the study comes from the study folder's one
record, :class:`semisup.study.StudyRecord`; beyond the largest measured budget the curves are
continued with the prior learned from real curves (``_continuation.py``,
``continuation.json``, built by ``experiments/curves``).
"""

from __future__ import annotations

from ._backtest import BACKTEST_RATIO, Backtest, OriginForecast, backtest_curve, rolling_origin
from ._bootstrap import (
    CurveBand,
    bootstrap_curve,
    extrapolation_factor,
    probability_meets,
    small_sample_factor,
)
from ._calibrate import Calibration, calibrate, calibrated_samples, paule_mandel, ratio_table
from ._choose import Option, best_effort, budget_grid, choose, curve_options
from ._costs import expected_label_price, labeling_rounds, plan_cost
from ._curves import (
    MAX_EXTRAPOLATION,
    CurveFit,
    budget_weights,
    fit_learning_curve,
    fit_power_law_batch,
    power_law,
)
from ._decision import (
    DASH,
    FORECAST_CEILING,
    METRIC_WORDS,
    as_number,
    decision_lines,
    forecast_span,
    forecast_value,
    money,
    owned_option,
    percent,
)
from ._ensemble import BacktestRecord, ensemble_records, family_errors, family_weights
from ._families import FAMILIES, Family, exponential, fit_family_batch, mmf, weibull
from ._history import (
    PLANS_FOLDER,
    PlanStatus,
    current_state,
    list_plans,
    plan_status,
    read_forecast,
    read_measured,
    study_state,
)
from ._honest import overlapping, shrink_toward_mean
from ._inputs import data_warnings, read_json, tidy_cells
from ._label_next import selection_phrase
from ._make import CURVE_COLUMNS, Plan, PlanInputs, build_plan, make_plan, read_inputs, write_plan
from ._request import METRICS, PlanRequest
from ._sheet import SHEET_FORMATS
from ._track import score_plan, track_record

__all__ = [
    "DASH",
    "as_number",
    "money",
    "percent",
    "BACKTEST_RATIO",
    "CURVE_COLUMNS",
    "FAMILIES",
    "FORECAST_CEILING",
    "MAX_EXTRAPOLATION",
    "METRICS",
    "METRIC_WORDS",
    "Backtest",
    "BacktestRecord",
    "Calibration",
    "CurveBand",
    "CurveFit",
    "Family",
    "OriginForecast",
    "Option",
    "PLANS_FOLDER",
    "Plan",
    "PlanInputs",
    "PlanRequest",
    "PlanStatus",
    "SHEET_FORMATS",
    "backtest_curve",
    "best_effort",
    "bootstrap_curve",
    "budget_grid",
    "budget_weights",
    "build_plan",
    "calibrate",
    "calibrated_samples",
    "choose",
    "curve_options",
    "current_state",
    "data_warnings",
    "decision_lines",
    "ensemble_records",
    "expected_label_price",
    "exponential",
    "extrapolation_factor",
    "family_errors",
    "family_weights",
    "fit_family_batch",
    "fit_learning_curve",
    "fit_power_law_batch",
    "forecast_span",
    "forecast_value",
    "labeling_rounds",
    "list_plans",
    "make_plan",
    "mmf",
    "overlapping",
    "owned_option",
    "paule_mandel",
    "plan_cost",
    "plan_status",
    "power_law",
    "probability_meets",
    "ratio_table",
    "read_forecast",
    "read_inputs",
    "read_json",
    "read_measured",
    "rolling_origin",
    "score_plan",
    "selection_phrase",
    "shrink_toward_mean",
    "small_sample_factor",
    "study_state",
    "tidy_cells",
    "track_record",
    "weibull",
    "write_plan",
]
