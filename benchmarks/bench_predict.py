"""Time and peak memory of `semisup predict` on 1,000,000 rows x 50 columns.

Builds an invented table (45 numeric columns with 0.1% missing cells, 5 categorical columns,
an id column; 3 classes from a hidden linear rule), fits two models on a 20,000-row sample
(supervised-logreg, flagged by the VAE's ELBO; latent-logreg on the VAE latent means), and
runs each step in a fresh subprocess, recording wall time and peak resident memory (VmHWM,
interpreter and libraries included):

    bare         the fitted estimator's predict_proba on the whole array already in memory
                 (the features precomputed, untimed): the plain reference
    in-memory    read the whole file with pandas, encode, stage, predict_proba, ELBO at once
    semisup      semisup.model.predict_file: chunked read, checks, encode, stage, classifier,
                 ELBO flag, chunked write of the output CSV

and prints the ratios semisup / bare and semisup / in-memory measured in the same run, on
process CPU seconds of the timed part (``time.process_time``, all threads): on a machine
shared with other jobs wall time mostly measures the queue for a core.

    PYTHONPATH=. nice -n 10 python benchmarks/bench_predict.py                 # 1,000,000 rows
    PYTHONPATH=. python benchmarks/bench_predict.py --rows 100000 --formats parquet

``--methods`` picks other models (the graph methods predict through a k-nearest-neighbour
search over the rows they were fitted on: the labeled rows plus ``--unlabeled`` unlabeled
rows, the final model's cap); ``--steps`` the steps run.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

_CHILD = r"""
import json, sys, time
def peak_mb():
    with open("/proc/self/status") as handle:
        for line in handle:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
what, model_dir, data, out, chunk = sys.argv[1:6]
import numpy as np, pandas as pd
from semisup.model import load_model, predict_file
model = load_model(model_dir)
result = {}
if what == "semisup":
    t, c = time.perf_counter(), time.process_time()
    s = predict_file(model, data, out, chunk_rows=int(chunk))
    result["seconds"] = time.perf_counter() - t
    result["cpu_seconds"] = time.process_time() - c
    result["flagged"] = s.n_flagged
else:
    from semisup.data import read_table
    t0, c0 = time.perf_counter(), time.process_time()
    frame = read_table(data, text_columns=["record_id"])
    X = model.encode(frame)
    if what == "bare":
        Z = model._features(X)
        t, c = time.perf_counter(), time.process_time()
        model.estimator.predict_proba(Z)
        result["seconds"] = time.perf_counter() - t
        result["cpu_seconds"] = time.process_time() - c
    else:
        proba = model._proba_encoded(X)
        flags = model.density_scores(X) < model.manifest["density"]["threshold"]
        result["seconds"] = time.perf_counter() - t0
        result["cpu_seconds"] = time.process_time() - c0
result["peak_mb"] = peak_mb()
print(json.dumps(result))
"""


def make_table(n_rows: int, seed: int) -> tuple[pd.DataFrame, np.ndarray]:
    """Invented benchmark data: 45 numeric + 5 categorical columns and a hidden 3-class rule."""
    rng = np.random.default_rng(seed)
    num = rng.normal(size=(n_rows, 45))
    cats = rng.integers(0, 6, size=(n_rows, 5))
    w = np.random.default_rng(99).normal(size=(10, 3))
    y = np.argmax(num[:, :10] @ w + 0.3 * cats[:, :3] @ np.eye(3), axis=1)
    num[rng.random(num.shape) < 0.001] = np.nan
    frame = pd.DataFrame(num, columns=[f"m{i:02d}" for i in range(45)])
    for j in range(5):
        frame[f"c{j}"] = np.asarray(list("uvwxyz"), dtype=object)[cats[:, j]]
    frame.insert(0, "record_id", [f"r{seed}-{i}" for i in range(n_rows)])
    return frame, y


def build_models(folder: Path, names=("supervised-logreg", "latent-logreg"),
                 n_unlabeled: int = 18_000) -> dict[str, Path]:
    import warnings

    from semisup.data import dataset_from_frame
    from semisup.methods import get_method
    from semisup.model import FittedModel, save_model
    from semisup.model._fit import FLAG_QUANTILE
    from semisup.pretrain import fit_representation

    frame, y = make_table(20_000, seed=1)
    frame["outcome"] = np.asarray(list("pqr"), dtype=object)[y]
    frame.loc[2_000:, "outcome"] = None
    frame = frame.iloc[:2_000 + n_unlabeled]
    ds = dataset_from_frame(frame, label_column="outcome", id_column="record_id")
    vae, _ = fit_representation("vae", ds.X, blocks=ds.blocks, params={"max_epochs": 10})
    threshold = float(np.quantile(vae.score_samples(ds.X), FLAG_QUANTILE))
    paths = {}
    for name in names:
        m = get_method(name)
        stage = vae if m.representation == "vae" else None
        X = ds.X if stage is None else np.asarray(stage.transform(ds.X), dtype=np.float32)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            est = m.build(dict(m.default_params), 0).fit(X, ds.y)
        manifest = {
            "method": name, "classes": list(ds.class_names), "id_column": "record_id",
            "label_column": "outcome", "encoder": ds.encoder.to_state(),
            "features": [{"column": c, "kind": k} for c, k in ds.encoder.kinds_.items()
                         if k in ("numeric", "categorical")],
            "density": {"threshold": threshold, "kind": "vae"},
        }
        paths[name] = save_model(FittedModel(manifest, ds.encoder, est, stage, vae),
                                 folder / name)
    return paths


def run_child(what: str, model: Path, data: Path, out: Path, chunk: int) -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.run([sys.executable, "-c", _CHILD, what, str(model), str(data), str(out),
                           str(chunk)], env=env, capture_output=True, text=True, check=False)
    if proc.returncode:
        raise RuntimeError(proc.stderr[-2000:])
    return json.loads(proc.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--chunk-rows", type=int, default=100_000)
    parser.add_argument("--formats", default="parquet,csv")
    parser.add_argument("--workdir", type=Path, default=None)
    parser.add_argument("--methods", default="supervised-logreg,latent-logreg")
    parser.add_argument("--unlabeled", type=int, default=18_000,
                        help="unlabeled rows the models are fitted with (at most 18,000)")
    parser.add_argument("--steps", default="bare,in-memory,semisup")
    args = parser.parse_args()
    work = args.workdir or Path(tempfile.mkdtemp(prefix="bench-predict-"))
    work.mkdir(parents=True, exist_ok=True)
    t = time.perf_counter()
    names = tuple(args.methods.split(","))
    steps = tuple(args.steps.split(","))
    if all((work / n / "manifest.json").is_file() for n in names):
        models = {n: work / n for n in names}  # same seeds: the same models as a refit
    else:
        models = build_models(work, names, args.unlabeled)
        print(f"models fitted in {time.perf_counter() - t:.1f} s", flush=True)
    frame, _ = make_table(args.rows, seed=2)
    files = {}
    for fmt in args.formats.split(","):
        path = work / f"table.{fmt}"
        if not path.exists():
            t = time.perf_counter()
            frame.to_parquet(path, index=False) if fmt == "parquet" else frame.to_csv(
                path, index=False)
            print(f"wrote {path} ({path.stat().st_size / 1e6:.0f} MB) in "
                  f"{time.perf_counter() - t:.1f} s", flush=True)
        files[fmt] = path
    del frame
    print(f"\n{args.rows:,} rows x 50 columns, chunks of {args.chunk_rows:,} rows, "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} at the start\n")
    print("| model | format | step | wall s | CPU s | peak MB | CPU x bare | CPU x in-memory |")
    print("|---|---|---|---:|---:|---:|---:|---:|")
    for name, model in models.items():
        for fmt, path in files.items():
            res = {w: run_child(w, model, path, work / "pred.csv", args.chunk_rows)
                   for w in steps}

            def ratio(r, ref, res=res):
                return f"{r['cpu_seconds'] / res[ref]['cpu_seconds']:.2f}" if ref in res else "-"

            for w, r in res.items():
                print(f"| {name} | {fmt} | {w} | {r['seconds']:.2f} | {r['cpu_seconds']:.2f} | "
                      f"{r['peak_mb']:.0f} | {ratio(r, 'bare')} | {ratio(r, 'in-memory')} |",
                      flush=True)
    print(f"\nload average {os.getloadavg()[0]:.1f} at the end")

if __name__ == "__main__":
    main()
