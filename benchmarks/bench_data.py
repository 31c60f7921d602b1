"""Time and peak memory of the data layer on a wide table, against plain pandas readers.

Writes a table of N rows x M numeric columns (+ a 10%-labeled label column) as Parquet and
CSV, then runs each step in a fresh subprocess and records wall time and peak resident
memory (VmHWM of /proc/self/status, includes the interpreter and imported libraries):

    reference   pandas.read_parquet / pandas.read_csv of the same file
    semisup     load_dataset (read + validate + encode) and make_card (all of it + profile)

and prints the ratios semisup / reference measured in the same run.

    PYTHONPATH=. python benchmarks/bench_data.py                  # 1,000,000 x 50
    PYTHONPATH=. python benchmarks/bench_data.py --rows 100000    # quicker
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

log = logging.getLogger("bench_data")

_CHILD = r"""
import json, resource, sys, time
def peak_mb():
    # VmHWM: this process's own peak resident memory. (ru_maxrss would also count the
    # parent's peak, which a child inherits through fork.)
    try:
        with open("/proc/self/status") as handle:
            for line in handle:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # Linux: KiB
what, path = sys.argv[1], sys.argv[2]
import pandas as pd
if what.startswith("semisup"):
    from semisup.data import load_dataset, make_card
    import semisup.data._encoder  # scikit-learn import outside the timed part
    import sklearn.tree, sklearn.metrics
base_mb = peak_mb()
start = time.perf_counter()
if what == "pandas.read_parquet":
    out = pd.read_parquet(path).shape
elif what == "pandas.read_csv":
    out = pd.read_csv(path).shape
elif what == "semisup.load_dataset":
    out = load_dataset(path, label_column="label").X.shape
elif what == "semisup.make_card":
    out = make_card(path, label_column="label").n_rows
seconds = time.perf_counter() - start
print(json.dumps({"seconds": seconds, "peak_mb": peak_mb(), "import_mb": base_mb}))
"""


def _measure(what: str, path: Path, repeats: int) -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    runs = []
    for _ in range(repeats):
        result = subprocess.run([sys.executable, "-c", _CHILD, what, str(path)], env=env,
                                capture_output=True, text=True, check=False)
        if result.returncode != 0:
            raise RuntimeError(f"{what} failed: {result.stderr[-2000:]}")
        runs.append(json.loads(result.stdout.strip().splitlines()[-1]))
    best = min(runs, key=lambda r: r["seconds"])
    return {"seconds": best["seconds"], "peak_mb": max(r["peak_mb"] for r in runs),
            "import_mb": best["import_mb"]}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--cols", type=int, default=50)
    parser.add_argument("--repeats", type=int, default=1, help="runs per step (best time)")
    parser.add_argument("--no-csv", action="store_true", help="Parquet only (CSV is slower)")
    args = parser.parse_args(argv)
    logging.basicConfig(level=logging.INFO, format="%(message)s")

    sys.path.insert(0, str(ROOT / "tests"))
    from test_data_scale import write_wide_parquet

    with tempfile.TemporaryDirectory(prefix="bench_data_") as tmp:
        parquet = Path(tmp) / "wide.parquet"
        start = time.perf_counter()
        write_wide_parquet(parquet, n_rows=args.rows, n_cols=args.cols)
        log.info("wrote %s (%.0f MB) in %.1f s", parquet.name, parquet.stat().st_size / 2**20,
                 time.perf_counter() - start)
        files = [("parquet", parquet, "pandas.read_parquet")]
        if not args.no_csv:
            import pyarrow.csv as pacsv
            import pyarrow.parquet as pq

            csv_path = Path(tmp) / "wide.csv"
            source = pq.ParquetFile(parquet)
            with pacsv.CSVWriter(csv_path, source.schema_arrow) as writer:
                for batch in source.iter_batches(batch_size=100_000):
                    writer.write_batch(batch)
            log.info("wrote %s (%.0f MB)", csv_path.name, csv_path.stat().st_size / 2**20)
            files.append(("csv", csv_path, "pandas.read_csv"))

        float64_mb = args.rows * args.cols * 8 / 2**20
        print(f"\ntable: {args.rows:,} rows x {args.cols} numeric columns + label "
              f"(float64 size {float64_mb:,.0f} MB); python {sys.version.split()[0]}, "
              f"{os.cpu_count()} cores\n")
        header = (f"{'format':8} {'step':22} {'seconds':>8} {'peak MB':>8} {'imports MB':>10} "
                  f"{'added MB':>8} {'time x ref':>10} {'peak x ref':>10} {'added x ref':>11}")
        print(header)
        print("-" * len(header))
        for fmt, path, reference in files:
            ref = _measure(reference, path, args.repeats)
            for what in (reference, "semisup.load_dataset", "semisup.make_card"):
                r = ref if what == reference else _measure(what, path, args.repeats)
                added, ref_added = r["peak_mb"] - r["import_mb"], ref["peak_mb"] - ref["import_mb"]
                print(f"{fmt:8} {what:22} {r['seconds']:8.2f} {r['peak_mb']:8.0f} "
                      f"{r['import_mb']:10.0f} {added:8.0f} {r['seconds'] / ref['seconds']:10.2f} "
                      f"{r['peak_mb'] / ref['peak_mb']:10.2f} "
                      f"{added / max(ref_added, 1.0):11.2f}", flush=True)
        print("\npeak MB = peak resident memory of the whole process (interpreter and "
              "libraries included); imports MB = the same right after the imports; added MB = "
              "peak - imports.")
    return 0


if __name__ == "__main__":
    sys.exit(main())
