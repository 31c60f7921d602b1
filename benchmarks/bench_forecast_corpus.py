"""Benchmark: the plan's forecast judged leave-one-table-out on the corpus of real curves.

For every task of ``experiments/curves/corpus`` (real tables, simulated users with 100, 200 and
400 labels running the default study, the truth measured with every label on rows no user
labeled), each forecaster predicts the metric at 1, 1.5, 2, 3 and 4 times the user's largest
measured budget, for every method of the user's study:

- ``last``: the last measured value (the naive baseline; its interval is the measured mean's
  own t-interval at the largest budget);
- ``power``: a plain power law fitted to the curve (its interval as ``last``'s);
- ``today``: the plan's forecast without the corpus (``forecast_all(prior=None)``: curve
  families weighted by backtests and calibrated by the study's own backtests, then the
  level-only James-Stein shrinkage of the methods, as this code has it);
- ``corpus``: the continuation learned from the OTHER tables of the corpus
  (``semisup.plan._continuation``: shift, gain on the measured slope, spread and interval
  scale per ratio), fitted again for every left-out table; its stated probabilities carry
  the decision margin learned on the other tables' decisions (``loto.learn_margin``), and the
  plan table repeats it without the margin (``corpus, no margin``).

Printed per ratio and forecaster: mean absolute error, bias (predicted - truth), coverage of
the 90% intervals and their median half-width; every table weighs the same (its curves are
averaged first). The error at 1x is the floor (the measurement noise at the user's largest
budget). Then plans: for each user, targets set from the truth (reachable first at 1.5x, 2x
or 3x; reachable with the labels owned; unreachable by 4x), and the decision each forecaster
leads to at confidence 0.8: the cheapest (method, budget) whose probability of meeting the
target is at least 0.8. Printed: the share of "buy" decisions whose chosen method truly
reached the target at the chosen budget (against the stated 0.8), the median of chosen budget
/ truly cheapest budget, "buy" for unreachable targets and "do not buy" for reachable ones.

    python benchmarks/bench_forecast_corpus.py                  # the whole corpus
    python benchmarks/bench_forecast_corpus.py --work /tmp/fc   # cache today's forecasts

Goals (issue: forecasts that beat the naive answer): MAE at 2x <= 0.8 x last's, at 4x <=
0.7 x last's; coverage 0.85-0.95 at every ratio; median half-width at 2x <= 0.05; buy
decisions reach the target 0.75-0.9 of the time; chosen / cheapest budget median <= 1.3;
buy for unreachable targets <= 5%.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "experiments" / "curves"))

from corpus_io import load_tasks, user_studies  # noqa: E402
from loto import (  # noqa: E402
    FORECASTERS,
    GOALS,
    RATIOS,
    corpus_forecasts,
    forecast_rows,
    forecast_table,
    loto_margins,
    loto_priors,
    plan_summary,
    predict_last,
    predict_power,
    today_forecasts,
)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--corpus", type=Path, default=ROOT / "experiments" / "curves" / "corpus")
    ap.add_argument("--work", type=Path, default=None, help="cache of today's forecasts")
    ap.add_argument("--no-today", action="store_true", help="skip the slow pre-corpus forecast")
    ap.add_argument("--json", type=Path, default=None, help="write the numbers here too")
    args = ap.parse_args()
    t0 = time.perf_counter()
    if args.work:
        args.work.mkdir(parents=True, exist_ok=True)
    studies = [us for t in load_tasks(args.corpus) for us in user_studies(t) if us.curves]
    names = sorted({us.task for us in studies})
    if len(names) < 4:
        print(f"only {len(names)} tables in {args.corpus}; need at least 4", file=sys.stderr)
        return 2
    priors = loto_priors(studies)
    preds: dict[str, dict] = {f: {} for f in FORECASTERS}
    for us in studies:
        for c in us.curves:
            key = (us.task, us.user, c.method)
            preds["last"][key] = predict_last(c, us.user)
            preds["power"][key] = predict_power(c, us.user)
        for m, p in corpus_forecasts(us, priors[us.task]).items():
            preds["corpus"][(us.task, us.user, m)] = p
        if not args.no_today:
            for m, p in today_forecasts(us, args.work).items():
                preds["today"][(us.task, us.user, m)] = p
    # the decision margin of each table, learned on the other tables' decisions
    margins = loto_margins(studies, preds["corpus"])
    preds["corpus, no margin"] = preds["corpus"]
    preds["corpus"] = {k: p.with_margin(margins[k[0]]) for k, p in preds["corpus"].items()}
    used = [f for f in FORECASTERS if preds[f]]
    table = forecast_table(forecast_rows(studies, {f: preds[f] for f in used}), used)
    n_curves = sum(len(us.curves) for us in studies)
    values, counts = np.unique(list(margins.values()), return_counts=True)
    print(f"corpus: {len(names)} tables, {len(studies)} user studies, {n_curves} curves; "
          "every number leaves the table out of what it is judged on; each table weighs the "
          "same")
    print("decision margins learned leaving each table out: " + ", ".join(
        f"{v:g} ({c} tables)" for v, c in zip(values, counts, strict=True)))
    print()
    print("| ratio | forecaster | MAE | bias | coverage 90% | median half-width | MAE / last |")
    print("|---:|---|---:|---:|---:|---:|---:|")
    for r in RATIOS:
        for f in used:
            if (f, r) in table:
                x = table[(f, r)]
                print(f"| {r:g}x | {f} | {x['mae']:.4f} | {x['bias']:+.4f} | "
                      f"{x['coverage']:.2f} | {x['half']:.3f} | {x['rel_last']:.2f} |")
    plans, resolved = {}, {}
    for title, resolve, out in (("all targets", 0.0, plans),
                                ("targets the truth resolves: the step that makes a 'buy' "
                                 "target reachable first exceeds one standard error of the "
                                 "truths' own noise", 1.0, resolved)):
        print(f"\nplans, {title}:\n")
        print("| forecaster | decisions | buy decisions | reached target | chosen/cheapest "
              "(median) | buy for unreachable | do-not-buy for reachable |")
        print("|---|---:|---:|---:|---:|---:|---:|")
        for f in [*used, "corpus, no margin"]:
            x = out[f] = plan_summary(studies, preds[f], resolve)
            print(f"| {f} | {x['decisions']} | {x['buys']} | {x['hit']:.2f} | "
                  f"{x['budget_ratio']:.2f} | {x['buy_unreachable']:.2f} of "
                  f"{x['n_unreachable']} | {x['no_buy_reachable']:.2f} of {x['n_reachable']} |")
    g = GOALS
    c2, c4 = table.get(("corpus", 2.0), {}), table.get(("corpus", 4.0), {})
    covs = [table[("corpus", r)]["coverage"] for r in RATIOS if ("corpus", r) in table]
    pc = plans.get("corpus", {})
    print()
    print("goals (corpus forecaster): "
          f"MAE 2x / last {c2.get('rel_last', np.nan):.2f} (<= {g['mae_2x']}), "
          f"MAE 4x / last {c4.get('rel_last', np.nan):.2f} (<= {g['mae_4x']}), "
          f"coverage {min(covs, default=np.nan):.2f}-{max(covs, default=np.nan):.2f} "
          f"({g['cover'][0]}-{g['cover'][1]} at every ratio), "
          f"half-width 2x {c2.get('half', np.nan):.3f} (<= {g['half_2x']}), "
          f"buy hits {pc.get('hit', np.nan):.2f} ({g['hit'][0]}-{g['hit'][1]}), "
          f"chosen/cheapest {pc.get('budget_ratio', np.nan):.2f} (<= {g['budget_ratio']}), "
          f"buy for unreachable {pc.get('buy_unreachable', np.nan):.2f} "
          f"(<= {g['buy_unreachable']})")
    print(f"\n{time.perf_counter() - t0:.0f} s")
    if args.json:
        args.json.write_text(json.dumps({"tables": names, "forecast": {
            f"{f}@{r:g}": v for (f, r), v in table.items()}, "plans": plans,
            "plans_resolved": resolved,
            "margins": margins}, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
