"""Benchmark: the demo study (digits, default methods, 5 repeats) end to end.

Runs the study of experiments/digits/study.toml twice from scratch -- with ``--jobs 2`` and
with ``--jobs 1`` (the reference measured in the same run) -- and prints wall time, the share
spent in pretraining, tuning and fitting, and the jobs-2 over jobs-1 speed-up.

    python benchmarks/bench_study.py                 # both runs (about 5 minutes on 2 cores)
    python benchmarks/bench_study.py --repeats 2     # smaller
    python benchmarks/bench_study.py --skip-serial   # jobs 2 only (no speed-up ratio)

Goal: the jobs-2 run under 120 s on 2 cores.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "experiments"))

GOAL_SECONDS = 120.0


def run_once(jobs: int, repeats: int, workdir: Path) -> dict:
    from semisup.study import StudySpec, run_study

    spec = StudySpec.build(ROOT / "experiments" / "digits" / "study.toml",
                           {"data": str(workdir / "digits.csv"), "repeats": repeats})
    out = workdir / f"study-jobs{jobs}"
    t0 = time.perf_counter()
    result = run_study(spec, out, jobs=jobs, restart=True, progress=False)
    wall = time.perf_counter() - t0
    info = json.loads((out / "study.json").read_text())
    cells = result.cells
    pre = sum(info["timing"]["pretrain_seconds"].values())
    return {
        "jobs": jobs,
        "wall": wall,
        "pretrain": pre,
        "cells_wall": info["timing"]["this_run_cells_seconds"],
        "tune_sum": float(cells["tune_seconds"].fillna(0).sum()),
        "fit_sum": float(cells["fit_seconds"].fillna(0).sum()),
        "cell_sum": float(cells["seconds"].fillna(0).sum()),
        "n_cells": len(cells),
        "status": cells["status"].value_counts().to_dict(),
        "per_method": cells.groupby("method")["seconds"].mean().round(2).to_dict(),
    }


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--skip-serial", action="store_true")
    args = parser.parse_args()

    import pandas as pd
    from tables import make_table

    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        make_table("digits").to_csv(work / "digits.csv", index=False)
        runs = [run_once(2, args.repeats, work)]
        if not args.skip_serial:
            runs.append(run_once(1, args.repeats, work))

    lines = [
        f"machine: {os.cpu_count()} cores, {platform.machine()}, Python "
        f"{platform.python_version()}, pandas {pd.__version__}",
        f"study: digits, 401 labels (holdout 120, pool 281), default methods, "
        f"{args.repeats} repeats, trials 4",
        "",
        "| jobs | wall s | pretrain s | cells wall s | tune share | fit share | other share "
        "| cells (ok/failed/skipped) |",
        "|---:|---:|---:|---:|---:|---:|---:|---|",
    ]
    for r in runs:
        total_work = r["pretrain"] + r["cell_sum"]
        tune = r["tune_sum"] / total_work
        fit = r["fit_sum"] / total_work
        pre_share = r["pretrain"] / total_work
        st = r["status"]
        lines.append(
            f"| {r['jobs']} | {r['wall']:.1f} | {r['pretrain']:.1f} ({pre_share:.0%}) | "
            f"{r['cells_wall']:.1f} | {tune:.0%} | {fit:.0%} | "
            f"{1 - tune - fit - pre_share:.0%} | "
            f"{st.get('ok', 0)}/{st.get('failed', 0)}/{st.get('skipped', 0)} |"
        )
    lines.append("")
    lines.append(f"goal: jobs-2 wall < {GOAL_SECONDS:.0f} s -> ratio to goal "
                 f"{runs[0]['wall'] / GOAL_SECONDS:.2f} "
                 f"({'met' if runs[0]['wall'] < GOAL_SECONDS else 'NOT met'})")
    if len(runs) == 2:
        total = runs[1]["wall"] / runs[0]["wall"]
        phase = runs[1]["cells_wall"] / runs[0]["cells_wall"]
        lines.append(f"speed-up jobs 2 over jobs 1: total {total:.2f}x, cells phase {phase:.2f}x")
    lines.append("mean seconds per cell by method (jobs 2): "
                 + ", ".join(f"{k} {v}" for k, v in sorted(runs[0]["per_method"].items())))
    print("\n".join(lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
