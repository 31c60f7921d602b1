"""Fit the continuation prior on the whole curve corpus and write it into the package.

For each metric (accuracy, balanced accuracy, macro-F1) the prior of
``semisup.plan._continuation`` is fitted on every table of ``corpus/``; beside it, the
leave-one-table-out record of that kind of forecast (per extrapolation ratio: its mean
absolute error, the last-value baseline's, the coverage of its 90% intervals, the tables it
was judged on), which the plan states in one sentence. Writes
``semisup/plan/continuation.json`` atomically.

    python experiments/curves/fit_prior.py            # after the corpus grew
    python experiments/curves/fit_prior.py --check    # print, write nothing
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from dataclasses import replace
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

from corpus_io import CORPUS, load_tasks, user_studies  # noqa: E402
from loto import (  # noqa: E402
    CONFIDENCE,
    RATIOS,
    all_fit,
    corpus_forecasts,
    forecast_rows,
    forecast_table,
    learn_margin,
    loto_priors,
    margin_rows,
    predict_last,
    rows_summary,
)

OUT = ROOT / "semisup" / "plan" / "continuation.json"
METRICS = ("accuracy", "balanced_accuracy", "macro_f1")


def track_record(studies) -> tuple[dict, float, dict]:
    """Leave-one-table-out numbers of the corpus forecast and the last-value baseline; the
    decision margin learned on every table's leave-one-table-out decisions (what the shipped
    prior carries); and the decisions made with each table's margin learned without it."""
    priors = loto_priors(studies)
    preds: dict[str, dict] = {"last": {}, "corpus": {}}
    for us in studies:
        for c in us.curves:
            key = (us.task, us.user, c.method)
            preds["last"][key] = predict_last(c, us.user)
        for m, p in corpus_forecasts(us, priors[us.task]).items():
            preds["corpus"][(us.task, us.user, m)] = p
    table = forecast_table(forecast_rows(studies, preds), ("last", "corpus"))
    out = {}
    for r in RATIOS:
        if ("corpus", r) in table and ("last", r) in table:
            c, b = table[("corpus", r)], table[("last", r)]
            out[f"{r:g}"] = {"mae": round(c["mae"], 4), "mae_last": round(b["mae"], 4),
                             "bias": round(c["bias"], 4), "coverage": round(c["coverage"], 3),
                             "half_width": round(c["half"], 4), "n": c["n"]}
    by_margin = margin_rows(studies, preds["corpus"])
    tasks = sorted({us.task for us in studies})
    chosen = [x for t in tasks
              for x in by_margin[learn_margin(by_margin, leave_out=t)] if x["task"] == t]
    s = rows_summary(chosen)
    decisions = {"buys": s["buys"], "hit": round(s["hit"], 3), "confidence": CONFIDENCE}
    return out, learn_margin(by_margin), decisions


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--corpus", type=Path, default=CORPUS)
    ap.add_argument("--check", action="store_true", help="print the prior, write nothing")
    args = ap.parse_args()
    tasks = load_tasks(args.corpus)
    names = sorted(t["task"]["name"] for t in tasks)
    result = {"format": 1, "corpus": {"tables": names, "n_tables": len(names)}, "metrics": {}}
    for metric in METRICS:
        studies = [us for t in tasks for us in user_studies(t, metric) if us.curves]
        track, margin, decisions = track_record(studies)
        prior = replace(all_fit(studies, track=track,
                                source=f"experiments/curves corpus, {len(names)} tables"),
                        decision_margin=margin, decisions=decisions)
        result["metrics"][metric] = prior.to_dict()
        print(f"{metric}: " + ", ".join(
            f"{2 ** u:g}x shift {a:+.4f} gain {g:.3f} power gain {pg:.2f} level gain "
            f"{lg:.2f} spread {s:.4f} scale {q:.2f}"
            for u, a, g, pg, lg, s, q in zip(prior.u, prior.shift, prior.gain,
                                             prior.power_gain, prior.level_gain,
                                             prior.spread, prior.scale, strict=True)))
        for r, v in prior.track.items():
            print(f"  left-one-table-out at {r}x: MAE {v['mae']:.4f} (last value "
                  f"{v['mae_last']:.4f}), coverage {v['coverage']:.2f}, half-width "
                  f"{v['half_width']:.3f}")
        print(f"  decision margin {margin:g}; with each table's margin learned without it, "
              f"{decisions['hit']:.2f} of {decisions['buys']} buys reached the target")
    if not args.check:
        tmp = OUT.with_name(f".{OUT.name}.tmp")
        tmp.write_text(json.dumps(result, indent=1) + "\n")
        os.replace(tmp, OUT)
        print(f"wrote {OUT}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
