"""Benchmark: is the plan's answer to "do the unlabeled rows help?" right on real tables?

For every simulated user of the curve corpus (``experiments/curves/corpus``: real tables,
users with 100, 200 and 400 labels running the default study, the truth measured with every
label revealed on rows no user labeled), the plan's comparison
(``semisup.plan._unlabeled.measured_gains``: at the user's largest measured budget, the best
method with a generative stage against the best supervised-only one, paired over the user's
draws, 90% t-interval) is set against the truth at the same budget: the same two groups of
methods (those the user ran), best of each by the truth's mean, difference of the means.
Nothing is fitted; nothing here was tuned on these tables.

Printed: per verdict ("helps", "hurts", "unclear"), how many users got it and how often the
truth agreed in sign; how often the 90% interval held the truth's difference; and the same
by user size.

    python benchmarks/bench_unlabeled_verdict.py [--corpus DIR]

Goals (ours, common practice, no source): a "helps" or "hurts" verdict has the truth's sign
at least 90% of the time (the interval is a 90% one), and the interval holds the truth's
difference 80-95% of the time (the truth's own noise, 3 repeats, widens the misses).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "experiments" / "curves"))

LEVEL = 0.9


def rows(tasks: list[dict]) -> pd.DataFrame:
    from corpus_io import truth_table

    from semisup.plan._unlabeled import (
        STAGE_FAMILIES,
        SUPERVISED_FAMILY,
        measured_gains,
        method_families,
    )

    families = method_families()
    out = []
    for task in tasks:
        truth = truth_table(task)
        for user in task["users"]:
            if "cells" not in user:
                continue
            cells = pd.DataFrame(user["cells"])
            cells = cells[(cells["status"] == "ok") & cells["accuracy"].notna()]
            gains = measured_gains(cells, "accuracy", families, level=LEVEL)
            if not gains:
                continue
            g = gains[-1]
            ran = set(cells["method"])
            t = truth[(truth["n_labels"] == g.n_labels) & truth["method"].isin(ran)]
            fam = t["method"].map(lambda m: families.get(m, ""))
            stage, sup = t[fam.isin(STAGE_FAMILIES)], t[fam == SUPERVISED_FAMILY]
            if stage.empty or sup.empty:
                continue
            true_gain = float(stage["mean"].max() - sup["mean"].max())
            out.append({"table": task["task"]["name"], "user": int(user["n_labeled"]),
                        "n_labels": g.n_labels, "verdict": g.verdict, "gain": g.gain,
                        "low": g.low, "high": g.high, "true_gain": true_gain})
    return pd.DataFrame(out)


def main(argv: list[str] | None = None) -> int:
    from corpus_io import load_tasks

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--corpus", type=Path,
                    default=ROOT / "experiments" / "curves" / "corpus")
    args = ap.parse_args(argv)
    tasks = load_tasks(args.corpus)
    r = rows(tasks)
    if r.empty:
        print(f"no user study in {args.corpus} has both kinds of method", file=sys.stderr)
        return 2
    r["agree"] = np.where(r["verdict"] == "helps", r["true_gain"] > 0,
                          np.where(r["verdict"] == "hurts", r["true_gain"] < 0, np.nan))
    ok = r["low"].notna()
    r["covered"] = (r["low"] <= r["true_gain"]) & (r["true_gain"] <= r["high"])
    print(f"corpus {args.corpus}: {r['table'].nunique()} tables, {len(r)} simulated users; "
          f"verdict at each user's largest measured budget ({r['n_labels'].min()}-"
          f"{r['n_labels'].max()} labels) against the truth there")
    print()
    print("| verdict | users | truth agrees in sign | mean measured gain | mean true gain |")
    print("|---|---:|---:|---:|---:|")
    for v in ("helps", "hurts", "unclear"):
        s = r[r["verdict"] == v]
        agree = f"{s['agree'].mean():.2f}" if v != "unclear" and len(s) else "-"
        if len(s):
            print(f"| {v} | {len(s)} | {agree} | {s['gain'].mean():+.4f} | "
                  f"{s['true_gain'].mean():+.4f} |")
        else:
            print(f"| {v} | 0 | - | - | - |")
    print()
    print(f"the {LEVEL:.0%} interval held the truth's difference for "
          f"{r.loc[ok, 'covered'].mean():.2f} of {int(ok.sum())} users")
    print("truth's difference above 0 (the stage truly ahead) for "
          f"{(r['true_gain'] > 0).mean():.2f} of the users; by more than 0.01 for "
          f"{(r['true_gain'] > 0.01).mean():.2f}, behind by more than 0.01 for "
          f"{(r['true_gain'] < -0.01).mean():.2f}")
    print()
    print("by user size (labels owned): users, helps / hurts / unclear, interval coverage")
    for u, s in r.groupby("user"):
        counts = s["verdict"].value_counts()
        print(f"  {u:>4}: {len(s):>3} users, {counts.get('helps', 0)} / "
              f"{counts.get('hurts', 0)} / {counts.get('unclear', 0)}, coverage "
              f"{s.loc[s['low'].notna(), 'covered'].mean():.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
