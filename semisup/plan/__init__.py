"""Learning curves, their backtest, the cost model, the plan and the rows to label next.

``make_plan(study_dir, PlanRequest(...))`` reads a finished study folder and writes
``plan.json``, ``curves.csv`` and ``label_next.csv``; the maths underneath is exposed as pure
functions (``fit_learning_curve``, ``bootstrap_curve``, ``backtest_curve``, the cost helpers
and ``choose``) so it can be checked on its own.
"""

from __future__ import annotations

from ._backtest import Backtest, backtest_curve
from ._bootstrap import CurveBand, bootstrap_curve, extrapolation_factor, probability_meets
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
from ._inputs import StudyFacts, data_warnings, read_json, study_facts, tidy_cells
from ._make import CURVE_COLUMNS, Plan, make_plan
from ._request import METRICS, PlanRequest

__all__ = [
    "CURVE_COLUMNS",
    "MAX_EXTRAPOLATION",
    "METRICS",
    "Backtest",
    "CurveBand",
    "CurveFit",
    "Option",
    "Plan",
    "PlanRequest",
    "StudyFacts",
    "backtest_curve",
    "best_effort",
    "bootstrap_curve",
    "budget_grid",
    "budget_weights",
    "choose",
    "curve_options",
    "data_warnings",
    "expected_label_price",
    "extrapolation_factor",
    "fit_learning_curve",
    "fit_power_law_batch",
    "labeling_rounds",
    "make_plan",
    "plan_cost",
    "power_law",
    "probability_meets",
    "read_json",
    "study_facts",
    "tidy_cells",
]
