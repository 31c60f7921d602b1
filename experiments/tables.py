"""Write the experiment tables from data sets scikit-learn ships (real open data).

Each table keeps every row's features; a seeded, stratified subset keeps its label and the
rest get an empty label cell, so the study sees a mostly unlabeled table as in practice.

    python experiments/tables.py            # writes experiments/<name>/<name>.csv
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent

#: name -> (loader, labeled rows kept, label column)
TABLES = {
    "digits": ("load_digits", 400, "digit"),
    "breast_cancer": ("load_breast_cancer", 200, "diagnosis"),
    "wine": ("load_wine", 90, "cultivar"),
}


def make_table(name: str, seed: int = 0) -> pd.DataFrame:
    import sklearn.datasets as sd

    loader, n_labeled, label_column = TABLES[name]
    bunch = getattr(sd, loader)()
    X, y = bunch.data, bunch.target
    names = [str(n) for n in bunch.target_names]
    cols = [str(c).replace(" ", "_") for c in getattr(bunch, "feature_names",
                                                     [f"x{j}" for j in range(X.shape[1])])]
    frame = pd.DataFrame(X, columns=cols)
    rng = np.random.default_rng(seed)
    # stratified choice of the rows that keep their label
    keep = []
    for c in np.unique(y):
        idx = np.flatnonzero(y == c)
        k = int(round(n_labeled * len(idx) / len(y)))
        keep.extend(rng.choice(idx, k, replace=False).tolist())
    label = pd.Series([None] * len(y), dtype=object)
    label.iloc[keep] = [names[v] for v in y[keep]]
    frame.insert(0, "row_id", [f"{name}-{i:05d}" for i in range(len(y))])
    frame[label_column] = label
    return frame


def write_table(name: str) -> Path:
    path = HERE / name / f"{name}.csv"
    path.parent.mkdir(parents=True, exist_ok=True)
    make_table(name).to_csv(path, index=False)
    return path


if __name__ == "__main__":
    for n in sys.argv[1:] or list(TABLES):
        print(write_table(n))
