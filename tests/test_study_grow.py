"""Studies that grow: added labels, repeats or budgets keep every cell whose content is
unchanged and run only the rest. Each grown study is checked cell by cell against a study run
from scratch on the same inputs (identical numbers), the number of kept cells is asserted, a
setting that changes every cell is refused, and a stored cell whose content key no longer
matches is measured again."""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pandas as pd
import pytest
from _study_support import ensure_methods, make_dataset, pca_representation

from semisup import StoreError
from semisup.study import StudySpec, run_study
from semisup.study._rounds import AddedLabels, read_added_labels, write_added_labels

_CLOCKS = ["seconds", "tune_seconds", "fit_seconds"]


@pytest.fixture(scope="module")
def roles():
    return ensure_methods()


@pytest.fixture(scope="module")
def ds():
    return make_dataset(n_labeled_per_class=15, n_unlabeled=90)


def _truth(ds) -> dict[str, str]:
    """The digits' own labels of every row (scikit-learn's bundled set), by row id."""
    from sklearn.datasets import load_digits

    _, y = load_digits(return_X_y=True)
    y = y[y < 3]
    return {rid: str(y[int(rid[1:])]) for rid in ds.row_ids}


def _spec(roles, **over) -> StudySpec:
    values = {"data": "digits-standin", "label_column": "digit",
              "methods": [roles["logreg"], roles["selftrain"]], "repeats": 2, "folds": 3,
              "trials": 1, "pretrain": {"vae": {"n_components": 4}}}
    values.update(over)
    return StudySpec.build(overrides=values)


def _run(spec, out, ds, **kw):
    return run_study(spec, out, dataset=ds, representation_fn=pca_representation, jobs=1,
                     progress=False, **kw)


def _same_cells(a: pd.DataFrame, b: pd.DataFrame) -> None:
    keys = ["method", "strategy", "n_labels", "repeat"]
    a = a.drop(columns=_CLOCKS).sort_values(keys).reset_index(drop=True)
    b = b.drop(columns=_CLOCKS).sort_values(keys).reset_index(drop=True)
    pd.testing.assert_frame_equal(a, b)


def _add_round(out, ds, n: int, skip: int = 0) -> list[str]:
    truth = _truth(ds)
    before = read_added_labels(out)
    unl = [r for r, y in zip(ds.row_ids, ds.y, strict=True) if y < 0 and r not in
           before.row_ids][skip:skip + n]
    round_ = before.last_round + 1
    write_added_labels(out, AddedLabels(before.row_ids + tuple(unl),
                                        before.labels + tuple(truth[r] for r in unl),
                                        before.rounds + (round_,) * len(unl)))
    return unl


@pytest.mark.slow
@pytest.mark.parametrize("evaluation", ["cross-fit", "holdout"])
def test_labels_added_keep_old_cells_and_match_a_study_from_scratch(tmp_path, roles, ds,
                                                                    evaluation):
    spec = _spec(roles, evaluation=evaluation)
    out = tmp_path / "grown"
    first = _run(spec, out, ds)
    n_first = len(first.cells)
    assert first.info["this_run"] == {"total": n_first, "kept": 0, "run": n_first}
    # two rounds of returned labels, each grown onto the study in turn
    before = first.cells
    for n_round in (9, 6):
        _add_round(out, ds, n_round, skip=3)
        grown = _run(spec, out, ds)
        run = grown.info["this_run"]
        # the default grid gains one budget, the whole grown pool; every earlier cell is kept
        # (same draw: the round's rows come after the table's own in the draw order)
        assert run["kept"] == len(before) and run["run"] == run["total"] - len(before) > 0
        assert max(grown.info["budgets"]) == max(before["n_labels"]) + n_round
        _same_cells(grown.cells[grown.cells["n_labels"].isin(before["n_labels"])], before)
        before = grown.cells
    # the same inputs (table + labels_added.csv) run from scratch: the same numbers
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    write_added_labels(scratch, read_added_labels(out))
    fresh = _run(spec, scratch, ds)
    assert fresh.info["this_run"]["kept"] == 0
    _same_cells(grown.cells, fresh.cells)
    # the round's rows are training rows only: never evaluated
    info = json.loads((out / "study.json").read_text())
    assert info["data"]["n_labeled"] == 45 + 15
    assert set(grown.cells["n_eval"]) == set(first.cells["n_eval"])


@pytest.mark.slow
def test_top_budget_after_a_round_trains_on_the_returned_rows(tmp_path, roles, ds):
    """The grown pool's cell equals scikit-learn's LogisticRegression fitted by hand on the
    fold's own pool rows plus the returned rows (trials=1: the stand-in's defaults)."""
    from sklearn.linear_model import LogisticRegression

    from semisup._seeding import derive_seed
    from semisup.study._draws import crossfit_folds

    spec = _spec(roles, methods=[roles["logreg"]], repeats=1)
    out = tmp_path / "s"
    _run(spec, out, ds)
    added = _add_round(out, ds, 9)
    grown = _run(spec, out, ds)
    truth = _truth(ds)
    ids = list(ds.row_ids)
    own = np.flatnonzero(ds.y >= 0)
    fold = crossfit_folds(ds.y[own], np.asarray(ids, dtype=str)[own], 3,
                          derive_seed(0, "folds", 0))
    train = np.concatenate([own[fold != 0], [ids.index(r) for r in added]])
    y_train = np.array([int(truth[ids[i]]) for i in train])
    test = own[fold == 0]
    # scikit-learn is the reference: the stand-in is LogisticRegression(C=1, max_iter=300)
    ref = LogisticRegression(C=1.0, max_iter=300).fit(ds.X[train], y_train)
    want = float(np.mean(ref.predict(ds.X[test]) == ds.y[test]))
    top = grown.cells[grown.cells["n_labels"] == len(train)]
    assert len(top) == 1 and top["accuracy"].iloc[0] == pytest.approx(want)


@pytest.mark.slow
def test_repeats_added_keep_old_cells_and_match_a_study_from_scratch(tmp_path, roles, ds):
    spec = _spec(roles, budgets=[6, 12, 24])
    out = tmp_path / "grown"
    first = _run(spec, out, ds)
    # 2 -> 4 repeats with 3 folds: the third fold of the first cycle and a second cycle
    grown = _run(spec.replace(repeats=4), out, ds)
    assert grown.info["this_run"]["kept"] == len(first.cells) == 2 * 3 * 2
    assert grown.info["this_run"]["run"] == 2 * 3 * 2
    fresh = _run(spec.replace(repeats=4), tmp_path / "scratch", ds)
    _same_cells(grown.cells, fresh.cells)
    # back to 2 repeats: nothing runs, the export holds the 2 repeats' cells only
    back = _run(spec, out, ds)
    assert back.info["this_run"] == {"total": 12, "kept": 12, "run": 0}
    _same_cells(back.cells, first.cells)


@pytest.mark.slow
def test_budgets_added_keep_old_cells_and_match_a_study_from_scratch(tmp_path, roles, ds):
    spec = _spec(roles, budgets=[6, 24])
    out = tmp_path / "grown"
    first = _run(spec, out, ds)
    wider = spec.replace(budgets=[6, 12, 24, 30])
    grown = _run(wider, out, ds)
    assert grown.info["this_run"]["kept"] == len(first.cells) == 2 * 2 * 2
    assert grown.info["this_run"]["run"] == 2 * 2 * 2
    fresh = _run(wider, tmp_path / "scratch", ds)
    _same_cells(grown.cells, fresh.cells)
    assert "8 cell(s) kept from earlier runs" in grown.summary()


@pytest.mark.slow
def test_settings_that_change_every_cell_are_refused_and_a_stale_cell_runs_again(
        tmp_path, roles, ds):
    spec = _spec(roles, budgets=[6, 24])
    out = tmp_path / "s"
    first = _run(spec, out, ds)
    for changed in (spec.replace(trials=2), spec.replace(seed=1),
                    spec.replace(pretrain={"vae": {"n_components": 3}})):
        with pytest.raises(StoreError, match="different spec"):
            _run(changed, out, ds)
    # a stored cell whose content key no longer matches is measured again, the rest kept
    with sqlite3.connect(out / "study.sqlite") as con:
        con.execute("UPDATE cells SET cell_key = 'stale' WHERE n_labels = 24 AND repeat = 1 "
                    "AND method = ?", (roles["logreg"],))
    again = _run(spec, out, ds)
    assert again.info["this_run"] == {"total": 8, "kept": 7, "run": 1}
    _same_cells(again.cells, first.cells)
    # with --restart the changed setting runs every cell again
    restarted = _run(spec.replace(trials=2), out, ds, restart=True)
    assert restarted.info["this_run"] == {"total": 8, "kept": 0, "run": 8}


def test_cell_keys_separate_what_changes_a_cell_from_what_adds_cells(roles, ds):
    from semisup.study._design import make_design
    from semisup.study._draws import acquisition_orders
    from semisup.study._runner import _cell_keys

    def keys(spec, added=None):
        design = make_design(spec, ds, injected_representation=True, added=added)
        feats = {"raw": ds.X, "vae": ds.X[:, :4]}
        pools = [design.pool_idx(r) for r in range(design.spec.repeats)]
        orders, _ = acquisition_orders(
            feats, design.y, pools, design.budgets, design.spec.strategies, design.spec.seed,
            parts=[design.pool_parts[design.repeat_fold[r]] for r in range(len(pools))])
        from semisup.study._cell import CellContext

        ctx = CellContext(features=feats, y=design.y, pools=design.pools, evals=design.evals,
                          repeat_fold=dict(enumerate(design.repeat_fold)),
                          unlabeled_idx=design.unlabeled_idx, orders=orders,
                          methods=design.methods, n_classes=design.n_classes,
                          seed=design.spec.seed, trials=design.spec.trials,
                          cv_folds=design.spec.cv_folds,
                          max_unlabeled=design.spec.max_unlabeled,
                          transductive=design.spec.transductive)
        return _cell_keys(ctx, design), design

    spec = _spec(roles, budgets=[6, 24])
    base, design = keys(spec)
    more, more_design = keys(spec.replace(repeats=3, budgets=[6, 12, 24]))
    assert design.settings_fingerprint == more_design.settings_fingerprint
    assert design.fingerprint != more_design.fingerprint
    assert all(more[c] == k for c, k in base.items())  # every old cell, the same key
    for changed in (spec.replace(trials=2), spec.replace(seed=3), spec.replace(cv_folds=2)):
        other, other_design = keys(changed)
        assert other_design.settings_fingerprint != design.settings_fingerprint
        assert not set(other.values()) & set(base.values())
    # a label added to a row the semi-supervised method saw unlabeled: the supervised cells
    # and the semi-supervised ones keep their keys (the row is still seen, now in the pool)
    rid = next(r for r, y in zip(ds.row_ids, ds.y, strict=True) if y < 0)
    added = AddedLabels((rid,), (_truth(ds)[rid],), (1,))
    grown, grown_design = keys(spec, added)
    assert grown_design.settings_fingerprint == design.settings_fingerprint
    assert grown == base


@pytest.mark.slow
def test_a_round_reuses_the_cached_unsupervised_stage(tmp_path):
    """A real (tiny) VAE: the round's labels leave its input rows as they were, so the second
    run loads it from the content-hashed cache instead of fitting it again."""
    tiny = make_dataset(n_labeled_per_class=10, n_unlabeled=60)
    spec = StudySpec.build(overrides={
        "data": "digits-standin", "label_column": "digit", "methods": ["latent-logreg"],
        "repeats": 1, "folds": 3, "trials": 1,
        "pretrain": {"vae": {"max_epochs": 2, "hidden": [16], "latent_dim": 2}}})
    out = tmp_path / "s"
    first = run_study(spec, out, dataset=tiny, jobs=1, progress=False)
    assert first.info["representation"]["diagnostics"]["vae"]["loaded_from_cache"] is False
    _add_round(out, tiny, 6)
    grown = run_study(spec, out, dataset=tiny, jobs=1, progress=False)
    assert grown.info["representation"]["diagnostics"]["vae"]["loaded_from_cache"] is True
    assert grown.info["this_run"]["kept"] == len(first.cells) > 0
    assert grown.info["this_run"]["run"] == 1  # the grown pool's budget
