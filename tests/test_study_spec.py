"""Study spec: TOML and overrides, rejection of unknown keys and bad values, fingerprint."""

from __future__ import annotations

import numpy as np
import pytest

from semisup import ConfigError
from semisup.study import StudySpec
from semisup.study._tuning import cv_splits

TOML = """
data = "table.csv"
label_column = "label"
methods = ["a-method", "b-method"]
budgets = [40, 10, 20]
repeats = 3
trials = 6
strategies = ["random", "uncertainty"]
holdout = 0.25
seed = 7

[kinds]
zip = "categorical"

[pretrain.vae]
epochs = 5
"""


def test_toml_then_overrides(tmp_path):
    cfg = tmp_path / "spec.toml"
    cfg.write_text(TOML)
    spec = StudySpec.build(cfg, {"repeats": 2, "seed": None, "kinds": {"age": "numeric"},
                                 "unlabeled_markers": ()})
    assert spec.data == str(tmp_path / "table.csv")  # relative to the TOML file
    assert spec.budgets == (10, 20, 40)
    assert spec.repeats == 2 and spec.seed == 7  # None means "not given"
    assert spec.kinds == {"zip": "categorical", "age": "numeric"}
    assert spec.pretrain == {"vae": {"epochs": 5}}
    assert spec.strategies == ("random", "uncertainty")


def test_defaults():
    spec = StudySpec.build(None, {"data": "t.csv", "label_column": "y"})
    assert (spec.repeats, spec.holdout, spec.seed, spec.strategies) == (5, 0.3, 0, ("random",))
    assert spec.methods is None and spec.budgets is None and spec.transductive is False


@pytest.mark.parametrize(
    ("overrides", "needle"),
    [
        ({"repeat": 3}, "'repeat'"),
        ({"repeats": 0}, "'repeats'"),
        ({"strategies": ["greedy"]}, "allowed: random, representative, uncertainty"),
        ({"holdout": 1.5}, "'holdout'"),
        ({"budgets": [10, -1]}, "'budgets'"),
        ({"metrics": ["auc"]}, "allowed: accuracy"),
        ({"transductive": "yes"}, "'transductive'"),
        ({"kinds": {"c": "float"}}, "allowed: numeric"),
        ({"pretrain": {"pca": {}}}, "allowed: vae, mixture"),
    ],
)
def test_bad_values_name_the_key_and_allowed_values(overrides, needle):
    with pytest.raises(ConfigError, match=needle):
        StudySpec.build(None, {"data": "t.csv", "label_column": "y", **overrides})


def test_unknown_key_in_toml_is_named(tmp_path):
    cfg = tmp_path / "spec.toml"
    cfg.write_text('data = "t.csv"\nlabel_column = "y"\nrepeets = 3\n')
    with pytest.raises(ConfigError, match="unknown key 'repeets'.*allowed: .*repeats"):
        StudySpec.build(cfg, {})
    cfg.write_text("data = \n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        StudySpec.build(cfg, {})
    with pytest.raises(ConfigError, match="needs 'label_column'"):
        StudySpec.build(None, {"data": "t.csv"})


def test_fingerprint_changes_with_the_spec_only():
    a = StudySpec.build(None, {"data": "t.csv", "label_column": "y"})
    b = StudySpec.build(None, {"data": "t.csv", "label_column": "y"})
    assert a.fingerprint() == b.fingerprint()
    assert a.fingerprint() != a.replace(repeats=4).fingerprint()


def test_cv_folds_cope_with_single_label_classes():
    y = np.array([0, 0, 0, 1, 1, 2])  # class 2 has one label
    folds, note = cv_splits(y, 3, seed=0)
    assert len(folds) == 2 and "single-label" in note
    for train, val in folds:
        assert 5 in train and 5 not in val  # the lone label is always trained on
        assert set(np.unique(y[val])) == {0, 1}  # stratified over the splittable classes
    assert cv_splits(np.array([0, 1, 2]), 3, seed=0)[0] == []  # nothing to validate on
    # scikit-learn's StratifiedKFold gives each fold one row of each 2-label class
    folds, _ = cv_splits(np.array([0, 0, 1, 1]), 3, seed=0)
    assert all(sorted(y_val) == [0, 1] for y_val in (np.array([0, 0, 1, 1])[v]
                                                         for _, v in folds))
