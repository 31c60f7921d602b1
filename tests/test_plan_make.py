"""make_plan end to end on synthetic study folders (cells from a known inverse power law)."""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pandas as pd
import pytest
from _plan_synth import TRUTH, stand_in_select_rows, write_study

from semisup import PlanError
from semisup.cli import main
from semisup.plan import CURVE_COLUMNS, PlanRequest, make_plan, power_law

N_BOOT = 40


def _plan(folder, **kwargs):
    req = {"metric": "accuracy", "target": 0.90, "cost_per_label": 2.0, **kwargs}
    return make_plan(folder, PlanRequest(**req), select_rows=stand_in_select_rows,
                     n_boot=N_BOOT)


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    return write_study(tmp_path_factory.mktemp("study"), strategies=("random", "uncertainty"))


def test_plan_files_and_fixed_keys(study):
    plan = _plan(study, labels_owned=100)
    data = json.loads((study / "plan.json").read_text())
    for key in ("target", "confidence", "cost_per_label", "chosen", "options", "backtest",
                "warnings"):
        assert key in data
    assert data["target"] == {"metric": "accuracy", "value": 0.9}
    chosen = data["chosen"]
    for key in ("method", "strategy", "n_labels", "predicted", "probability", "cost",
                "extrapolated"):
        assert key in chosen
    assert set(chosen["predicted"]) == {"mean", "low", "high"}
    for b in data["backtest"]:
        assert {"method", "n_labels", "predicted", "measured", "covered"} <= set(b)
    # curves.csv is the study's (measured points only); the plan's forecast is its own file
    assert pd.read_csv(study / "curves.csv")["measured"].all()
    assert data["forecast_file"] == f"plans/{data['name']}.forecast.csv"
    curves = pd.read_csv(study / data["forecast_file"])
    assert list(curves.columns[: len(CURVE_COLUMNS)]) == CURVE_COLUMNS
    assert (~curves["measured"]).all()
    assert set(curves["metric"]) == {"accuracy", "balanced_accuracy", "macro_f1"}
    assert curves["n_labels"].max() == 4 * 320
    assert json.loads((study / "plans" / f"{data['name']}.json").read_text()) == data
    nxt = pd.read_csv(study / "label_next.csv")
    assert list(nxt.columns[:3]) == ["rank", "row_id", "reason"]
    assert list(nxt["rank"]) == list(range(1, len(nxt) + 1))
    assert plan.summary().startswith("Decision: buy ")
    assert "Target: accuracy 0.9 or more with a chance of at least 80%" in plan.summary()


def test_chosen_is_the_cheapest_sure_option_and_its_numbers_add_up(study):
    plan = _plan(study, labels_owned=100, cost_per_round=7.0)
    c = plan.chosen
    assert c is not None and c.probability >= 0.8
    # Cost by hand: (n_labels - owned) * 2.0 + one round at 7.0.
    assert c.cost == pytest.approx((c.n_labels - 100) * 2.0 + 7.0)
    cheaper = [o for o in plan.options if o.probability >= 0.8 and o.cost < c.cost]
    assert not cheaper
    # The prediction is close to the generating curve (accuracy = 1 - a - b n^-c).
    truth = 1 - power_law(c.n_labels, *TRUTH[c.method])
    assert abs(c.mean - truth) < 0.015
    assert c.method == "latent-logreg"  # the better curve by construction
    # the runner-up is the cheapest sure option of another curve, and there is one exactly
    # when another curve has a sure option
    others = sorted((o for o in plan.options if o.probability >= 0.8
                     and (o.method, o.strategy) != (c.method, c.strategy)),
                    key=lambda o: (o.cost, o.n_labels))
    if others:
        assert plan.runner_up is not None and plan.runner_up.cost == others[0].cost
        assert (plan.runner_up.method, plan.runner_up.strategy) != (c.method, c.strategy)
    else:
        assert plan.runner_up is None


def test_not_reachable_names_the_best(study):
    plan = _plan(study, target=0.99)
    assert plan.chosen is None and plan.best is not None and not plan.reached
    assert "No method reaches accuracy 0.99 with an 80% chance" in plan.summary()
    assert "; the best is latent-logreg" in plan.summary()
    data = json.loads((study / "plan.json").read_text())
    assert data["chosen"] is None and data["best"]["method"] == "latent-logreg"
    assert data["reached"] is False


def test_not_reachable_says_do_not_buy_first_and_lists_no_rows(tmp_path):
    folder = write_study(tmp_path / "s")
    _plan(folder, labels_owned=0, n_next=5)           # an earlier plan's list
    assert (folder / "label_next.csv").is_file()
    plan = _plan(folder, target=0.99)
    assert plan.summary().splitlines()[0].startswith("Decision: do not buy labels.")
    assert plan.label_next.empty and not plan.label_next_written
    assert not (folder / "label_next.csv").exists()  # the old list is not this plan's
    data = json.loads((folder / "plan.json").read_text())
    assert data["label_next"] == {"strategy": plan.label_next_strategy, "n_rows": 0,
                                  "weighted_to_pool": False, "written": False, "file": None}
    assert data["labels"]["to_buy"] == 0
    # asked for explicitly, the rows are listed even so
    plan = _plan(folder, target=0.99, n_next=7)
    assert len(pd.read_csv(folder / "label_next.csv")) == 7 and plan.label_next_written


def test_cli_plan_exit_status_3_when_not_reachable(tmp_path, capsys):
    folder = write_study(tmp_path / "s")
    code = main(["plan", str(folder), "--target", "accuracy=0.99", "--cost-per-label", "2",
                 "-q"])
    out = capsys.readouterr().out
    assert code == 3 and out.startswith("Decision: do not buy labels.")
    assert not (folder / "label_next.csv").exists()
    assert "Exit status" in _help_text(["plan", "--help"])


def _help_text(argv) -> str:
    import contextlib
    import io

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf), pytest.raises(SystemExit):
        main(argv)
    return " ".join(buf.getvalue().split())


def test_options_lead_with_what_can_be_bought(study):
    plan = _plan(study, target=0.99, labels_owned=160)
    opts = plan.options
    groups = [0 if o.probability >= 0.8 else (1 if o.n_new > 0 else 2) for o in opts]
    assert groups == sorted(groups) and groups[0] == 1 and 2 in groups
    buy = [o.probability for o in opts if o.n_new > 0]
    assert buy == sorted(buy, reverse=True)
    data = json.loads((study / "plan.json").read_text())
    assert [(o["method"], o["strategy"], o["n_labels"]) for o in data["options"]] == [
        (o.method, o.strategy, o.n_labels) for o in opts]
    plan = _plan(study, labels_owned=100)
    assert plan.options[0].probability >= 0.8
    sure = [o.cost for o in plan.options if o.probability >= 0.8]
    assert sure == sorted(sure) and plan.options[0].cost == plan.chosen.cost


def test_decision_counts_every_label(study, tmp_path):
    plan = _plan(study)          # holdout study: 400 labeled, 150 kept for evaluation
    lab = plan.to_dict()["labels"]
    assert lab["owned_for_training"] == 250 and lab["kept_for_evaluation"] == 150
    assert lab["to_buy"] == plan.chosen.n_new
    assert lab["in_all"] == 400 + plan.chosen.n_new
    assert ("You own 250 training labels and 150 kept aside for evaluation (the holdout)."
            in plan.summary().splitlines())
    # Under cross-fitting every labeled row trains and is evaluated, in different repeats.
    from semisup.plan._make import label_counts
    from semisup.study import StudyRecord

    def facts_of(n_labeled, round_rows=0, **evaluation):
        return StudyRecord.from_dict({"data": {"n_labeled": n_labeled}, "evaluation": {
            "protocol": "cross-fit", "folds": 5, "n_round_rows": round_rows, **evaluation}})

    facts = facts_of(200)
    lab = label_counts(facts, 200, 40)
    assert lab["owned_for_training"] == 200 and lab["kept_for_evaluation"] == 0
    assert lab["evaluated_by_cross_fit"] == 200 and lab["in_all"] == 240
    assert "160 train and 40 are evaluated" in lab["evaluation_text"]
    assert lab["text"] == "You own 200 labels, all in the table; all train the final model."
    # Rows returned by a labeling round only train (DEVELOPERS.md, "Studies that grow"): the
    # folds are dealt from the table's 200, the 50 returned rows are owned but never evaluated.
    facts = facts_of(250, 50)
    lab = label_counts(facts, 250, 10)
    assert lab["owned_for_training"] == 250 and lab["evaluated_by_cross_fit"] == 200
    assert lab["returned_by_rounds"] == 50 and lab["in_all"] == 260
    assert lab["text"] == ("You own 250 labels: 200 in the table + 50 from labeling rounds; "
                           "all train the final model.")
    assert "160 train and 40 are evaluated" in lab["evaluation_text"]
    assert "the 50 returned by labeling rounds only train" in lab["evaluation_text"]
    facts = facts_of(250, 50, rounds=[{"round": 1, "n_rows": 50}])
    assert "+ 50 from round 1;" in label_counts(facts, 250, 10)["text"]


def test_labels_owned_default_comes_from_study_json(study):
    plan = _plan(study)
    # 400 labeled rows in the synthetic study.json, 150 of them kept as the holdout.
    assert plan.labels_owned == 400 - 150


def test_uncertainty_choice_ranks_rows_by_margin(tmp_path):
    # A study measured with the uncertainty strategy only: the plan must choose it and list
    # the candidates with the smallest margins (top minus second class probability, computed
    # here with numpy from the probabilities the study stored in candidates.npz), smallest
    # first.
    folder = write_study(tmp_path / "s", strategies=("uncertainty",))
    plan = _plan(folder, labels_owned=0, n_next=5, target=0.8)
    assert plan.chosen is not None and plan.chosen.strategy == "uncertainty"
    nxt = plan.label_next
    assert len(nxt) == 5 and nxt["reason"].str.startswith("margin").all()
    stored = np.load(folder / "candidates.npz")
    proba = np.sort(stored["proba"], axis=1)
    margin = proba[:, -1] - proba[:, -2]
    smallest = np.argsort(margin, kind="stable")[:5]
    assert list(nxt["row_id"]) == list(stored["row_ids"][smallest])
    np.testing.assert_allclose(nxt["reason"].str.split().str[1].astype(float),
                               margin[smallest], atol=5e-4)


def test_per_class_costs_and_unknown_class(study):
    plan = _plan(study, labels_owned=100, class_costs={"dog": 6.0})
    # Class mix 200 cat / 200 dog -> 0.5 * 2 + 0.5 * 6 = 4.0 per label.
    assert plan.label_price == pytest.approx(4.0)
    with pytest.raises(PlanError, match="'bird'"):
        _plan(study, class_costs={"bird": 1.0})


def test_deterministic_and_inputs_untouched(tmp_path):
    folder = write_study(tmp_path / "s")
    digest = hashlib.sha256((folder / "cells.csv").read_bytes()).hexdigest()
    _plan(folder, labels_owned=50)
    first = json.loads((folder / "plan.json").read_text())
    _plan(folder, labels_owned=50)
    second = json.loads((folder / "plan.json").read_text())
    # Only the plan's own name, time and history differ; each run is kept by name.
    own = ("name", "made_at", "forecast_file", "history", "track_record")
    assert {k: v for k, v in second.items() if k not in own} == {
        k: v for k, v in first.items() if k not in own}
    assert second["state"] == first["state"] and second["name"] != first["name"]
    assert [h["name"] for h in second["history"]] == [first["name"]]
    assert not second["history"][0]["stale"]
    assert len(list((folder / "plans").glob("*.json"))) == 2
    assert hashlib.sha256((folder / "cells.csv").read_bytes()).hexdigest() == digest


def test_degrades_without_study_json_and_candidates(tmp_path):
    folder = write_study(tmp_path / "s", study_json=False, candidates=False, failed=2)
    plan = _plan(folder)
    text = " ".join(plan.warnings)
    assert "labels owned is unknown" in text and "candidates.npz is missing" in text
    assert "2 of" in text and plan.labels_owned == 0
    assert plan.label_next.empty


def test_small_holdout_and_imbalance_are_warned(tmp_path):
    folder = write_study(tmp_path / "s", n_holdout=40, class_counts={"cat": 360, "dog": 40})
    text = " ".join(_plan(folder).warnings)
    assert "holdout has only 40 rows" in text and "imbalanced" in text


def test_fallback_curve_is_flagged_in_the_plan(tmp_path):
    folder = write_study(tmp_path / "s", budgets=(20, 40))
    plan = _plan(folder, target=0.8)
    assert any("monotone interpolation" in w for w in plan.warnings)
    assert all(o.fit == "monotone" for o in plan.options)


@pytest.mark.parametrize("damage, match", [
    (lambda f: (f / "cells.csv").unlink(), "cells.csv not found"),
    (lambda f: pd.read_csv(f / "cells.csv").drop(columns="repeat").to_csv(
        f / "cells.csv", index=False), "no column 'repeat'"),
    (lambda f: (f / "study.json").write_text("{not json"), "study.json is not valid JSON"),
    (lambda f: pd.read_csv(f / "cells.csv").assign(n_labels=-1).to_csv(
        f / "cells.csv", index=False), "'n_labels' has the value"),
])
def test_bad_study_folder_is_a_one_line_error(tmp_path, damage, match):
    folder = write_study(tmp_path / "s")
    damage(folder)
    with pytest.raises(PlanError, match=match):
        _plan(folder)


def test_metric_missing_from_cells(tmp_path):
    folder = write_study(tmp_path / "s")
    pd.read_csv(folder / "cells.csv").drop(columns="macro_f1").to_csv(
        folder / "cells.csv", index=False)
    with pytest.raises(PlanError, match="no column 'macro_f1'"):
        _plan(folder, metric="macro_f1")


def test_cli_plan_and_report(tmp_path, capsys):
    folder = write_study(tmp_path / "s", truth={"latent-logreg": TRUTH["latent-logreg"]})
    code = main(["plan", str(folder), "--target", "accuracy=0.9", "--cost-per-label", "2",
                 "--labels-owned", "100", "-q"])
    out = capsys.readouterr().out
    assert code == 0 and "Decision:" in out
    assert main(["report", str(folder), "-q"]) == 0
    assert (folder / "report.html").is_file()
    assert main(["plan", str(folder), "--target", "recall=0.9", "--cost-per-label", "2"]) == 2
    assert "unknown metric 'recall'" in capsys.readouterr().err


def test_label_next_never_exceeds_candidates(tmp_path):
    folder = write_study(tmp_path / "s")
    plan = _plan(folder, labels_owned=0, n_next=500)
    assert len(plan.label_next) == 60
    assert plan.label_next["row_id"].is_unique
    assert any("only 60 unlabeled rows" in w for w in plan.warnings)
    assert np.all(plan.label_next["rank"].to_numpy() == np.arange(1, 61))


def test_reads_the_study_runner_layout(tmp_path):
    # study.json nests facts under data/holdout and candidates.npz may name the
    # representation 'representation' instead of 'Z'.
    folder = write_study(tmp_path / "s", candidates=False)
    study = json.loads((folder / "study.json").read_text())
    study["holdout"] = {"n_rows": 30, "class_counts": {"cat": 15, "dog": 15}}
    study["spec"]["holdout"] = 0.3
    (folder / "study.json").write_text(json.dumps(study))
    rng = np.random.default_rng(0)
    np.savez(folder / "candidates.npz", row_ids=np.array(["a", "b", "c", "d"]),
             representation=rng.normal(size=(4, 2)), proba=np.full((4, 2), 0.5))
    plan = _plan(folder, n_next=3, labels_owned=0)
    assert len(plan.label_next) == 3 and set(plan.label_next["row_id"]) <= {"a", "b", "c", "d"}
    assert any("holdout has only 30 rows" in w for w in plan.warnings)
