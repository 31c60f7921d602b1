"""Plan arithmetic: prices, rounds, the choice; hand-computed examples."""

from __future__ import annotations

import numpy as np
import pytest

from semisup import PlanError
from semisup.plan import (
    CurveBand,
    CurveFit,
    Option,
    PlanRequest,
    best_effort,
    choose,
    curve_options,
    expected_label_price,
    labeling_rounds,
    plan_cost,
)


def test_expected_price_uses_the_class_mix():
    # Hand-computed: 300 cats at 2.0 and 100 dogs at 5.0 -> 0.75 * 2 + 0.25 * 5 = 2.75.
    assert expected_label_price(2.0, {"dog": 5.0}, {"cat": 300, "dog": 100}) == 2.75
    assert expected_label_price(2.0) == 2.0


def test_unknown_class_in_class_costs_is_named():
    with pytest.raises(PlanError, match="'bird'"):
        expected_label_price(1.0, {"bird": 3.0}, {"cat": 1, "dog": 1})


def test_class_costs_without_class_counts_is_an_error():
    with pytest.raises(PlanError, match="class_counts"):
        expected_label_price(1.0, {"cat": 3.0}, {})


def test_plan_cost_hand_examples():
    # 500 labels, 200 owned: buy 300 at 2.75 + one round at 10 = 835.
    assert plan_cost(500, label_price=2.75, labels_owned=200, cost_per_round=10.0) == (
        835.0, 300, 1)
    # Owning enough labels costs nothing, not even a round.
    assert plan_cost(150, label_price=2.75, labels_owned=200, cost_per_round=10.0) == (
        0.0, 0, 0)
    assert labeling_rounds(1) == 1 and labeling_rounds(0) == 0


@pytest.mark.parametrize("kwargs, match", [
    ({"metric": "recall"}, "unknown metric 'recall'"),
    ({"metric": "log_loss"}, "log_loss"),
    ({"target": 1.0}, "between 0 and 1"),
    ({"target": "high"}, "target must be a number"),
    ({"confidence": 0.0}, "confidence"),
    ({"cost_per_label": -1.0}, "cost_per_label"),
    ({"cost_per_round": -2.0}, "cost_per_round"),
    ({"class_costs": {"cat": -1}}, "class cost of 'cat'"),
    ({"labels_owned": -3}, "labels_owned"),
    ({"n_next": 2.5}, "n_next"),
])
def test_plan_request_validation(kwargs, match):
    args = {"metric": "accuracy", "target": 0.9, "cost_per_label": 1.0, **kwargs}
    with pytest.raises(PlanError, match=match):
        PlanRequest(**args)


def _opt(method, n, prob, cost, strategy="random", mean=0.9):
    return Option(method, strategy, n, mean, mean - 0.01, mean + 0.01, prob, cost, False)


def test_choose_cheapest_sure_enough_option_and_runner_up():
    opts = [
        _opt("m1", 100, 0.70, 100.0),           # cheap but not sure enough
        _opt("m1", 200, 0.85, 200.0),
        _opt("m2", 150, 0.90, 150.0),           # cheapest that qualifies
        _opt("m2", 300, 0.99, 300.0),
        _opt("m3", 150, 0.95, 150.0, strategy="uncertainty", mean=0.95),  # tie in cost
    ]
    chosen, runner = choose(opts, 0.8)
    # Tie at cost 150 and budget 150 goes to the higher probability (m3).
    assert (chosen.method, chosen.n_labels) == ("m3", 150)
    assert (runner.method, runner.n_labels) == ("m2", 150)
    assert choose(opts, 0.999) == (None, None)
    # When nothing qualifies, the best is the highest predicted metric (m3's 0.95).
    assert best_effort(opts).method == "m3"
    assert best_effort([_opt("a", 10, 0.1, 1.0, mean=0.7), _opt("b", 20, 0.0, 2.0, mean=0.8)]
                       ).method == "b"


def test_curve_options_probability_and_cost_from_known_samples():
    # A hand-made band of error rates at budgets 100 and 200 with four bootstrap samples.
    fit = CurveFit("power_law", (0.0, 1.0, 0.5), False, "", 50.0, 200.0, 0.0)
    samples = np.array([[0.20, 0.08], [0.15, 0.10], [0.12, 0.12], [0.10, 0.16]])
    band = CurveBand(fit, np.array([100.0, 200.0]), np.array([0.14, 0.11]), samples,
                     np.array([0.10, 0.08]), np.array([0.20, 0.16]),
                     np.array([False, False]), 0.9, 4, 0)
    opts = curve_options(band, method="m", strategy="random", target=0.85, confidence=0.7,
                         label_price=2.0, labels_owned=80, cost_per_round=5.0, show=[100, 200])
    # Metric = 1 - error: at 100 the samples are 0.80, 0.85, 0.88, 0.90 -> 3/4 meet 0.85;
    # at 200: 0.92, 0.90, 0.88, 0.84 -> 3/4.
    assert [o.probability for o in opts] == [0.75, 0.75]
    # Costs: (100 - 80) * 2 + 5 = 45 and (200 - 80) * 2 + 5 = 245.
    assert [o.cost for o in opts] == [45.0, 245.0]
    assert opts[0].mean == pytest.approx(0.86) and opts[0].low == pytest.approx(0.80)
    assert opts[0].to_dict()["predicted"] == {"mean": pytest.approx(0.86),
                                              "low": pytest.approx(0.80),
                                              "high": pytest.approx(0.90)}
