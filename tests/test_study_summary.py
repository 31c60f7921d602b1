"""The study's console summary leads with the metric the card advises, where repeats differ."""

from __future__ import annotations

import pandas as pd

from semisup.study import StudyRecord
from semisup.study._runner import StudyResult


def _info(counts, shared, pool):
    return {"data": {"class_counts": counts},
            "evaluation": {"shared_across_repeats": shared, "n_pool_min": pool}}


def _lead(info):
    return StudyRecord.from_dict(info).lead_metric


def test_imbalanced_classes_lead_with_balanced_accuracy():
    # The card's own rule (largest / smallest labeled class >= 3 is imbalanced; common
    # practice, no source): accuracy hides a minority class there.
    assert _lead(_info({"a": 90, "b": 10}, False, 80)) == "balanced_accuracy"
    assert _lead(_info({"a": 50, "b": 40}, False, 80)) == "accuracy"


def test_shared_evaluation_skips_the_whole_pool_budget():
    budgets = pd.Series([10, 50, 100, 100])
    # holdout: at 100 = the pool every repeat trains on the same rows, so 50 is shown
    assert StudyRecord.from_dict(_info({}, True, 100)).summary_budget(budgets) == 50
    # cross-fit: each repeat has its own pool, so the largest budget already differs
    assert StudyRecord.from_dict(_info({}, False, 100)).summary_budget(budgets) == 100


def test_summary_prints_the_chosen_metric_and_budget(tmp_path):
    rows = []
    for repeat, (acc, bal) in enumerate([(0.9, 0.6), (0.8, 0.5)]):
        for n in (10, 20):
            rows.append({"method": "m", "n_labels": n, "repeat": repeat, "strategy": "random",
                         "status": "ok", "accuracy": acc, "balanced_accuracy": bal})
    result = StudyResult(out_dir=tmp_path, cells=pd.DataFrame(rows),
                         info=_info({"a": 90, "b": 10}, True, 20))
    text = result.summary()
    assert "balanced accuracy on the evaluation rows at 10 labels" in text
    assert "0.550  (0.500-0.600, 2 repeats)" in text


def test_card_plan_and_summary_share_one_imbalance_rule():
    # A 4:1 table: the card's rule (ratio >= 3, common practice, no source) calls it
    # imbalanced, so the summary leads with balanced accuracy and the plan warns; before the
    # one record the plan used 5 and stayed silent here.
    from semisup.data._card import imbalance_ratio, is_imbalanced
    from semisup.plan import data_warnings

    counts = {"a": 80, "b": 20}
    assert is_imbalanced(imbalance_ratio(counts.values()))
    record = StudyRecord.from_dict(_info(counts, False, 80))
    assert record.lead_metric == "balanced_accuracy"
    assert any("imbalanced (largest/smallest = 4.0)" in w for w in data_warnings(record))
    balanced = StudyRecord.from_dict(_info({"a": 55, "b": 45}, False, 80))
    assert balanced.lead_metric == "accuracy" and not data_warnings(balanced)
