"""Are the 200 rows the calibration benchmark keeps on digits harder than the rest?

A reference outside the project: scikit-learn's LogisticRegression (fixed C=1, standardised
pixels) trained on 159 rows drawn at random from the rows NOT kept, scored on the 200 kept
rows (the study's evaluation rows) and on all other unused rows, over many seeds.

    python experiments/calibration/digits_kept_rows.py
"""

import sys
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.datasets import load_digits
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "benchmarks"))
from bench_calibration import N_LABELED, stratified_rows  # noqa: E402

X, y = load_digits(return_X_y=True)
keep = stratified_rows(pd.Series(y.astype(str)), N_LABELED, seed=0)
rest = np.setdiff1d(np.arange(len(y)), keep)
kept, other = [], []
for seed in range(40):
    rng = np.random.default_rng(seed)
    train = rng.choice(rest, 159, replace=False)
    test = np.setdiff1d(rest, train)
    model = make_pipeline(StandardScaler(), LogisticRegression(C=1.0, max_iter=2000))
    model.fit(X[train], y[train])
    kept.append((model.predict(X[keep]) == y[keep]).mean())
    other.append((model.predict(X[test]) == y[test]).mean())
kept, other = np.array(kept), np.array(other)
d = kept - other
print(f"kept 200 rows: {kept.mean():.4f}  other rows: {other.mean():.4f}  "
      f"difference {d.mean():+.4f} (sd over seeds {d.std(ddof=1):.4f}, 40 seeds)")

# The study's protocol with the same fixed model: 5 stratified folds of the 200 kept rows,
# train on 159 rows of the other four folds, score the held-out fold (every kept row scored).
from sklearn.model_selection import StratifiedKFold  # noqa: E402

cv = []
for seed in range(40):
    rng = np.random.default_rng(seed)
    hits = 0
    for tr, te in StratifiedKFold(5, shuffle=True, random_state=seed).split(keep, y[keep]):
        tr = rng.choice(tr, min(159, len(tr)), replace=False)
        model = make_pipeline(StandardScaler(), LogisticRegression(C=1.0, max_iter=2000))
        model.fit(X[keep[tr]], y[keep[tr]])
        hits += (model.predict(X[keep[te]]) == y[keep[te]]).sum()
    cv.append(hits / len(keep))
cv = np.array(cv)
print(f"cross-fitted inside the kept 200 (train 159, score the fold): {cv.mean():.4f} "
      f"(sd over fold seeds {cv.std(ddof=1):.4f}); trained on other rows, scored on the "
      f"kept 200: {kept.mean():.4f}")

# The same two measurements on the project's encoding (TableEncoder: median / IQR scaling,
# fitted on every row of the table as semisup.data does) instead of StandardScaler.
sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
from semisup.data._encoder import TableEncoder  # noqa: E402

frame = pd.DataFrame(X, columns=[f"px{i}" for i in range(X.shape[1])])
Z = TableEncoder().fit(frame).transform(frame)
kz, oz, cz = [], [], []
for seed in range(40):
    rng = np.random.default_rng(seed)
    train = rng.choice(rest, 159, replace=False)
    test = np.setdiff1d(rest, train)
    model = LogisticRegression(C=1.0, max_iter=3000).fit(Z[train], y[train])
    kz.append((model.predict(Z[keep]) == y[keep]).mean())
    oz.append((model.predict(Z[test]) == y[test]).mean())
    hits = 0
    for tr, te in StratifiedKFold(5, shuffle=True, random_state=seed).split(keep, y[keep]):
        tr = rng.choice(tr, min(159, len(tr)), replace=False)
        model = LogisticRegression(C=1.0, max_iter=3000).fit(Z[keep[tr]], y[keep[tr]])
        hits += (model.predict(Z[keep[te]]) == y[keep[te]]).sum()
    cz.append(hits / len(keep))
print(f"TableEncoder features: trained on other rows, kept 200 {np.mean(kz):.4f} vs other rows "
      f"{np.mean(oz):.4f}; cross-fitted inside the kept 200 {np.mean(cz):.4f}")
