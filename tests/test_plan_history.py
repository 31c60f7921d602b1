"""Plans kept by name with their study state, stale plans, and the track record (pure parts on
constructed inputs, the files on synthetic study folders)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from _plan_synth import stand_in_select_rows, write_study
from scipy.interpolate import interp1d

from semisup import ConfigError
from semisup.plan import (
    PlanRequest,
    PlanStatus,
    current_state,
    list_plans,
    make_plan,
    score_plan,
    study_state,
    track_record,
)
from semisup.report import write_report
from semisup.study._layout import remove_outputs


def _plan(folder, **kwargs):
    req = {"metric": "accuracy", "target": 0.90, "cost_per_label": 2.0, **kwargs}
    return make_plan(folder, PlanRequest(**req), select_rows=stand_in_select_rows, n_boot=30)


def _cells(seed=0):
    rng = np.random.default_rng(seed)
    return pd.DataFrame({"method": ["a", "a", "b", "b"], "strategy": "random",
                         "n_labels": [10, 20, 10, 20], "repeat": 0, "status": "ok",
                         "accuracy": rng.uniform(0.5, 0.9, 4), "seconds": [1.0, 2, 3, 4]})


# -- study state (pure) -------------------------------------------------------------------------
# No outside reference exists for our own state id; these check the properties it is defined by.

def test_state_ignores_row_order_and_timing_but_not_results_or_the_fingerprint():
    cells = _cells()
    base = study_state({"fingerprint": "f1"}, cells)
    shuffled = cells.sample(frac=1.0, random_state=3).assign(seconds=9.0)
    assert study_state({"fingerprint": "f1"}, shuffled) == base
    changed = cells.copy()
    changed.loc[0, "accuracy"] += 0.01
    assert study_state({"fingerprint": "f1"}, changed)["cells_sha256"] != base["cells_sha256"]
    assert study_state({"fingerprint": "f2"}, cells)["id"] != base["id"]
    failed = pd.concat([cells, cells.iloc[:1].assign(status="failed", repeat=1)])
    assert study_state({"fingerprint": "f1"}, failed) == base  # the plan only uses ok cells


def test_plan_status_says_why_a_plan_is_stale():
    state = study_state({"fingerprint": "f1"}, _cells())
    assert not PlanStatus({"state": state}, state).stale
    grown = study_state({"fingerprint": "f2"}, _cells())
    st = PlanStatus({"state": state, "name": "p1"}, grown)
    assert st.stale and "fingerprint differs" in st.message()
    assert st.message().startswith("plan.json (p1) is stale")
    assert "semisup plan" in st.message()
    other = study_state({"fingerprint": "f1"}, _cells(seed=1))
    assert "finished cells changed" in PlanStatus({"state": state}, other).message()
    assert PlanStatus({"chosen": None}, state).stale  # no recorded state: not matchable


# -- track record (pure) ------------------------------------------------------------------------

def _earlier():
    plan = {"name": "p1", "made_at": "t", "target": {"metric": "accuracy"}, "interval": 0.9,
            "measured_up_to": {"a (random)": 100, "b (random)": 100},
            "chosen": {"method": "a", "strategy": "random", "n_labels": 300}}
    n = np.array([50.0, 100, 200, 400])
    rows = []
    for method, shift in (("a", 0.0), ("b", -0.05)):
        mean = np.array([0.70, 0.80, 0.85, 0.88]) + shift
        for metric in ("accuracy", "macro_f1"):
            rows += [{"method": method, "strategy": "random", "metric": metric,
                      "n_labels": int(k), "mean": m, "low": m - 0.02, "high": m + 0.02,
                      "measured": False} for k, m in zip(n, mean, strict=True)]
    return plan, pd.DataFrame(rows)


def _measured(points):
    return pd.DataFrame([{"method": m, "strategy": "random", "metric": "accuracy",
                          "n_labels": n, "mean": v, "low": v - 0.03, "high": v + 0.03,
                          "measured": True} for m, n, v in points])


def test_score_plan_reads_the_forecast_in_log_budget_and_calls_hits():
    plan, forecast = _earlier()
    measured = _measured([("a", 100, 0.80), ("a", 300, 0.87), ("b", 300, 0.70),
                          ("a", 800, 0.90), ("c", 300, 0.8)])
    out = score_plan(plan, forecast, measured)
    # 100 was measured when the plan was made (not a forecast); 800 lies beyond the stored
    # forecast; "c" was never forecast: only the two budgets of 300 count.
    assert [(r["method"], r["n_labels"]) for r in out["rows"]] == [("a", 300), ("b", 300)]
    a = forecast[(forecast["method"] == "a") & (forecast["metric"] == "accuracy")]
    # reference: scipy's linear interpolation on log budget
    expect = float(interp1d(np.log(a["n_labels"]), a["mean"])(np.log(300)))
    ra, rb = out["rows"]
    assert ra["predicted"]["mean"] == pytest.approx(expect, abs=1e-12)
    assert ra["predicted"]["low"] == pytest.approx(expect - 0.02, abs=1e-12)
    assert ra["error"] == pytest.approx(0.87 - expect)
    assert ra["hit"] and ra["plan_choice"]
    assert not rb["hit"] and not rb["plan_choice"]  # 0.70 is far below b's [0.79, 0.83]
    assert (out["n_compared"], out["n_hit"], out["coverage"]) == (2, 1, 0.5)
    assert out["mean_abs_error"] == pytest.approx((abs(ra["error"]) + abs(rb["error"])) / 2)


def test_track_record_totals_over_plans_and_nothing_measured_yet():
    plan, forecast = _earlier()
    later = dict(plan, name="p2", measured_up_to={"a (random)": 400})
    measured = _measured([("a", 300, 0.87), ("b", 300, 0.82)])
    track = track_record([(plan, forecast), (later, forecast), (plan, None)], measured)
    assert [p["plan"] for p in track["plans"]] == ["p1", "p2", "p1"]
    assert [p["n_compared"] for p in track["plans"]] == [2, 0, 0]
    assert track["plans"][1]["coverage"] is None
    assert (track["n_compared"], track["n_hit"], track["coverage"]) == (2, 2, 1.0)


def test_plans_made_again_from_one_state_are_counted_once():
    # Three plans of one study state (another target each time) forecast the same numbers: a
    # track record that scored each would count every forecast three times.
    plan, forecast = _earlier()
    same = [dict(plan, name=f"p{i}", state={"id": "s1"}) for i in (1, 2, 3)]
    other = dict(plan, name="q1", state={"id": "s2"})
    measured = _measured([("a", 300, 0.87), ("b", 300, 0.82)])
    track = track_record([(p, forecast) for p in [*same, other]], measured)
    assert [p["plan"] for p in track["plans"]] == ["p3", "q1"]
    assert track["repeated_plans"] == ["p1", "p2"] and track["n_compared"] == 4
    macro = dict(plan, name="m1", state={"id": "s1"}, target={"metric": "macro_f1"})
    track = track_record([(same[0], forecast), (macro, forecast)], measured)
    assert [p["plan"] for p in track["plans"]] == ["p1", "m1"]  # another metric is its own


# -- files on a synthetic study folder ----------------------------------------------------------

def test_each_plan_is_kept_and_a_changed_study_makes_it_stale(tmp_path):
    folder = write_study(tmp_path / "s")
    first = _plan(folder, labels_owned=100)
    second = _plan(folder, labels_owned=100, target=0.92)
    kept = list_plans(folder)
    assert [p["name"] for p in kept] == [first.name, second.name]
    assert all((folder / p["forecast_file"]).is_file() for p in kept)
    data = json.loads((folder / "plan.json").read_text())
    assert data["name"] == second.name and data["state"] == current_state(folder)
    assert data["history"][0]["name"] == first.name and not data["history"][0]["stale"]
    assert "Track record of 1 earlier plan: no budget" in second.summary()

    # The study changes (a new round measured other numbers): the plan is stale everywhere.
    cells = pd.read_csv(folder / "cells.csv")
    cells.loc[0, "accuracy"] -= 0.05
    cells.to_csv(folder / "cells.csv", index=False)
    status = PlanStatus(data, current_state(folder))
    assert status.stale
    text = write_report(folder).read_text(encoding="utf-8")
    assert "STALE: plan.json (" in text and "No current plan" in text
    assert "Decision: buy" not in text.split("Plan and backtest")[0]  # no current decision
    assert "No current list" in text
    from semisup.model._fit import _current_plan

    with pytest.raises(ConfigError, match="is stale: the study's finished cells changed"):
        _current_plan(folder, data, None)
    assert _current_plan(folder, data, "supervised-logreg") is None
    third = _plan(folder, labels_owned=100)
    assert "Note: the previous plan (" in third.summary()
    assert [h["stale"] for h in third.history] == [True, True]
    assert "Plans kept and their track record" in write_report(folder).read_text()


def test_restart_removes_every_kept_plan_and_sheet(tmp_path):
    folder = write_study(tmp_path / "s")
    _plan(folder, labels_owned=0, n_next=3)
    assert (folder / "plans").is_dir() and (folder / "label_next.csv").is_file()
    removed = remove_outputs(folder)
    assert {"plans", "plan.json", "label_next.csv"} <= set(removed)
    assert not (folder / "plans").exists()


def test_xlsx_sheet_neutralised_and_read_back(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    folder = write_study(tmp_path / "s", row_prefix="=cmd|")
    _plan(folder, labels_owned=0, n_next=4)
    csv = pd.read_csv(folder / "label_next.csv", dtype=str)
    make_plan(folder, PlanRequest("accuracy", 0.9, 2.0, labels_owned=0, n_next=4),
              select_rows=stand_in_select_rows, n_boot=30, sheet_format="xlsx")
    assert not (folder / "label_next.csv").exists()  # the older csv list is not this plan's
    book = openpyxl.load_workbook(folder / "label_next.xlsx")
    cells = [c for row in book.active.iter_rows() for c in row]
    # openpyxl stores a text starting with "=" as a formula (data_type "f"); none is one
    assert not [c.value for c in cells if c.data_type == "f"]
    ids = [c.value for c in next(book.active.iter_cols(min_col=2, max_col=2))][1:]
    assert ids == list(csv["row_id"]) and all(i.startswith("'=cmd|") for i in ids)
    assert json.loads((folder / "plan.json").read_text())["label_next"]["file"] == (
        "label_next.xlsx")


def test_xlsx_without_openpyxl_is_one_line_exit_2_before_any_work(tmp_path, monkeypatch,
                                                                   capsys):
    import sys

    from semisup.cli import main

    folder = write_study(tmp_path / "s")
    monkeypatch.setitem(sys.modules, "openpyxl", None)  # import openpyxl now raises
    code = main(["plan", str(folder), "--target", "accuracy=0.9", "--cost-per-label", "1",
                 "--sheet-format", "xlsx", "-q"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert "pip install 'semisup[excel]'" in err[0]
    assert not (folder / "plan.json").exists() and not (folder / "plans").exists()
