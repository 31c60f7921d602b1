"""The plan's evidence: plan.json keys for backtests, calibration, curve families and the
choice; the evaluation protocol's effect on the intervals; the report's evidence section."""

from __future__ import annotations

import json

import numpy as np
import pytest
from _plan_synth import stand_in_select_rows, write_study

from semisup.plan import FAMILIES, PlanRequest, make_plan
from semisup.report._evidence import evidence_html, evidence_section

BUDGETS = (10, 20, 40, 80, 160, 320)


def _plan(folder, target=0.9, **kw):
    return make_plan(folder, PlanRequest("accuracy", target, 1.0, **kw),
                     select_rows=stand_in_select_rows, n_boot=60)


@pytest.fixture(scope="module")
def planned(tmp_path_factory):
    folder = write_study(tmp_path_factory.mktemp("ev"), budgets=BUDGETS, noise=0.01)
    plan = _plan(folder)
    return folder, plan, json.loads((folder / "plan.json").read_text())


def test_plan_json_states_the_evidence(planned):
    _, _, d = planned
    for key in ("target", "confidence", "cost_per_label", "chosen", "options", "backtest",
                "warnings"):
        assert key in d
    cal = d["calibration"]
    assert cal["calibrated"] is True and cal["n_backtests"] == len(d["backtests"])
    assert {"metric_shift_per_doubling", "sd_per_doubling", "extra_sd_at"} <= set(cal)
    ratios = [b["ratio"] for b in d["backtests"]]
    assert min(ratios) > 1 and max(ratios) <= 5 + 1e-9
    assert sum(b["n"] for b in d["backtest_by_ratio"]) == len(ratios)
    for cm in d["curve_models"]:
        assert set(cm["weights"]) <= set(FAMILIES)
        assert sum(cm["weights"].values()) == pytest.approx(1.0)
        assert cm["winner"] == max(cm["weights"], key=cm["weights"].get)
    assert "James-Stein" in d["selection"]["winners_curse"]


def test_power_law_truth_gives_the_power_law_most_weight(planned):
    # The synthetic cells follow a + b n^-c exactly (plus noise), so the power law should
    # carry the largest backtest weight for both methods (known generating curve).
    _, _, d = planned
    assert all(cm["winner"] == "power_law" for cm in d["curve_models"])


def test_forecast_at_four_times_covers_the_generating_curve(planned):
    # Known truth (tests/_plan_synth.py TRUTH): the 90% interval at 4x the largest budget
    # contains the generating curve's accuracy, and the point is within 0.02 of it.
    from _plan_synth import TRUTH

    _, plan, _ = planned
    for method, (a, b, c) in TRUTH.items():
        o = next(o for o in plan.options if o.method == method and o.n_labels == 1280)
        truth = 1 - (a + b * 1280 ** (-c))
        assert o.low <= truth <= o.high and abs(o.mean - truth) < 0.02


def test_cross_fit_adds_no_shared_evaluation_noise(tmp_path):
    # A fixed 60-row holdout adds its binomial error to every interval; under cross-fitting
    # (one repeat per fold) the spread over repeats already holds it, so the intervals at the
    # measured budgets are narrower.
    def widths(evaluation):
        folder = write_study(tmp_path / evaluation["protocol"], budgets=BUDGETS, n_holdout=60)
        study = json.loads((folder / "study.json").read_text())
        study["evaluation"] = evaluation
        (folder / "study.json").write_text(json.dumps(study))
        plan = _plan(folder, labels_owned=0)
        return np.array([o.high - o.low for o in plan.options
                         if o.n_labels == 160 and o.method == "latent-logreg"]), plan

    fixed, p_fixed = widths({"protocol": "holdout", "folds": 1, "n_eval_min": 60})
    cross, p_cross = widths({"protocol": "cross-fit", "folds": 5, "n_rows_evaluated": 400,
                             "per_repeat": [{}] * 5})
    assert np.all(cross < fixed)
    assert p_fixed.to_dict()["evaluation"]["shared_eval_rows"] == 60
    assert p_cross.to_dict()["evaluation"]["shared_eval_rows"] is None


def test_overlapping_options_are_named_and_the_cheaper_is_chosen(tmp_path):
    # Two methods with the same generating curve cannot be told apart: the plan says so and
    # chooses the cheapest sure option.
    truth = {"method-a": (0.05, 1.5, 0.6), "method-b": (0.05, 1.5, 0.6)}
    folder = write_study(tmp_path, truth=truth, budgets=BUDGETS, noise=0.01)
    plan = _plan(folder, target=0.88)
    d = plan.to_dict()
    assert plan.chosen is not None
    sure = [o for o in plan.options if o.probability >= plan.request.confidence]
    assert plan.chosen.cost == min(o.cost for o in sure)
    assert d["selection"]["overlap"] and "cannot tell" in d["selection"]["note"]


def test_evidence_section_escapes_names_from_the_data(planned):
    _, _, d = planned
    d = json.loads(json.dumps(d))
    d["curve_models"][0]["method"] = "<script>alert(1)</script>"
    section = evidence_section(d)
    assert section is not None and section.anchor == "evidence"
    page = evidence_html(d)
    assert "<script>" not in page and "&lt;script&gt;" in page
    assert "Paule-Mandel" in page and "winning curve family" in page
    assert evidence_section({"target": {}}) is None and evidence_html(None) == ""


def test_cross_fit_band_is_floored_at_the_binomial_error_of_the_evaluated_rows(tmp_path):
    # Noise-free repeats under cross-fitting: the spread over folds is zero, which no real
    # evaluation on 400 rows can be (Bengio & Grandvalet 2004: the spread over folds
    # underestimates). The band at a measured budget is then p +- z_0.95 sqrt(p(1-p)/400)
    # (binomial standard error of a proportion; normal quantile from scipy.stats).
    from scipy.stats import norm

    folder = write_study(tmp_path, budgets=BUDGETS, noise=0.0)
    study = json.loads((folder / "study.json").read_text())
    study["evaluation"] = {"protocol": "cross-fit", "folds": 5, "n_rows_evaluated": 400,
                           "per_repeat": [{}] * 5}
    (folder / "study.json").write_text(json.dumps(study))
    plan = make_plan(folder, PlanRequest("accuracy", 0.9, 1.0), select_rows=stand_in_select_rows,
                     n_boot=2000)
    o = next(o for o in plan.options if o.method == "latent-logreg" and o.n_labels == 160)
    half = norm.ppf(0.95) * np.sqrt(o.mean * (1 - o.mean) / 400)
    assert (o.high - o.low) / 2 == pytest.approx(half, rel=0.15)
