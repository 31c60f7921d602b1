"""run_study end to end on scikit-learn's digits with stand-in methods (no real methods needed)."""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pandas as pd
import pytest
from _study_support import ensure_methods, make_dataset, pca_representation

from semisup import StoreError
from semisup.study import StudySpec, run_study

TIMING = ["seconds", "tune_seconds", "fit_seconds"]


def _spec(names, **kw):
    base = {"data": "digits-standin", "label_column": "digit", "repeats": 2, "trials": 2,
            "budgets": [6, 12]}
    base.update(kw)
    return StudySpec.build(overrides={**base, "methods": names})


def _run(spec, out, ds, **kw):
    return run_study(spec, out, dataset=ds, representation_fn=pca_representation,
                     progress=False, **kw)


@pytest.fixture(scope="module")
def roles():
    return ensure_methods()


@pytest.fixture(scope="module")
def ds():
    return make_dataset()


def test_failing_cell_recorded_and_others_complete(tmp_path, roles, ds):
    names = [roles["logreg"], roles["raises"], roles["unavailable"]]
    result = _run(_spec(names), tmp_path, ds, jobs=1)
    c = result.cells
    assert len(c) == 3 * 2 * 2
    raised = c[c["method"] == roles["raises"]]
    assert (raised["status"] == "failed").all()
    assert raised["error"].str.contains("deliberate failure from the stand-in method").all()
    skipped = c[c["method"] == roles["unavailable"]]
    assert (skipped["status"] == "skipped").all()
    assert skipped["error"].str.contains("needs 1000 labels").all()
    ok = c[c["method"] == roles["logreg"]]
    assert (ok["status"] == "ok").all() and ok["accuracy"].between(0, 1).all()
    # the columns DEVELOPERS.md fixes come first, in order
    fixed = ["method", "n_labels", "repeat", "strategy", "status", "accuracy",
             "balanced_accuracy", "macro_f1", "log_loss", "seconds", "error"]
    on_disk = pd.read_csv(tmp_path / "cells.csv")
    assert list(on_disk.columns[:11]) == fixed
    assert {"accuracy_low", "accuracy_high", "per_class_recall"} <= set(on_disk.columns)
    assert (tmp_path / "cells.parquet").exists()
    curves = pd.read_csv(tmp_path / "curves.csv")
    assert set(curves["method"]) == {roles["logreg"]}
    info = json.loads((tmp_path / "study.json").read_text())
    # cross-fit by default: 120 labels in 5 folds, so each repeat is scored on 24 rows
    assert info["evaluation"]["protocol"] == "cross-fit"
    assert info["holdout"]["n_rows"] == 24 and set(on_disk["n_eval"]) == {24}
    assert any("evaluation rows too small" in w for w in info["warnings"])
    assert "summary" not in info and "failed" in result.summary()


def test_every_cell_scored_against_scikit_learn_refit(tmp_path, roles, ds):
    """An ok cell's accuracy equals a LogisticRegression refit on the same draw by hand."""
    from sklearn.linear_model import LogisticRegression

    from semisup._seeding import derive_seed
    from semisup.study import split_holdout
    from semisup.study._draws import nested_draws

    result = _run(_spec([roles["logreg"]], trials=1, repeats=1, evaluation="holdout"), tmp_path,
                  ds, jobs=1)
    labeled = np.flatnonzero(ds.y >= 0)
    hold, pool = split_holdout(ds.y[labeled], 0.3, derive_seed(0, "holdout"))
    hold, pool = labeled[hold], labeled[pool]
    draw = pool[nested_draws(ds.y[pool], [12], derive_seed(0, "draw", 0))[12]]
    # scikit-learn's LogisticRegression with the stand-in's defaults is the reference.
    ref = LogisticRegression(C=1.0, max_iter=300).fit(ds.X[draw], ds.y[draw])
    want = float(np.mean(ref.predict(ds.X[hold]) == ds.y[hold]))
    got = result.cells.query("n_labels == 12")["accuracy"].iloc[0]
    assert got == pytest.approx(want)


def test_pretraining_fitted_once_per_repeat_and_without_holdout(tmp_path, roles, ds):
    names = [roles["logreg"], roles["selftrain"]]
    spec = _spec(names, pretrain={"vae": {"n_components": 5}}, evaluation="holdout")
    _run(spec, tmp_path, ds, jobs=1)
    fits = (tmp_path / "cache" / "fits-vae.txt").read_text().split()
    n_holdout = 36
    # once per repeat (study/_representations.py), on unlabeled + pool rows only
    assert fits == [str(len(ds.y) - n_holdout)] * spec.repeats
    c = pd.read_csv(tmp_path / "cells.csv")
    assert (c["status"] == "ok").all()
    npz = np.load(tmp_path / "candidates.npz")
    n_unl = int((ds.y < 0).sum())
    assert npz["representation"].shape == (n_unl, 5)  # the latent, not the raw table
    assert npz["proba"].shape == (n_unl, 3)
    assert np.allclose(npz["proba"].sum(axis=1), 1.0, atol=1e-5)


def test_resume_skips_finished_and_changed_spec_is_refused(tmp_path, roles, ds):
    names = [roles["logreg"], roles["raises"]]
    spec = _spec(names)
    first = _run(spec, tmp_path, ds, jobs=1)
    stamps = _stamps(tmp_path)
    again = _run(spec, tmp_path, ds, jobs=1)
    assert _stamps(tmp_path) == stamps  # nothing recomputed
    pd.testing.assert_frame_equal(first.cells, again.cells)
    _run(spec, tmp_path, ds, jobs=1, rerun_failed=True)
    new = _stamps(tmp_path)
    for key, (stamp, attempts) in stamps.items():
        if key[0] == roles["raises"]:
            assert new[key][1] == attempts + 1  # failed cells run again on request
        else:
            assert new[key] == (stamp, attempts)
    with pytest.raises(StoreError, match="--restart"):  # trials change every cell
        _run(spec.replace(trials=spec.trials + 1), tmp_path, ds, jobs=1)
    restarted = _run(spec.replace(repeats=1), tmp_path, ds, jobs=1, restart=True)
    assert len(restarted.cells) == 2 * 2


def _stamps(folder):
    with sqlite3.connect(folder / "study.sqlite") as con:
        rows = con.execute("SELECT method, n_labels, repeat, strategy, finished_at, attempts "
                           "FROM cells").fetchall()
    return {tuple(r[:4]): (r[4], r[5]) for r in rows}


def test_strategies_add_cells_and_uncertainty_starts_from_stratified_draw(tmp_path, roles, ds):
    spec = _spec([roles["logreg"]], repeats=1,
                 strategies=["random", "representative", "uncertainty"], trials=1)
    result = _run(spec, tmp_path, ds, jobs=1)
    c = result.cells
    assert sorted(c["strategy"].unique()) == ["random", "representative", "uncertainty"]
    r6 = c[(c["n_labels"] == 6)].set_index("strategy")["accuracy"]
    assert r6["random"] == r6["uncertainty"]  # same first batch


@pytest.mark.slow
def test_dask_local_cluster_local_pool_and_serial_agree(tmp_path, roles, ds):
    distributed = pytest.importorskip("distributed")
    names = [roles["logreg"], roles["selftrain"], roles["raises"]]
    spec = _spec(names, repeats=1, budgets=[6, 12])
    pooled = _run(spec, tmp_path / "pool", ds, jobs=2)
    serial = _run(spec, tmp_path / "serial", ds, jobs=1)
    # Worker processes, as `--cluster local-cluster` starts them: two cells running in threads
    # of one process once deadlocked inside numpy's hash-based np.unique (numpy 2.4, both
    # threads waiting for the GIL in unique_numeric), hanging the suite.
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as client:
        remote = _run(spec, tmp_path / "dask", ds, jobs=2, cluster=client)
    assert (pooled.cells["status"] == "ok").sum() == 4
    for other in (serial, remote):
        pd.testing.assert_frame_equal(pooled.cells.drop(columns=TIMING),
                                      other.cells.drop(columns=TIMING))
