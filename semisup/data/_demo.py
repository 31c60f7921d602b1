"""The bundled demo table: a records office digitising hand-filled forms.

The pixels are real open data: scikit-learn's copy of the test set of the UCI "Optical
Recognition of Handwritten Digits" data (1797 8x8 crops, values 0-16, 10 classes), shipped
inside scikit-learn and read with ``sklearn.datasets.load_digits``. Everything around them is
our invented scenario, for the demo only: each row is one digit box cropped from a scanned
form; ``form_id``, ``scan_batch``, ``box`` and ``ink_density`` are made up (seeded), and a
clerk has typed the digit for only a small share of the rows (``digit``; empty = not yet
labeled).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd

from .._atomic import atomic_path, atomic_write_text
from .._seeding import derive_rng

__all__ = ["DEMO_ID_COLUMN", "DEMO_LABEL_COLUMN", "DEMO_N_LABELED", "demo_table",
           "write_demo_table"]

DEMO_LABEL_COLUMN = "digit"
DEMO_ID_COLUMN = "form_id"
#: Rows a clerk has labeled (about 22% of 1797): enough for a 30% holdout and budgets to ~250.
DEMO_N_LABELED = 400
_DEMO_SEED = 2024
_ROWS_PER_BATCH = 150
_BOXES = ("postcode", "phone", "amount", "date")
_BOX_SHARES = (0.35, 0.3, 0.2, 0.15)
_INK_MISSING_SHARE = 0.03


def demo_table(*, all_labeled: bool = False, n_labeled: int = DEMO_N_LABELED) -> pd.DataFrame:
    """The demo table (1797 rows): ``form_id``, ``scan_batch``, ``box``, ``ink_density``,
    64 pixel columns ``px_<row>_<col>`` (ints 0-16) and the label column ``digit``.

    Deterministic. ``all_labeled=True`` fills in every digit (the ground truth that the
    scenario hides; for checks and the demo's simulated annotator). ``n_labeled`` (at most
    :data:`DEMO_N_LABELED`) keeps the first that many of the clerk's labels: the same rows
    for every count, so a smaller table is an earlier stage of the same office.
    """
    if not 0 <= n_labeled <= DEMO_N_LABELED:
        raise ValueError(f"n_labeled must lie in [0, {DEMO_N_LABELED}], got {n_labeled}")
    from sklearn.datasets import load_digits

    digits = load_digits()
    pixels = digits.data.astype(np.int64)  # (1797, 64), values 0..16
    n_rows = pixels.shape[0]
    rng = derive_rng(_DEMO_SEED, "demo-table")

    gaps = rng.integers(1, 4, size=n_rows)
    form_numbers = 100_000 + np.cumsum(gaps)
    form_id = np.char.add("F-", np.char.zfill(form_numbers.astype(str), 6))
    batch = np.char.add("B", np.char.zfill((np.arange(n_rows) // _ROWS_PER_BATCH + 1)
                                           .astype(str), 2))
    box = np.asarray(_BOXES, dtype=object)[rng.choice(len(_BOXES), size=n_rows, p=_BOX_SHARES)]
    ink = pixels.sum(axis=1) / (64 * 16) + rng.normal(0.0, 0.01, size=n_rows)
    ink = np.round(np.clip(ink, 0.0, None), 3)
    ink[rng.random(n_rows) < _INK_MISSING_SHARE] = np.nan

    labels = digits.target.astype(str).astype(object)
    if not all_labeled:
        keep = np.zeros(n_rows, dtype=bool)
        keep[rng.choice(n_rows, size=DEMO_N_LABELED, replace=False)[:n_labeled]] = True
        labels = np.where(keep, labels, None)

    columns: dict[str, object] = {
        "form_id": form_id.astype(object),
        "scan_batch": batch.astype(object),
        "box": box,
        "ink_density": ink,
    }
    for k in range(64):
        columns[f"px_{k // 8}_{k % 8}"] = pixels[:, k]
    columns[DEMO_LABEL_COLUMN] = labels
    frame = pd.DataFrame(columns)
    for name in ("form_id", "scan_batch", "box", DEMO_LABEL_COLUMN):
        frame[name] = frame[name].astype("str").where(frame[name].notna(), None)
    return frame


def write_demo_table(path: str | os.PathLike[str], *,
                     n_labeled: int = DEMO_N_LABELED) -> Path:
    """Write :func:`demo_table` to ``path`` (``.parquet`` as Parquet, else CSV), atomically."""
    path = Path(path)
    frame = demo_table(n_labeled=n_labeled)
    if path.suffix.lower() in (".parquet", ".pq"):
        with atomic_path(path) as tmp:
            frame.to_parquet(tmp, index=False)
    else:
        sep = "\t" if path.suffix.lower() == ".tsv" else ","
        atomic_write_text(path, frame.to_csv(index=False, sep=sep, lineterminator="\n"))
    return path
