"""Leakage check of the data card on a wide table: the vectorised screen against the exact
one-column tree on every column (the check before the screen), measured in the same run.

    python benchmarks/bench_card_wide.py [n_rows] [n_columns]
"""

from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd

import semisup.data._card as card


def main() -> None:
    n_rows = int(sys.argv[1]) if len(sys.argv) > 1 else 2000
    n_cols = int(sys.argv[2]) if len(sys.argv) > 2 else 10_000
    rng = np.random.default_rng(0)
    y = rng.integers(0, 3, size=n_rows).astype(np.int64)
    X = rng.normal(size=(n_rows, n_cols)).astype(np.float64)
    X[:, 7] = y + rng.normal(0, 0.01, n_rows)  # one leaking column
    frame = pd.DataFrame(X, columns=[f"c{i}" for i in range(n_cols)])
    kinds = dict.fromkeys(frame.columns, "numeric")
    card.find_leakage(frame.iloc[:, :50], kinds, y)  # imports and warm-up

    t0 = time.perf_counter()
    screened, _ = card.find_leakage(frame, kinds, y)
    t_screen = time.perf_counter() - t0
    sample = min(n_cols, 500)  # the exact check on every column is slow: time a sample
    card.LEAKAGE_SCREEN_MARGIN = 1.0
    t0 = time.perf_counter()
    exact, _ = card.find_leakage(frame.iloc[:, :sample], kinds, y)
    t_exact = (time.perf_counter() - t0) * n_cols / sample
    print(f"{n_rows:,} rows x {n_cols:,} numeric columns")
    print(f"screen + exact on candidates: {t_screen:.2f} s, flagged "
          f"{[f['column'] for f in screened]}")
    print(f"exact tree on every column (from {sample} columns): {t_exact:.1f} s")
    print(f"ratio exact / screened: {t_exact / t_screen:.1f}x")
    assert [f["column"] for f in exact] == [f["column"] for f in screened if
                                            int(f["column"][1:]) < sample]


if __name__ == "__main__":
    main()
