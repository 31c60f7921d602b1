"""Benchmark: a study grown by one labeling round against the same study run from scratch.

Table: scikit-learn's bundled breast-cancer set (569 rows, 2 classes) with 150 labels shown
and the rest blank. The base study (supervised-logreg and latent-logreg on a real VAE, 5
repeats, 2 trials) runs first; then a round returns 40 of the blank rows with their true
labels (a seeded random choice, standing in for an annotator). The grown run (same folder)
is timed against a run from scratch on the same table and labels_added.csv, the reference
measured in the same run. It prints the wall times, their ratio, the cells kept and run, and
whether every cell's numbers are identical.

    python benchmarks/bench_study_grow.py
    python benchmarks/bench_study_grow.py --round 80 --repeats 3

Goal: the grown run takes at most half the time of the run from scratch, with identical
numbers in every cell.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

GOAL_RATIO = 0.5


def _table(workdir: Path, n_labels: int):
    import numpy as np
    from sklearn.datasets import load_breast_cancer

    frame = load_breast_cancer(as_frame=True).frame
    frame.insert(0, "case", [f"b{i:04d}" for i in range(len(frame))])
    truth = np.where(frame["target"] == 1, "benign", "malignant")
    frame["target"] = truth
    hidden = np.random.default_rng(0).permutation(len(frame))[n_labels:]
    frame.loc[hidden, "target"] = None
    frame.to_csv(workdir / "cancer.csv", index=False)
    return frame["case"].to_numpy(), truth, np.sort(hidden)


def _run(spec, out: Path) -> tuple[float, dict]:
    from semisup.study import run_study

    t0 = time.perf_counter()
    result = run_study(spec, out, jobs=1, progress=False)
    return time.perf_counter() - t0, result


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--labels", type=int, default=150)
    ap.add_argument("--round", type=int, default=40, help="rows returned in the round")
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args()

    import numpy as np

    from semisup.study import StudySpec
    from semisup.study._rounds import AddedLabels, write_added_labels

    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        ids, truth, hidden = _table(work, args.labels)
        spec = StudySpec.build(overrides={
            "data": str(work / "cancer.csv"), "label_column": "target", "id_column": "case",
            "methods": ["supervised-logreg", "latent-logreg"], "repeats": args.repeats,
            "trials": 2})
        base_s, base = _run(spec, work / "grown")
        back = np.random.default_rng(1).choice(hidden, args.round, replace=False)
        added = AddedLabels(tuple(ids[back]), tuple(truth[back]), (1,) * args.round)
        write_added_labels(work / "grown", added)
        (work / "scratch").mkdir()
        write_added_labels(work / "scratch", added)
        grown_s, grown = _run(spec, work / "grown")
        scratch_s, scratch = _run(spec, work / "scratch")
        keys = ["method", "strategy", "n_labels", "repeat"]
        drop = ["seconds", "tune_seconds", "fit_seconds"]
        a = grown.cells.drop(columns=drop).sort_values(keys).reset_index(drop=True)
        b = scratch.cells.drop(columns=drop).sort_values(keys).reset_index(drop=True)
        identical = a.equals(b)
        info = json.loads((work / "grown" / "study.json").read_text())
        cached = info["representation"]["diagnostics"]["vae"]["loaded_from_cache"]
    ratio = grown_s / scratch_s
    load = os.getloadavg()
    print(f"shared machine, load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}")
    print(f"base study: {len(base.cells)} cells in {base_s:.1f} s")
    print(f"grown by {args.round} returned labels: {grown.info['this_run']} in {grown_s:.1f} s "
          f"(VAE from cache: {cached})")
    print(f"from scratch on the same inputs: {len(scratch.cells)} cells in {scratch_s:.1f} s")
    print(f"grown / scratch = {ratio:.2f} (goal <= {GOAL_RATIO}); identical cells: {identical}")
    met = ratio <= GOAL_RATIO and identical
    print("goal met" if met else "goal NOT met")


if __name__ == "__main__":
    main()
