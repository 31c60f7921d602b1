"""The plan on a real data set: scikit-learn's handwritten digits (UCI, 1797 rows).

The learning curve of a logistic regression is measured at small budgets, the plan predicts
the budget that reaches a target, and the prediction is then checked by measuring at that
budget on the same holdout. External reference: the real data set shipped with scikit-learn
and scikit-learn's LogisticRegression; the tolerance (0.03 accuracy) is common practice,
no source.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _plan_synth import stand_in_select_rows
from sklearn.datasets import load_digits
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import train_test_split
from sklearn.preprocessing import StandardScaler

from semisup.plan import PlanRequest, backtest_curve, make_plan

REPEATS = 4


@pytest.fixture(scope="module")
def digits():
    X, y = load_digits(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    X_pool, X_hold, y_pool, y_hold = train_test_split(X, y, test_size=500, stratify=y,
                                                      random_state=0)
    orders = [np.random.default_rng(r).permutation(len(y_pool)) for r in range(REPEATS)]

    def measure(budget: int, repeat: int) -> float:
        idx = orders[repeat][:budget]  # nested draws: budget b uses the first b rows
        model = LogisticRegression(max_iter=300, C=0.5).fit(X_pool[idx], y_pool[idx])
        return float(model.score(X_hold, y_hold))

    return measure


def test_plan_prediction_holds_on_digits(digits, tmp_path):
    budgets = (20, 40, 80, 160)
    rows = [{"method": "supervised-logreg", "n_labels": b, "repeat": r, "strategy": "random",
             "status": "ok", "accuracy": digits(b, r), "balanced_accuracy": np.nan,
             "macro_f1": np.nan, "log_loss": np.nan, "seconds": 0.0, "error": ""}
            for b in budgets for r in range(REPEATS)]
    cells = pd.DataFrame(rows)
    cells.to_csv(tmp_path / "cells.csv", index=False)

    bt = backtest_curve(cells["n_labels"], cells["accuracy"], cells["repeat"], n_boot=100)
    assert bt.n_labels == 160 and abs(bt.error) < 0.03

    plan = make_plan(tmp_path, PlanRequest("accuracy", 0.93, 1.0, labels_owned=0),
                     select_rows=stand_in_select_rows, n_boot=100)
    # The predictions at 2x and 4x the largest measured budget, checked by measuring there
    # on the same holdout: within 0.03 and inside the stated 90% interval.
    at = {o.n_labels: o for o in plan.options if o.method == "supervised-logreg"}
    for budget in (320, 640):
        o = at[budget]
        measured = np.mean([digits(budget, r) for r in range(REPEATS)])
        assert o.extrapolated and abs(o.mean - measured) < 0.03
        assert o.low <= measured <= o.high
    # At the default confidence (0.8) the wide extrapolated intervals reach 0.93 nowhere on
    # the grid; asked for an even chance of 0.92 (the stated chance carries the corpus's
    # decision margin, so 0.93 at 640 labels is stated below 50%), the plan must choose a
    # budget beyond the measured ones, and that budget does reach the target when measured
    # (within 0.02).
    plan = make_plan(tmp_path, PlanRequest("accuracy", 0.92, 1.0, confidence=0.5,
                                           labels_owned=0),
                     select_rows=stand_in_select_rows, n_boot=100)
    c = plan.chosen
    assert c is not None and c.method == "supervised-logreg", plan.summary()
    assert c.n_labels > 160 and c.extrapolated
    assert np.mean([digits(c.n_labels, r) for r in range(REPEATS)]) >= 0.92 - 0.02
