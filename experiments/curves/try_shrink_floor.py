"""Tried and left: a floor under the winner's-curse step's between-method variance.

The plan's James-Stein step (``semisup.plan._honest.shrink_toward_mean``) estimates the
spread of the methods' true levels from the study alone; with noisy evaluation it falls to 0
and every method's level is pulled onto their mean. Here the floor is learned from the
corpus: per table, the truth's variance between methods at 1x less its noise; for each
left-out table, ``mult`` times the mean over the other tables, passed to
``loto.corpus_forecasts`` as ``tau2_floor``. Printed per ``mult``: the
leave-one-table-out MAE and coverage at 1x / 2x / 4x and the plan decisions, as
``benchmarks/bench_forecast_corpus.py`` scores them (benchmarks/RESULTS.md, issue 18).

    python experiments/curves/try_shrink_floor.py
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1]))
sys.path.insert(0, str(HERE))

from corpus_io import load_tasks, user_studies  # noqa: E402
from loto import (  # noqa: E402
    corpus_forecasts,
    forecast_rows,
    forecast_table,
    loto_priors,
    plan_summary,
    predict_last,
)

MULTS = (0.0, 0.25, 0.5, 1.0)


def between_method_variance(studies) -> dict[str, float]:
    """Per table: the truth's variance between methods at 1x, less its noise (>= 0)."""
    per: dict[str, list[float]] = {}
    for us in studies:
        tr = [c.truth[1.0] for c in us.curves if c.truth.get(1.0)]
        if len(tr) >= 4:
            m = np.array([t[0] for t in tr])
            se = np.array([t[1] for t in tr])
            per.setdefault(us.task, []).append(max(m.var(ddof=1) - np.mean(se ** 2), 0.0))
    return {k: float(np.mean(v)) for k, v in per.items()}


def main() -> int:
    studies = [us for t in load_tasks() for us in user_studies(t) if us.curves]
    spread = between_method_variance(studies)
    sd = np.sqrt(list(spread.values()))
    print(f"{len(spread)} tables; truth's sd between methods at 1x: median {np.median(sd):.4f}, "
          f"root-mean-square {np.sqrt(np.mean(sd ** 2)):.4f}")
    priors = loto_priors(studies)
    for mult in MULTS:
        preds: dict[str, dict] = {"last": {}, "corpus": {}}
        for us in studies:
            floor = mult * float(np.mean([v for k, v in spread.items() if k != us.task]))
            for c in us.curves:
                preds["last"][(us.task, us.user, c.method)] = predict_last(c, us.user)
            for m, p in corpus_forecasts(us, priors[us.task], tau2_floor=floor).items():
                preds["corpus"][(us.task, us.user, m)] = p
        t = forecast_table(forecast_rows(studies, preds), ["last", "corpus"])
        ps = plan_summary(studies, preds["corpus"])
        print(f"floor x{mult:g}: " + "; ".join(
            f"{r:g}x MAE {t[('corpus', r)]['mae']:.4f} ({t[('corpus', r)]['rel_last']:.2f} of "
            f"last) coverage {t[('corpus', r)]['coverage']:.2f}" for r in (1.0, 2.0, 4.0))
            + f" | buys {ps['buys']}, reached {ps['hit']:.2f}, chosen/cheapest "
            f"{ps['budget_ratio']:.2f}, buy for unreachable {ps['buy_unreachable']:.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
