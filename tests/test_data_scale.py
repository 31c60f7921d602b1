"""A million rows x 50 numeric columns load, encode and get a card under a memory bound.

Memory bound (documented in benchmarks/results/data.md): the peak resident memory of the
process that runs ``make_card`` (which reads, validates and encodes the table) stays under
2,400 MB, six times the table's float64 size (400 MB), including the Python interpreter,
pandas and scikit-learn themselves. Measured as VmHWM of /proc/self/status (``getrusage``
off Linux) in a fresh subprocess. Time is measured by benchmarks/bench_data.py, never
asserted here.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
N_ROWS, N_COLS = 1_000_000, 50
PEAK_RSS_BOUND_MB = 2_400

_CHILD = r"""
import json, resource, sys
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
from semisup.data import make_card
card = make_card(sys.argv[1], label_column="label")
print(json.dumps({"peak_mb": peak_mb(), "n_rows": card.n_rows, "n_labeled": card.n_labeled,
                  "n_features": card.n_encoded_features, "kinds": card.kinds,
                  "classes": card.class_counts}))
"""


def write_wide_parquet(path: Path, n_rows: int = N_ROWS, n_cols: int = N_COLS,
                       seed: int = 0, chunk_rows: int = 100_000) -> int:
    """Numeric table with a 10%-labeled 3-class label column, written in row groups so the
    writer never holds the whole table. Returns the number of labeled rows."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(seed)
    names = [f"f{i}" for i in range(n_cols)]
    n_labeled = 0
    writer = None
    try:
        for start in range(0, n_rows, chunk_rows):
            n = min(chunk_rows, n_rows - start)
            values = rng.normal(size=(n, n_cols))
            values[rng.random((n, n_cols)) < 0.001] = np.nan
            labeled = rng.random(n) < 0.1
            n_labeled += int(labeled.sum())
            labels = np.where(labeled, rng.integers(0, 3, n).astype(str), None)
            columns = [pa.array(values[:, j]) for j in range(n_cols)]
            table = pa.table(columns + [pa.array(labels, type=pa.string())],
                             names=names + ["label"])
            if writer is None:
                writer = pq.ParquetWriter(path, table.schema)
            writer.write_table(table)
    finally:
        if writer is not None:
            writer.close()
    return n_labeled


@pytest.mark.slow
def test_million_rows_card_under_memory_bound(tmp_path):
    path = tmp_path / "wide.parquet"
    n_labeled = write_wide_parquet(path)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    result = subprocess.run([sys.executable, "-c", _CHILD, str(path)], env=env,
                            capture_output=True, text=True, timeout=600)
    assert result.returncode == 0, result.stderr
    facts = json.loads(result.stdout.strip().splitlines()[-1])
    assert facts["n_rows"] == N_ROWS and facts["n_labeled"] == n_labeled
    # 50 numeric columns, each with a missing indicator (0.1% missing cells)
    assert facts["n_features"] == 2 * N_COLS
    assert len(facts["kinds"]["numeric"]) == N_COLS
    assert sorted(facts["classes"]) == ["0", "1", "2"]
    assert facts["peak_mb"] < PEAK_RSS_BOUND_MB, facts
