"""Benchmark (not CI): the default study on a Dask cluster of worker processes on this
machine (``--cluster local-cluster``, loopback only) against the local process pool, on the
generated mixed table of bench_large_study.py.

Both runs use ``--jobs 2`` and the same table and settings; the local pool is the reference
measured in the same run. Printed: each run's wall time and their ratio, and whether every
cell's numbers (cells.csv without its timing columns) are the same.

    nice -n 5 env PYTHONPATH=. python benchmarks/bench_large_dask.py --rows 1000000
    PYTHONPATH=. python benchmarks/bench_large_dask.py --rows 20000 --extra --repeats 2
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_large_study import run_logged, table_in  # noqa: E402

TIMING = ("seconds", "tune_seconds", "fit_seconds")


def main() -> None:
    import pandas as pd

    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--workdir", type=Path, default=None)
    ap.add_argument("--extra", nargs=argparse.REMAINDER, default=[],
                    help="more arguments for semisup study (both runs)")
    args = ap.parse_args()
    work, table = table_in(args.workdir, args.rows)
    print(f"{args.rows:,} rows; load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} "
          "cores", flush=True)
    base = [sys.executable, "-m", "semisup", "study", str(table), "--label-column", "y",
            "--id-column", "rid", "--jobs", "2", "--restart", *args.extra]
    runs = {}
    for name, more in (("pool", []), ("dask", ["--cluster", "local-cluster"])):
        out = work / name
        res = run_logged([*base, "--out", str(out), *more], work / f"{name}.log")
        runs[name] = (res, out)
        print(f"{name}: exit {res['exit']}, {res['seconds']:.0f}s, peak PSS "
              f"{res['peak_pss_bytes'] / 1024**3:.2f} GB", flush=True)
        if res["exit"] != 0:
            print(res["log_tail"])
            return
    cells = {n: pd.read_csv(out / "cells.csv") for n, (_, out) in runs.items()}
    drop = [c for c in cells["pool"].columns if c in TIMING]
    key = ["method", "n_labels", "repeat", "strategy"]
    a = cells["pool"].drop(columns=drop).sort_values(key).reset_index(drop=True)
    b = cells["dask"].drop(columns=drop).sort_values(key).reset_index(drop=True)
    try:
        pd.testing.assert_frame_equal(a, b)
        same = "every cell's numbers are the same"
    except AssertionError as exc:
        same = f"cells differ: {str(exc).splitlines()[0]}"
    ratio = runs["dask"][0]["seconds"] / runs["pool"][0]["seconds"]
    print(f"{len(a)} cells; {same}; Dask / pool wall time {ratio:.2f}")


if __name__ == "__main__":
    main()
