"""The study folder: output names, --restart removes the old study's every output, a leaking
column is a study warning, a lock keeps a second study out."""

from __future__ import annotations

import json
import multiprocessing as mp

import numpy as np
import pandas as pd
import pytest

from semisup import ConfigError, StoreError
from semisup.study import StudySpec, run_study
from semisup.study._layout import (
    LOCK_FILE,
    OUTPUT_FILES,
    check_input_outside_outputs,
    remove_outputs,
)
from semisup.study._lock import study_lock


def _table(n: int = 90, seed: int = 0, leak: bool = False) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    y = np.array(["p", "q"])[np.arange(n) % 2]
    frame = pd.DataFrame({"f1": rng.normal(size=n), "f2": rng.normal(size=n), "label": y})
    if leak:  # a code that is written after the label is known
        frame["outcome_code"] = np.where(y == "p", "C1", "C2")
    frame.loc[frame.index % 3 == 0, "label"] = None
    return frame


def _spec(data, **extra) -> StudySpec:
    return StudySpec.build(overrides={"data": data, "label_column": "label",
                                      "methods": ["supervised-logreg"], "budgets": [4, 8, 16],
                                      "repeats": 2, "trials": 1, **extra})


@pytest.mark.slow
def test_restart_on_another_table_removes_every_old_output(tmp_path):
    from semisup.plan import PlanRequest, make_plan
    from semisup.report import write_report

    first = tmp_path / "first.csv"
    _table().to_csv(first, index=False)
    out = tmp_path / "study"
    run_study(_spec(first), out, jobs=1, progress=False)
    # --next: a list is written even when the target is out of reach
    make_plan(out, PlanRequest(metric="accuracy", target=0.6, cost_per_label=1.0, n_next=3))
    write_report(out)
    (out / "my_notes.txt").write_text("kept")  # not ours: never removed
    old = {p.name for p in out.iterdir()}
    assert {"plan.json", "label_next.csv", "report.html", "figures", "curves.csv"} <= old

    second = tmp_path / "second.csv"
    _table(120, seed=5).to_csv(second, index=False)
    with pytest.raises(StoreError):  # another table without --restart is refused
        run_study(_spec(second), out, jobs=1, progress=False)
    run_study(_spec(second), out, jobs=1, restart=True, progress=False)
    now = {p.name for p in out.iterdir()}
    # the plan, its sheet and the report of the old table are gone; the new study's are there
    assert not ({"plan.json", "label_next.csv", "report.html", "figures"} & now)
    assert {"cells.csv", "study.json", "study.sqlite", "my_notes.txt"} <= now
    info = json.loads((out / "study.json").read_text())
    assert info["data"]["n_rows"] == 120


def test_remove_outputs_touches_only_outputs(tmp_path):
    for name in OUTPUT_FILES:
        (tmp_path / name).write_text("x")
    (tmp_path / "figures").mkdir()
    (tmp_path / "figures" / "a.png").write_bytes(b"png")
    (tmp_path / "cache" / "vae-1").mkdir(parents=True)
    (tmp_path / "table.csv").write_text("a,b\n")
    (tmp_path / LOCK_FILE).write_text("")
    removed = remove_outputs(tmp_path)
    assert set(removed) == set(OUTPUT_FILES) | {"figures", "cache"}
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([LOCK_FILE, "table.csv"])


def test_input_inside_outputs_is_refused_but_a_neighbour_is_fine(tmp_path):
    with pytest.raises(ConfigError, match="would overwrite it"):
        check_input_outside_outputs(tmp_path / "study" / "cells.parquet", tmp_path / "study")
    with pytest.raises(ConfigError, match="'cache'"):
        check_input_outside_outputs(tmp_path / "study" / "cache" / "x.csv", tmp_path / "study")
    check_input_outside_outputs(tmp_path / "study" / "records.csv", tmp_path / "study")
    check_input_outside_outputs(tmp_path / "cells.csv", tmp_path / "study")


def test_leaking_column_is_a_study_warning(tmp_path, caplog):
    data = tmp_path / "t.csv"
    _table(leak=True).to_csv(data, index=False)
    with caplog.at_level("WARNING"):
        result = run_study(_spec(data), tmp_path / "study", jobs=1, progress=False)
    info = json.loads((tmp_path / "study" / "study.json").read_text())
    leak = [w for w in info["warnings"] if "suspected label leak" in w]
    assert len(leak) == 1 and "'outcome_code'" in leak[0] and "--kind COL=drop" in leak[0]
    assert "suspected label leak" in result.summary()
    assert any("suspected label leak" in r.getMessage() for r in caplog.records)


def _hold_lock(folder, ready, release):
    with study_lock(folder):
        ready.set()
        release.wait(60)


@pytest.mark.slow
def test_lock_is_held_across_processes_and_freed_after(tmp_path):
    ctx = mp.get_context("spawn")
    ready, release = ctx.Event(), ctx.Event()
    holder = ctx.Process(target=_hold_lock, args=(tmp_path / "study", ready, release))
    holder.start()
    try:
        assert ready.wait(60)
        with pytest.raises(StoreError, match="another study is running"):
            with study_lock(tmp_path / "study"):
                pass
    finally:
        release.set()
        holder.join(60)
    with study_lock(tmp_path / "study"):  # free again once the first study ended
        pass


def test_unwritable_study_folder_is_one_clear_error(tmp_path, monkeypatch):
    import filelock

    def refuse(self, *args, **kwargs):
        raise PermissionError(13, "Permission denied", str(tmp_path / "ro" / LOCK_FILE))

    monkeypatch.setattr(filelock.FileLock, "acquire", refuse)  # root ignores chmod
    data = tmp_path / "t.csv"
    _table().to_csv(data, index=False)
    with pytest.raises(StoreError) as info:
        run_study(_spec(data), tmp_path / "ro", jobs=1, progress=False)
    message = str(info.value)
    assert "cannot write in the study folder" in message and "ro" in message
    assert "damaged" not in message and "\n" not in message
    assert not (tmp_path / "ro" / "study.sqlite").exists()
