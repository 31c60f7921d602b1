"""The decision lines that the console plan and the report's decision box share: the decision
first, then what the labels owned give, then the rest (issue: "decision first"); forecasts
above the ceiling in words; why the goal moved since the last plan."""

from __future__ import annotations

import re

import pytest
from _plan_synth import stand_in_select_rows, write_study

from semisup.plan import PlanRequest, decision_lines, forecast_span, forecast_value, make_plan
from semisup.report import write_report


@pytest.fixture(scope="module")
def planned(tmp_path_factory):
    folder = write_study(tmp_path_factory.mktemp("words") / "s")
    plan = make_plan(folder, PlanRequest("accuracy", 0.9, 2.0, labels_owned=100),
                     select_rows=stand_in_select_rows, n_boot=30)
    return folder, plan


def _first_index(lines, prefix):
    return next(i for i, line in enumerate(lines) if line.startswith(prefix))


def test_console_plan_reads_decision_then_owned_labels_then_the_rest(planned):
    _, plan = planned
    lines = plan.summary().splitlines()
    assert lines[0].startswith("Decision: buy ")
    assert lines[1].startswith("With the labels you own: ")
    assert lines[2].startswith("You own 100 training labels")
    assert _first_index(lines, "Target: ") > 2 and _first_index(lines, "Runner-up: ") > 2
    # the price, the chance and the method are in the first line
    assert re.search(r"for [\d,]+\.\d\d and train \S+ \(\w+ selection\)", lines[0])
    assert re.search(r"an? \d+% chance of reaching accuracy 0\.9", lines[0])


def test_report_decision_box_has_the_console_lines_in_the_same_order(planned):
    folder, plan = planned
    text = write_report(folder).read_text(encoding="utf-8")
    box = text[text.index("<div class=\"decision"):]
    box = box[:box.index("</div>")]
    paras = [re.sub(r"<[^>]+>", "", p) for p in box.split("<p>")[1:]]
    import html

    expected = decision_lines(plan.to_dict())
    assert [html.unescape(p) for p in paras] == expected
    assert plan.summary().splitlines()[:len(expected)] == expected
    # the decision box is the first thing of the page's first section
    first = text[text.index("<section"):]
    assert first.index("<div class=\"decision") < first.index("<table")


def test_forecasts_above_the_ceiling_read_at_least():
    assert forecast_value(0.9991, words=True) == "at least 0.99"
    assert forecast_value(0.9812) == "0.981"
    assert forecast_span(0.95, 1.0) == "0.950 or more"
    assert forecast_span(0.947, 0.981) == "0.947\u20130.981"
    assert forecast_span(0.995, 1.0) == "at least 0.99"


def _plan_dict(**extra):
    option = {"method": "m", "strategy": "random", "n_labels": 300, "n_new": 50,
              "predicted": {"mean": 0.999, "low": 0.97, "high": 1.0}, "probability": 0.81,
              "cost": 12.5, "extrapolated": True}
    owned = {**option, "n_labels": 250, "n_new": 0, "cost": 0.0, "probability": 0.4,
             "predicted": {"mean": 0.955, "low": 0.93, "high": 0.97}}
    return {"target": {"metric": "accuracy", "value": 0.96}, "confidence": 0.8,
            "interval": 0.9, "cost_per_label": 0.25, "chosen": option,
            "options": [option, owned], **extra}


def test_decision_lines_order_ceiling_and_why_the_goal_moved():
    lines = decision_lines(_plan_dict(previous_plan={
        "method": "m", "strategy": "random", "n_labels": 300, "expected": 0.981,
        "now": 0.972, "probability": 0.76}), track_sentence="Forecasts like this one held.")
    assert lines[0] == ("Decision: buy 50 labels for 12.50 and train m (random selection) on "
                        "300 labels: predicted accuracy at least 0.99 (90% interval 0.970 or "
                        "more, extrapolated), an 81% chance of reaching accuracy 0.96.")
    assert lines[1].startswith("With the labels you own: m (random selection) on 250 labels: "
                               "predicted accuracy 0.955")
    moved = next(line for line in lines if line.startswith("Since the last plan"))
    assert "expected accuracy 0.981" in moved and "give 0.972 there" in moved
    assert "a 76% chance" in moved
    assert lines.index("Forecasts like this one held.") < lines.index(
        next(line for line in lines if line.startswith("Target:")))
    assert "1.000" not in " ".join(lines)


def test_labels_owned_line_reads_the_budget_of_every_owned_label():
    # A smaller free budget (88 of 200 owned) that forecasts a hair higher must not be
    # offered as "what the labels you own give": the final model trains on all 200.
    plan = _plan_dict()
    own = plan["options"][1]
    fewer = {**own, "method": "k", "n_labels": 88, "probability": 0.45,
             "predicted": {"mean": 0.957, "low": 0.90, "high": 0.99}}
    plan["options"] = [plan["options"][0], fewer, own]
    lines = decision_lines(plan)
    assert lines[1].startswith("With the labels you own: m (random selection) on 250 labels")


def test_the_small_evaluation_warning_is_said_plainly():
    from semisup.plan import data_warnings
    from semisup.study import StudyRecord

    # the study's own warning (semisup/study/_info.py) for 250 labeled rows, 50 per fold
    study_text = ("evaluation rows too small for tight estimates: 9 class(es) have fewer than "
                  "30 labeled rows (every one is evaluated once per fold cycle) (smallest 22, "
                  "250 rows evaluated in all); median Wilson 95% interval width on accuracy "
                  "of one cell 0.202")
    facts = StudyRecord.from_dict({"evaluation": {"protocol": "cross-fit",
                                                  "n_rows_evaluated": 250, "n_eval_min": 50},
                                   "warnings": [study_text]})
    out = data_warnings(facts)[0]
    assert out.startswith("only 250 labeled rows to test on (50 per repeat): one repeat's "
                          "accuracy is uncertain by about \u00b10.10 (9 class(es)")
    # a warning it does not know passes unchanged
    facts = StudyRecord.from_dict({"evaluation": {"protocol": "cross-fit"},
                                   "warnings": ["something else"]})
    assert data_warnings(facts)[0] == "something else"


def test_a_track_sentence_recorded_in_the_plan_is_shown():
    lines = decision_lines(_plan_dict(track_sentence="At 2x, forecasts like this were off by "
                                                     "0.03 on tables never tuned on."))
    assert lines[2].startswith("At 2x, forecasts like this")  # after decision and owned labels
    assert lines[3].startswith("Target:")
