"""Large tables: the unsupervised stage on a seeded sample, once for every repeat; its
progress from worker processes; feature matrices shared with the workers; a clean stop on
SIGTERM (scikit-learn's digits with a PCA stand-in for the stage, except where the real VAE
is the point)."""

from __future__ import annotations

import contextlib
import io
import json
import logging
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from _study_support import ensure_methods, make_dataset, pca_representation

from semisup import ConfigError
from semisup._progress import Progress
from semisup.study import StudySpec, run_study
from semisup.study._representations import choose_stage, stage_sample

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def roles():
    return ensure_methods()


@pytest.fixture(scope="module")
def big():
    # every digit class, 1,700 rows: more than the smallest allowed stage_rows (1,000)
    return make_dataset(n_labeled_per_class=20, n_unlabeled=1500, n_classes=10)


def _spec(names, **kw):
    base = {"data": "digits-standin", "label_column": "digit", "repeats": 3, "trials": 1,
            "budgets": [20]}
    return StudySpec.build(overrides={**base, **kw, "methods": names})


def test_choose_stage_samples_and_shares_one_draw_past_the_cap():
    small = choose_stage(50_000)
    assert (small.fit_rows, small.draws) == (50_000, "per-repeat")
    large = choose_stage(1_000_000)
    assert (large.fit_rows, large.draws, large.chosen_by) == (100_000, "one", "auto")
    assert "seeded sample of 100,000 of its 1,000,000 rows" in large.reason
    # the user's settings win over the size rule
    assert choose_stage(1_000_000, "all").fit_rows == 1_000_000
    assert choose_stage(1_000_000, "all").draws == "per-repeat"
    kept = choose_stage(1_000_000, 200_000, "per-repeat")
    assert (kept.fit_rows, kept.draws, kept.chosen_by) == (200_000, "per-repeat", "spec")


def test_stage_sample_is_a_seeded_subset_without_repeats():
    rows = np.arange(10, 5010, 2)
    a, b = stage_sample(rows, 1000, 7), stage_sample(rows, 1000, 7)
    np.testing.assert_array_equal(a, b)
    assert len(np.unique(a)) == 1000 and np.isin(a, rows).all() and (np.diff(a) > 0).all()
    assert not np.array_equal(a, stage_sample(rows, 1000, 8))
    np.testing.assert_array_equal(stage_sample(rows, 5000, 7), rows)
    # Uniform over the rows: each half holds about half the sample (binomial sd ~16;
    # scipy's binomtest as the reference for the bound).
    from scipy.stats import binomtest

    low = int(np.sum(a < np.median(rows)))
    assert binomtest(low, 1000, 0.5).pvalue > 1e-4


def test_a_table_past_stage_rows_fits_one_draw_on_a_sample(tmp_path, roles, big, caplog):
    spec = _spec([roles["selftrain"]], stage_rows=1000)
    with caplog.at_level(logging.INFO, logger="semisup"):
        result = run_study(spec, tmp_path, dataset=big, representation_fn=pca_representation,
                           progress=False, jobs=1)
    n = len(big.y)
    # one fit, on 1,000 rows, for the three repeats
    assert (tmp_path / "cache" / "fits-vae.txt").read_text().split() == ["1000"]
    info = json.loads((tmp_path / "study.json").read_text())
    stage = info["unsupervised_stage"]
    assert (stage["n_rows"], stage["fit_rows"], stage["draws"], stage["sampled"]) == \
        (n, 1000, "one", True)
    assert info["spec"]["stage_draws"] == "one"
    assert info["evaluation"]["representation_fit"]["n_rows"] == 1000
    assert any("seeded random sample of 1,000" in note for note in info["protocol"])
    said = [r.getMessage() for r in caplog.records if "unsupervised stage is" in r.getMessage()]
    assert len(said) == 1 and "sample of 1,000 of its" in said[0] and "one draw" in said[0]
    # every row is encoded: the candidates hold the stage's features of every unlabeled row
    with np.load(tmp_path / "candidates.npz", allow_pickle=False) as cand:
        assert cand["representation"].shape[0] == int(np.sum(big.y < 0))
    assert (result.cells["status"] == "ok").all()
    # the shared feature files are gone after the study
    assert not (tmp_path / "cache" / "shared").exists()


def test_stage_rows_all_keeps_a_full_draw_per_repeat(tmp_path, roles, big):
    spec = _spec([roles["selftrain"]], stage_rows="all")
    run_study(spec, tmp_path, dataset=big, representation_fn=pca_representation,
              progress=False, jobs=1)
    assert (tmp_path / "cache" / "fits-vae.txt").read_text().split() == [str(len(big.y))] * 3


def test_study_json_says_when_cells_pass_max_unlabeled(tmp_path, roles, big):
    # 1,500 unlabeled rows: past a cap of 1,000 every cell is large, under the default not.
    from semisup.study._info import LARGE_CELLS_NOTE

    for cap, large in ((1000, True), (None, False)):
        out = tmp_path / str(cap)
        extra = {} if cap is None else {"max_unlabeled": cap}
        result = run_study(_spec([roles["selftrain"]], repeats=1, **extra), out, dataset=big,
                           representation_fn=pca_representation, progress=False, jobs=1)
        info = json.loads((out / "study.json").read_text())
        assert (LARGE_CELLS_NOTE in info["protocol"]) is large
        used = set(result.cells["n_unlabeled_used"])
        assert used == ({1000} if large else {int(np.sum(big.y < 0)) + 200 - 20 - 40})


@pytest.mark.parametrize("value", [10, 999, "some", 2.5, True])
def test_bad_stage_rows_is_one_line(value):
    with pytest.raises(ConfigError, match="stage_rows"):
        StudySpec.build(None, {"data": "t.csv", "label_column": "y", "stage_rows": value})


class _Clock:
    def __init__(self) -> None:
        self.now = 0.0

    def __call__(self) -> float:
        return self.now


def test_tick_writes_a_line_after_30_silent_seconds_and_at_most_wording():
    out, clock = io.StringIO(), _Clock()
    bar = Progress(300, "VAE epochs", enabled=True, stream=out, clock=clock, at_most=True)
    clock.now = 29.0
    bar.tick()
    assert out.getvalue() == ""
    clock.now = 31.0
    bar.tick()
    bar.tick()  # nothing new: the last line is 0 s old
    assert out.getvalue().splitlines() == ["VAE epochs 0/300, 31s"]
    clock.now = 60.0
    bar.update(100)  # 100 of at most 300 in 60 s: at most 2 more minutes
    assert out.getvalue().splitlines()[-1] == "VAE epochs 100/300, 1m00s, at most 2m left"


def test_heartbeat_thread_writes_while_nothing_finishes():
    out = io.StringIO()
    bar = Progress(10, "cells", enabled=True, stream=out, every_seconds=0.05, heartbeat=0.01)
    deadline = time.monotonic() + 30  # liveness, not speed
    while not out.getvalue() and time.monotonic() < deadline:
        time.sleep(0.02)
    bar.close()
    assert out.getvalue().startswith("cells 0/10, ")


@pytest.mark.slow
def test_stage_workers_report_their_epochs_to_the_coordinator(tmp_path):
    # The real VAE in two spawned workers: their epochs reach the coordinator's progress
    # lines (stderr is not a terminal here), counted up to the most epochs of both draws.
    from semisup.study._representations import fit_representations

    ds = make_dataset(n_labeled_per_class=5, n_unlabeled=60)
    spec = StudySpec.build(overrides={
        "data": "x", "label_column": "y",
        "pretrain": {"vae": {"max_epochs": 4, "hidden": [8], "latent_dim": 2,
                             "patience": 100}}})
    err = io.StringIO()
    with contextlib.redirect_stderr(err):
        features, diag, errors, _ = fit_representations(
            {"vae"}, ds, np.arange(len(ds.y)), spec, tmp_path, repeats=2, jobs=2,
            progress=True)
    assert errors == {}
    lines = [ln for ln in err.getvalue().splitlines() if ln.startswith("VAE epochs ")]
    assert lines and lines[-1].startswith("VAE epochs 8/8, ")
    assert features["vae"].shape == (len(ds.y), 2) and features["vae@1"].shape == (len(ds.y), 2)
    assert not np.array_equal(features["vae"], features["vae@1"])  # two seeded draws
    # the matrices are memory-mapped files, not copies: what a worker is sent is their paths
    from semisup.study._backends import _dumps
    from semisup.study._cell import CellContext
    from semisup.study._shared import shared_paths

    assert set(shared_paths(features)) == {"raw", "vae", "vae@1"}
    ctx = CellContext(features=features, y=ds.y, pools={}, evals={}, repeat_fold={},
                      unlabeled_idx=np.arange(3), orders={}, methods={}, n_classes=3, seed=0,
                      trials=1, cv_folds=2, max_unlabeled=10, transductive=False)
    from semisup.study._backends import _attach_features, _with_shared_features

    shipped = _with_shared_features(ctx)
    assert len(_dumps(shipped)) < features["raw"].nbytes
    opened = _attach_features(*shipped)
    np.testing.assert_array_equal(opened.features["raw"], np.asarray(ds.X, dtype=np.float32))


STOPPED = """
import os, sys, time
from pathlib import Path

import numpy as np


def slow_stage(kind, X, *, blocks=None, params=None, seed=0, cache_dir=None):
    Path(cache_dir).mkdir(parents=True, exist_ok=True)
    (Path(cache_dir) / f"worker-{os.getpid()}").write_text("")
    time.sleep(600)


if __name__ == "__main__":
    sys.path.insert(0, sys.argv[1])
    from _study_support import make_dataset
    from semisup.study import StudySpec
    from semisup.study._representations import fit_representations

    ds = make_dataset(n_labeled_per_class=5, n_unlabeled=60)
    spec = StudySpec.build(overrides={"data": "x", "label_column": "y"})
    try:
        fit_representations({"vae"}, ds, np.arange(len(ds.y)), spec, Path("out"),
                            slow_stage, repeats=2, jobs=2, progress=False)
    except KeyboardInterrupt:
        print("stopped", flush=True)
        sys.exit(130)
"""


@pytest.mark.slow
@pytest.mark.skipif(sys.platform == "win32", reason="SIGTERM is POSIX")
def test_sigterm_during_the_stage_stops_the_workers_without_leaked_semaphores(tmp_path):
    psutil = pytest.importorskip("psutil")
    script = tmp_path / "stopped.py"
    script.write_text(STOPPED)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen([sys.executable, str(script), str(ROOT / "tests")], cwd=tmp_path,
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    cache = tmp_path / "out" / "cache"
    try:
        deadline = time.monotonic() + 600  # liveness: both workers are inside the stage
        while len(list(cache.glob("worker-*"))) < 2 and time.monotonic() < deadline:
            time.sleep(0.2)
        pids = [int(p.name.split("-")[1]) for p in cache.glob("worker-*")]
        assert len(pids) == 2
        proc.send_signal(signal.SIGTERM)
        out, err = proc.communicate(timeout=300)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130 and "stopped" in out
    # Python's resource tracker prints this when a pool's semaphores outlive their process
    assert "leaked semaphore" not in err
    gone = time.monotonic() + 30
    while any(psutil.pid_exists(p) and psutil.Process(p).status() != psutil.STATUS_ZOMBIE
              for p in pids) and time.monotonic() < gone:
        time.sleep(0.2)
    assert not any(psutil.pid_exists(p) and psutil.Process(p).status() != psutil.STATUS_ZOMBIE
                   for p in pids)
