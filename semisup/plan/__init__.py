"""Learning curves, their backtest, the cost model, the plan and the rows to label next.

``make_plan(study_dir, PlanRequest(...))`` reads a finished study folder and writes
``plan.json``, ``curves.csv`` and ``label_next.csv``; the maths underneath is exposed as pure
functions (the curve families and their fits, the bootstrap, the rolling-origin backtests,
the family weights, the calibration, the shrinkage, the cost helpers and ``choose``) so it
can be checked on its own.
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
from ._ensemble import BacktestRecord, ensemble_records, family_errors, family_weights
from ._families import FAMILIES, Family, exponential, fit_family_batch, mmf, weibull
from ._honest import overlapping, shrink_toward_mean
from ._inputs import StudyFacts, data_warnings, read_json, study_facts, tidy_cells
from ._make import CURVE_COLUMNS, Plan, make_plan
from ._request import METRICS, PlanRequest

__all__ = [
    "BACKTEST_RATIO",
    "CURVE_COLUMNS",
    "FAMILIES",
    "MAX_EXTRAPOLATION",
    "METRICS",
    "Backtest",
    "BacktestRecord",
    "Calibration",
    "CurveBand",
    "CurveFit",
    "Family",
    "OriginForecast",
    "Option",
    "Plan",
    "PlanRequest",
    "StudyFacts",
    "backtest_curve",
    "best_effort",
    "bootstrap_curve",
    "budget_grid",
    "budget_weights",
    "calibrate",
    "calibrated_samples",
    "choose",
    "curve_options",
    "data_warnings",
    "ensemble_records",
    "expected_label_price",
    "exponential",
    "extrapolation_factor",
    "family_errors",
    "family_weights",
    "fit_family_batch",
    "fit_learning_curve",
    "fit_power_law_batch",
    "labeling_rounds",
    "make_plan",
    "mmf",
    "overlapping",
    "paule_mandel",
    "plan_cost",
    "power_law",
    "probability_meets",
    "ratio_table",
    "read_json",
    "rolling_origin",
    "shrink_toward_mean",
    "small_sample_factor",
    "study_facts",
    "tidy_cells",
    "weibull",
]
