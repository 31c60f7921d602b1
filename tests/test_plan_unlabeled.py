"""The plan's answer to "do the unlabeled rows help?": the best method with a generative stage
against the best supervised-only one, paired over the study's draws."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from _plan_synth import TRUTH, stand_in_select_rows, write_study
from scipy import stats
from sklearn.datasets import load_digits
from sklearn.decomposition import PCA
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import train_test_split
from sklearn.neighbors import KNeighborsClassifier
from sklearn.preprocessing import StandardScaler

from semisup.plan import PlanRequest, make_plan
from semisup.plan._unlabeled import measured_gains, method_families, paired_interval
from semisup.report import write_report

FAMILIES = {"latent-logreg": "latent", "supervised-logreg": "supervised",
            "supervised-knn": "supervised", "label-spreading": "classic-ssl"}


@pytest.fixture(scope="module")
def digits_cells():
    """Cells of three stand-in methods on scikit-learn's digits: every method of a repeat is
    trained on the same draw and scored on the same 500 held-out rows, as in a study.
    "latent-logreg" is a logistic regression on 16 principal components fitted on every
    row's features (a stand-in for a stage fitted on the unlabeled rows)."""
    X, y = load_digits(return_X_y=True)
    X = StandardScaler().fit_transform(X)
    Z = PCA(16, random_state=0).fit_transform(X)
    idx_pool, idx_hold = train_test_split(np.arange(len(y)), test_size=500, stratify=y,
                                          random_state=0)
    rows = []
    for r in range(5):
        order = np.random.default_rng(r).permutation(idx_pool)
        for n in (20, 60, 180):
            tr = order[:n]
            models = {
                "latent-logreg": (LogisticRegression(max_iter=500), Z),
                "supervised-logreg": (LogisticRegression(max_iter=500), X),
                "supervised-knn": (KNeighborsClassifier(3), X),
            }
            for name, (model, feats) in models.items():
                acc = model.fit(feats[tr], y[tr]).score(feats[idx_hold], y[idx_hold])
                rows.append({"method": name, "strategy": "random", "n_labels": n,
                             "repeat": r, "accuracy": float(acc)})
    return pd.DataFrame(rows)


def test_paired_interval_is_scipys_paired_t_interval(digits_cells):
    # Reference: scipy.stats.ttest_rel(a, b).confidence_interval(level), the paired t-test.
    c = digits_cells[digits_cells["n_labels"] == 60]
    a = c[c["method"] == "latent-logreg"].sort_values("repeat")["accuracy"].to_numpy()
    b = c[c["method"] == "supervised-logreg"].sort_values("repeat")["accuracy"].to_numpy()
    mean, low, high = paired_interval(a, b, 0.9)
    ref = stats.ttest_rel(a, b).confidence_interval(0.9)
    assert mean == pytest.approx(float(np.mean(a - b)))
    assert (low, high) == pytest.approx((ref.low, ref.high))
    assert np.isnan(paired_interval(a[:1], b[:1], 0.9)[1])


def test_each_budget_compares_the_best_of_each_group_pair_by_pair(digits_cells):
    gains = measured_gains(digits_cells, "accuracy", FAMILIES, level=0.9)
    assert [g.n_labels for g in gains] == [20, 60, 180]
    means = digits_cells.groupby(["n_labels", "method"])["accuracy"].mean()
    for g in gains:
        sup = means[g.n_labels][["supervised-logreg", "supervised-knn"]]
        assert g.supervised_method == sup.idxmax()
        assert g.stage_method == "latent-logreg" and g.n_pairs == 5
        c = digits_cells[digits_cells["n_labels"] == g.n_labels].set_index("repeat")
        a = c[c["method"] == g.stage_method]["accuracy"].sort_index()
        b = c[c["method"] == g.supervised_method]["accuracy"].sort_index()
        ref = stats.ttest_rel(a, b).confidence_interval(0.9)  # scipy's paired t-test
        assert (g.low, g.high) == pytest.approx((ref.low, ref.high))
        expected = "helps" if ref.low > 0 else "hurts" if ref.high < 0 else "unclear"
        assert g.verdict == expected


def test_methods_outside_both_groups_and_lone_groups_are_left_out(digits_cells):
    only_sup = digits_cells[digits_cells["method"] != "latent-logreg"]
    assert measured_gains(only_sup, "accuracy", FAMILIES) == []
    spreading = digits_cells.replace({"latent-logreg": "label-spreading"})
    assert measured_gains(spreading, "accuracy", FAMILIES) == []  # classic-ssl: no stage
    assert method_families()["latent-mixture-em"] == "generative"
    assert method_families()["supervised-gbt"] == "supervised"


def test_plan_and_report_say_whether_the_unlabeled_rows_help(tmp_path):
    # Synthetic curves with a known truth (tests/_plan_synth.py): latent-logreg's error
    # 0.03 + 1.5 n^-0.6 is well below supervised-logreg's 0.08 + 1.2 n^-0.5 at every budget.
    folder = write_study(tmp_path / "s")
    plan = make_plan(folder, PlanRequest("accuracy", 0.9, 2.0, labels_owned=100),
                     select_rows=stand_in_select_rows, n_boot=30)
    saved = json.loads((folder / "plan.json").read_text(encoding="utf-8"))
    got = saved["unlabeled_rows"]
    assert got["verdict"] == "helps" and len(got["by_budget"]) == 5
    last = got["at_largest"]
    assert (last["stage_method"], last["supervised_method"]) == ("latent-logreg",
                                                                 "supervised-logreg")
    a, b, c = TRUTH["latent-logreg"]
    a2, b2, c2 = TRUTH["supervised-logreg"]
    true_gain = (a2 + b2 * 320 ** -c2) - (a + b * 320 ** -c)
    assert last["gain"] == pytest.approx(true_gain, abs=0.02)  # noise sd 0.01 per cell
    assert "Do the unlabeled rows help? At 320 labels" in plan.summary()
    assert "the unlabeled rows help." in plan.summary()
    html = write_report(folder).read_text(encoding="utf-8")
    assert "Do the unlabeled rows help? At 320 labels" in html


def test_a_study_without_a_generative_stage_gets_no_answer(tmp_path):
    folder = write_study(tmp_path / "s", truth={"supervised-logreg": TRUTH["supervised-logreg"]})
    plan = make_plan(folder, PlanRequest("accuracy", 0.9, 2.0, labels_owned=100),
                     select_rows=stand_in_select_rows, n_boot=30)
    assert json.loads((folder / "plan.json").read_text(encoding="utf-8"))["unlabeled_rows"] \
        is None
    assert "unlabeled rows help" not in plan.summary()


def test_equally_cheap_sure_options_go_to_the_simplest_method():
    # The rule: when the study cannot tell methods apart, take the cheaper or simpler.
    from semisup.plan._choose import Option, best_effort, choose, simplicity

    def opt(method, prob, mean=0.8, cost=10.0, n=100):
        return Option(method, "random", n, mean, mean - 0.05, mean + 0.05, prob, cost, False)

    fams = method_families()
    seconds = {"supervised-gbt": 2.0, "supervised-logreg": 0.3, "latent-logreg": 0.2}
    prefer = simplicity(fams, pd.DataFrame({"method": list(seconds),
                                            "seconds": list(seconds.values())}))
    options = [opt("latent-logreg", 0.95), opt("supervised-gbt", 0.9),
               opt("supervised-logreg", 0.85), opt("mixture-em", 0.99, cost=5.0, n=50)]
    assert choose(options, 0.8, prefer=prefer)[0].method == "mixture-em"   # cheaper first
    chosen, runner = choose(options[:3], 0.8, prefer=prefer)
    assert (chosen.method, runner.method) == ("supervised-logreg", "supervised-gbt")
    assert choose(options[:3], 0.8)[0].method == "latent-logreg"  # no preference: probability
    assert choose(options[:3], 0.9, prefer=prefer)[0].method == "supervised-gbt"
    tied = [opt("latent-logreg", 0.4, mean=0.8391), opt("supervised-logreg", 0.3, mean=0.8388),
            opt("supervised-gbt", 0.5, mean=0.8376)]
    assert best_effort(tied, prefer=prefer).method == "supervised-logreg"
    assert best_effort(tied).method == "latent-logreg"
