"""Where does the study-vs-truth gap at the study's own largest budget come from?

For one table of ``benchmarks/bench_calibration.py`` (same 200 kept labels, same truth
design), run only the largest budget (160 labels: no extrapolation) of the user's study and
of the truth, for several seeds of the unsupervised stage (VAE) with everything else fixed
(same folds, draws, tuning seeds). Prints, per method and VAE seed, the study's mean over
its 5 folds, the truth's mean over its repeats, and the per-fold numbers, so that three
causes can be told apart:

a. VAE-seed variance: the spread of a latent method's accuracy over VAE seeds at fixed draws;
b. different rows: the unlabeled and representation rows each run gives a method;
c. evaluation/training-sample noise: the per-fold spread of the study (40 rows a fold).

    python experiments/calibration/study_truth_gap.py --table Benefits --work /tmp/gap \
        --vae-seeds 0,1,2 --jobs 2
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

import bench_calibration as bc  # noqa: E402


def _offset_fn(offset: int):
    from semisup.pretrain import fit_representation

    def fn(kind, X, **kw):
        kw["seed"] = int(kw["seed"]) + 7919 * offset  # another draw of the stage only
        return fit_representation(kind, X, **kw)

    return fn


def _cell_rows(cells: pd.DataFrame, run: str, vae: int) -> list[dict]:
    """The finished cells of one run as rows of the gap table."""
    return [{"vae": vae, "run": run, "method": r["method"], "repeat": int(r["repeat"]),
             "accuracy": float(r["accuracy"]), "n_eval": int(r["n_eval"]),
             "n_unlabeled_used": int(r.get("n_unlabeled_used") or 0)}
            for _, r in cells[cells["status"] == "ok"].iterrows()]


def main() -> int:
    from semisup.study import StudySpec, run_study

    ap = argparse.ArgumentParser()
    ap.add_argument("--table", default="Benefits")
    ap.add_argument("--work", required=True)
    ap.add_argument("--vae-seeds", default="0,1,2")
    ap.add_argument("--methods", default="")
    ap.add_argument("--budget", type=int, default=160)
    ap.add_argument("--truth-repeats", type=int, default=bc.TRUTH_REPEATS)
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--user-training", action="store_true",
                    help="also score models trained on the user's rows on 1,200 other rows")
    ap.add_argument("--user-rows", action="store_true",
                    help="also score truth-style models on the user's 200 labeled rows")
    ap.add_argument("--truth-transductive", type=int, default=1,
                    help="1: the truth's methods see its evaluation rows unlabeled (the "
                         "benchmark before this study); 0: they never do (new rows)")
    args = ap.parse_args()
    work = Path(args.work) / args.table
    work.mkdir(parents=True, exist_ok=True)
    full = bc.load_table(args.table)
    keep = bc.stratified_rows(full[bc.LABEL], bc.N_LABELED, seed=0)
    user = full.copy()
    user[bc.LABEL] = None
    user.loc[keep, bc.LABEL] = full.loc[keep, bc.LABEL]
    user_csv, truth_csv = work / "table.csv", work / "truth_table.csv"
    if not user_csv.exists():
        user.to_csv(user_csv, index=False)
    if not truth_csv.exists():
        full.to_csv(truth_csv, index=False)
    methods = [m for m in args.methods.split(",") if m]
    extra = {"methods": methods} if methods else {}
    b = args.budget
    n_eval = min(bc.N_EVAL, len(full) - 4 * b)
    rows = []
    for off in [int(s) for s in args.vae_seeds.split(",") if s]:
        fn = None if off == 0 else _offset_fn(off)
        spec = StudySpec.build(None, {"data": str(user_csv), "label_column": bc.LABEL,
                                      "id_column": bc.ID, "budgets": [b], **extra})
        st = run_study(spec, work / f"study_v{off}", jobs=args.jobs, progress=False,
                       representation_fn=fn).cells
        tspec = StudySpec.build(None, {
            "data": str(truth_csv), "label_column": bc.LABEL, "id_column": bc.ID,
            "budgets": [b], "repeats": args.truth_repeats, "evaluation": "holdout",
            "holdout": n_eval, "transductive": bool(args.truth_transductive), "seed": 1,
            **extra})
        tname = f"truth_v{off}" if args.truth_transductive else f"truth_nt_v{off}"
        tr = run_study(tspec, work / tname, jobs=args.jobs, progress=False,
                       representation_fn=fn).cells
        rows += _cell_rows(st, "study", off) + _cell_rows(tr, "truth", off)
    if args.user_rows:
        # c. Models trained as in the truth (160 labels drawn from the other rows) scored on
        # the user's 200 labeled rows: if they score like the study did, the gap is the
        # evaluation sample, not the protocol.
        rest_csv, user_rows_csv = work / "rest.csv", work / "user_rows.csv"
        if not rest_csv.exists():
            full.drop(index=keep).to_csv(rest_csv, index=False)
            full.loc[keep].to_csv(user_rows_csv, index=False)
        uspec = StudySpec.build(None, {
            "data": str(rest_csv), "label_column": bc.LABEL, "id_column": bc.ID,
            "budgets": [b], "repeats": args.truth_repeats, "test_data": str(user_rows_csv),
            "seed": 1, **extra})
        uc = run_study(uspec, work / "truth_on_user_rows", jobs=args.jobs,
                       progress=False).cells
        rows += _cell_rows(uc, "truth_on_user_rows", -1)
    if args.user_training:
        # Models trained as in the study (160 of the user's 200 labeled rows, the user's
        # unlabeled rows) scored on 1,200 other rows of the table (never in their inputs):
        # tells the user's training sample apart from the cross-fitted evaluation.
        others = np.setdiff1d(np.arange(len(full)), keep)
        ev_pos = others[bc.stratified_rows(full.loc[others, bc.LABEL].reset_index(drop=True),
                                           n_eval, seed=1)]
        tab_csv, ev_csv = work / "user_minus_eval.csv", work / "eval_rows.csv"
        if not tab_csv.exists():
            user.drop(index=ev_pos).to_csv(tab_csv, index=False)
            full.loc[ev_pos].to_csv(ev_csv, index=False)
        tspec = StudySpec.build(None, {
            "data": str(tab_csv), "label_column": bc.LABEL, "id_column": bc.ID,
            "budgets": [b], "repeats": args.truth_repeats, "test_data": str(ev_csv),
            **extra})
        tc = run_study(tspec, work / "user_training_on_new_rows", jobs=args.jobs,
                       progress=False).cells
        rows += _cell_rows(tc, "user_training_on_new_rows", -2)
        print("user's training rows (160 of 200, 3 draws), scored on 1,200 other rows:")
        print(pd.DataFrame(rows).query("run == 'user_training_on_new_rows'")
              .groupby("method")["accuracy"].mean().round(3).to_string())
    df = pd.DataFrame(rows)
    df.to_csv(work / "gap_cells.csv", index=False)
    mean = df.groupby(["method", "run", "vae"])["accuracy"].mean().unstack(["run", "vae"])
    pd.set_option("display.width", 200)
    print(f"{args.table}: accuracy at {b} labels, mean over repeats, by VAE seed offset")
    print(mean.round(3).to_string())
    if args.user_rows:
        print("truth-style training (3 repeats), scored on the user's 200 labeled rows:")
        print(df[df.run == "truth_on_user_rows"].groupby("method")["accuracy"].mean()
              .round(3).to_string())
    if not (df.run == "study").any():
        return 0
    s = df[df.run == "study"].groupby(["method", "vae"])["accuracy"].mean().unstack()
    t = df[df.run == "truth"].groupby(["method", "vae"])["accuracy"].mean().unstack()
    summary = pd.DataFrame({
        "study_mean": s.mean(axis=1), "study_sd_over_vae": s.std(axis=1, ddof=1),
        "truth_mean": t.mean(axis=1), "truth_sd_over_vae": t.std(axis=1, ddof=1),
        "gap_seed0": s[0] - t[0], "gap_avg": s.mean(axis=1) - t.mean(axis=1),
    })
    fold = df[df.run == "study"].groupby(["method", "vae"])["accuracy"].std(ddof=1)
    summary["study_fold_sd"] = fold.groupby("method").mean()
    summary["se_of_study_mean"] = summary["study_fold_sd"] / np.sqrt(5)
    print(summary.round(3).to_string())
    unl = df.groupby(["method", "run"])["n_unlabeled_used"].median().unstack()
    print("unlabeled rows given (median):")
    print(unl.to_string())
    (work / "gap_summary.json").write_text(summary.round(4).to_json(indent=1))
    print(json.dumps({"table": args.table, "n_eval_truth": n_eval}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
