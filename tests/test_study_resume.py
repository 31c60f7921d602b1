"""Resume after SIGKILL: the re-run finishes with the same cells.csv and recomputes nothing."""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pandas as pd
import pytest

TESTS = Path(__file__).resolve().parent
ROOT = TESTS.parent
TIMING = ["seconds", "tune_seconds", "fit_seconds"]
BUDGETS = [6, 12, 24]
REPEATS = 3

SCRIPT = textwrap.dedent(f"""
    import sys
    from _study_support import ensure_methods, make_dataset, pca_representation
    from semisup.study import StudySpec, run_study

    if __name__ == "__main__":
        roles = ensure_methods()
        spec = StudySpec.build(overrides={{
            "data": "digits-standin", "label_column": "digit",
            "methods": [roles["counting"], roles["raises"]],
            "budgets": {BUDGETS}, "repeats": {REPEATS}, "trials": 1,
        }})
        run_study(spec, sys.argv[1], jobs=1, dataset=make_dataset(),
                  representation_fn=pca_representation, progress=False)
""")


def _env(counter: Path, delay: str) -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), str(TESTS), env.get("PYTHONPATH", "")])
    env["STUDYTEST_COUNTER"] = str(counter)
    env["STUDYTEST_DELAY"] = delay
    env["OMP_NUM_THREADS"] = "1"
    return env


def _n_cells(db: Path) -> int:
    if not db.exists():
        return 0
    try:
        with sqlite3.connect(db, timeout=1) as con:
            return con.execute("SELECT count(*) FROM cells").fetchone()[0]
    except sqlite3.OperationalError:
        return 0


def _stamps(db: Path) -> dict:
    with sqlite3.connect(db) as con:
        rows = con.execute("SELECT method, n_labels, repeat, strategy, finished_at, attempts "
                           "FROM cells").fetchall()
    return {tuple(r[:4]): (r[4], r[5]) for r in rows}


def _fits(counter: Path) -> int:
    # final fits of cells only (the candidates refit uses the whole pool, not a budget)
    if not counter.exists():
        return 0
    return sum(1 for line in counter.read_text().split() if int(line) in BUDGETS)


@pytest.mark.slow
def test_sigkill_then_rerun_gives_same_cells_and_recomputes_nothing(tmp_path):
    script = tmp_path / "run.py"
    script.write_text(SCRIPT)
    n_total = 2 * len(BUDGETS) * REPEATS

    killed_dir, counter = tmp_path / "killed", tmp_path / "fits.txt"
    proc = subprocess.Popen([sys.executable, str(script), str(killed_dir)],
                            env=_env(counter, "0.3"), cwd=tmp_path)
    deadline = time.monotonic() + 120
    while _n_cells(killed_dir / "study.sqlite") < 5:
        assert proc.poll() is None, "study finished or crashed before it could be killed"
        assert time.monotonic() < deadline
        time.sleep(0.05)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    before = _stamps(killed_dir / "study.sqlite")
    assert 5 <= len(before) < n_total
    assert not (killed_dir / "cells.csv").exists()
    fits_before = _fits(counter)

    subprocess.run([sys.executable, str(script), str(killed_dir)], env=_env(counter, "0"),
                   cwd=tmp_path, check=True)
    after = _stamps(killed_dir / "study.sqlite")
    assert len(after) == n_total
    for key, stamp in before.items():
        assert after[key] == stamp  # committed cells untouched (same time, one attempt)
    # the counting method fitted exactly its cells that were not yet committed
    done_counting = sum(1 for k in before if "counting" in k[0])
    assert _fits(counter) - fits_before == n_total // 2 - done_counting

    clean_dir = tmp_path / "clean"
    subprocess.run([sys.executable, str(script), str(clean_dir)], env=_env(tmp_path / "c2.txt",
                   "0"), cwd=tmp_path, check=True)
    resumed = pd.read_csv(killed_dir / "cells.csv").drop(columns=TIMING)
    clean = pd.read_csv(clean_dir / "cells.csv").drop(columns=TIMING)
    pd.testing.assert_frame_equal(resumed, clean)


GROW_SCRIPT = SCRIPT.replace(f'"repeats": {REPEATS}', '"repeats": int(sys.argv[2])')


@pytest.mark.slow
def test_sigkill_while_a_study_grows_then_rerun_matches_a_study_from_scratch(tmp_path):
    """Grow 1 -> 3 repeats, kill the growing run, run it again: the first repeat's cells
    are never touched, the rest equal a 3-repeat study from scratch."""
    script = tmp_path / "grow.py"
    script.write_text(GROW_SCRIPT)
    folder, counter = tmp_path / "grown", tmp_path / "fits.txt"
    subprocess.run([sys.executable, str(script), str(folder), "1"], env=_env(counter, "0"),
                   cwd=tmp_path, check=True)
    first = _stamps(folder / "study.sqlite")
    assert len(first) == 2 * len(BUDGETS)
    proc = subprocess.Popen([sys.executable, str(script), str(folder), "3"],
                            env=_env(counter, "0.3"), cwd=tmp_path)
    deadline = time.monotonic() + 120
    while _n_cells(folder / "study.sqlite") < len(first) + 3:
        assert proc.poll() is None, "study finished or crashed before it could be killed"
        assert time.monotonic() < deadline
        time.sleep(0.05)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    subprocess.run([sys.executable, str(script), str(folder), "3"], env=_env(counter, "0"),
                   cwd=tmp_path, check=True)
    after = _stamps(folder / "study.sqlite")
    assert len(after) == 2 * len(BUDGETS) * 3
    for key, stamp in first.items():
        assert after[key] == stamp  # kept through the growth and the kill
    clean = tmp_path / "clean"
    subprocess.run([sys.executable, str(script), str(clean), "3"], env=_env(tmp_path / "c.txt",
                   "0"), cwd=tmp_path, check=True)
    pd.testing.assert_frame_equal(pd.read_csv(folder / "cells.csv").drop(columns=TIMING),
                                  pd.read_csv(clean / "cells.csv").drop(columns=TIMING))
