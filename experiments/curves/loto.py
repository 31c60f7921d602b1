"""Leave-one-table-out evaluation of curve forecasts on the corpus (shared by
``fit_prior.py`` and ``benchmarks/bench_forecast_corpus.py``).

Forecasters predict, for every curve of a simulated user's study, the metric at 1, 1.5, 2, 3
and 4 times its largest measured budget, with a 90% interval and a probability of meeting a
target; ``loto_priors`` fits the corpus continuation once per table on the other tables only.
Plans are the decisions the forecasts lead to at confidence 0.8 for targets set from the
truth (``targets_for``).
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
from corpus_io import Curve, UserStudy
from scipy.stats import norm

from semisup.plan._continuation import (
    continue_curve,
    decision_discount,
    fit_prior,
    summarize_curve,
)
from semisup.plan._honest import shrink_toward_mean

RATIOS = (1.0, 1.5, 2.0, 3.0, 4.0)
FIT_RATIOS = (1.0, 1.5, 2.0, 3.0, 4.0, 8.0)
CONFIDENCE = 0.8
INTERVAL = 0.9
Z90 = norm.ppf(0.5 + INTERVAL / 2)
FORECASTERS = ("last", "power", "today", "corpus")
#: Decision margins tried when learning one (standard deviations of the forecast; our grid).
MARGINS = tuple(round(0.05 * i, 2) for i in range(21))
GOALS = {"mae_2x": 0.8, "mae_4x": 0.7, "cover": (0.85, 0.95), "half_2x": 0.05,
         "hit": (0.75, 0.9), "budget_ratio": 1.3, "buy_unreachable": 0.05}


# ----------------------------------------------------------------- the forecasters
class Prediction:
    """Mean, interval and probability of meeting a target at each ratio of one curve."""

    def __init__(self, mean, low, high, prob_fn, normal=None):
        self.mean, self.low, self.high = (np.asarray(v, float) for v in (mean, low, high))
        self.prob = prob_fn          # (ratio index, target) -> probability
        self._normal = normal        # (mean, sd, scale) of a normal forecast, else None

    @classmethod
    def normal(cls, mean, sd, scale, margin: float = 0.0):
        """The normal whose 90% interval is ``mean +- scale * sd``; its probability of
        meeting a target is lowered by ``margin`` standard deviations, as the plan's is by
        the prior's decision margin (``decision_discount``)."""
        mean, sd, scale = (np.asarray(v, float) for v in (mean, sd, scale))
        half = scale * sd
        eff = sd * scale / Z90
        loc = mean - decision_discount(sd, scale, margin)

        def prob(i, t):
            return float(norm.sf(t, loc=loc[i], scale=max(eff[i], 1e-6)))
        return cls(mean, mean - half, mean + half, prob, normal=(mean, sd, scale))

    def with_margin(self, margin: float) -> Prediction:
        """The same forecast with the decision margin ``margin`` (normal forecasts only)."""
        if self._normal is None:
            raise ValueError("only a normal forecast takes a decision margin")
        return Prediction.normal(*self._normal, margin=margin)


def summary(c: Curve, eval_rows: float):
    return summarize_curve(c.n, c.metric, eval_rows=eval_rows)


def predict_last(c: Curve, eval_rows: float) -> Prediction:
    s = summary(c, eval_rows)
    k = len(RATIOS)
    return Prediction.normal([s.last] * k, [s.last_se] * k, [Z90] * k)


def predict_power(c: Curve, eval_rows: float) -> Prediction:
    from semisup.plan import fit_learning_curve

    s = summary(c, eval_rows)
    try:
        fit = fit_learning_curve(c.n, 1 - c.metric, kind="power_law")
        mean = 1 - fit.predict(np.array(RATIOS) * c.n_max)
    except Exception:  # a curve a power law cannot fit: flat
        mean = np.full(len(RATIOS), s.last)
    return Prediction.normal(mean, [s.last_se] * len(RATIOS), [Z90] * len(RATIOS))


def corpus_forecasts(us: UserStudy, prior, *, shrink: bool = True,
                     tau2_floor: float = 0.0) -> dict[str, Prediction]:
    """The package's forecast of every method of one user study: the continuation, then the
    winner's-curse step of ``semisup.plan._pipeline._shrink`` (each method's level at the
    largest budget shrunk toward the methods' mean by the James-Stein factor of its own
    noise; the shift moves its whole curve). ``tau2_floor``: see ``shrink_toward_mean``."""
    u = np.log2(np.array(RATIOS))
    summ = {c.method: summary(c, us.user) for c in us.curves}
    cont = {m: continue_curve(s, prior, u) for m, s in summ.items()}
    shifts = dict.fromkeys(summ, 0.0)
    if shrink and len(summ) >= 4:
        methods = sorted(summ)
        mu = np.array([cont[m][0][0] for m in methods])
        shrunk, _, _ = shrink_toward_mean(mu, np.array([summ[m].last_se ** 2
                                                        for m in methods]),
                                          tau2_floor=tau2_floor)
        shifts = {m: float(shrunk[i] - mu[i]) for i, m in enumerate(methods)}
    return {m: Prediction.normal(np.clip(mean + shifts[m], 0, 1), sd, scale,
                                 margin=prior.decision_margin)
            for m, (mean, sd, scale) in cont.items()}


def today_forecasts(us: UserStudy, work: Path | None) -> dict[str, Prediction]:
    """The plan's forecast without the corpus prior (the curve families, ``prior=None``) of
    every method of one user study (cached in work)."""
    from semisup.plan import probability_meets
    from semisup.plan._pipeline import forecast_all

    key = hashlib.sha256(us.cells.to_csv(index=False).encode()).hexdigest()[:16]
    cache = work / f"families-{us.task}-{us.user}-{key}.npz" if work else None
    if cache is not None and cache.exists():
        z = np.load(cache, allow_pickle=False)
        methods = [str(m) for m in z["methods"]]
        arr = {m: (z["mean"][i], z["low"][i], z["high"][i], z["samples"][i])
               for i, m in enumerate(methods)}
    else:
        fc = forecast_all(us.cells, "accuracy", ["accuracy"], prior=None, seed=0,
                          interval=INTERVAL,
                          n_boot=200, eval_rows=None, eval_floor_rows=us.user,
                          labels_owned=us.user,
                          option_args={"target": 0.5, "confidence": CONFIDENCE,
                                       "label_price": 1.0, "labels_owned": us.user,
                                       "cost_per_round": 0.0})
        arr = {}
        for (method, _s, _m), band in fc.bands.items():
            n_max = fc.models[(method, _s)].levels[-1]
            idx = [int(np.argmin(np.abs(band.grid - round(r * n_max)))) for r in RATIOS]
            arr[method] = (1 - band.point[idx], 1 - band.high[idx], 1 - band.low[idx],
                           1 - band.samples[:, idx])
        if cache is not None:
            methods = sorted(arr)
            np.savez(cache, methods=np.array(methods),
                     mean=np.array([arr[m][0] for m in methods]),
                     low=np.array([arr[m][1] for m in methods]),
                     high=np.array([arr[m][2] for m in methods]),
                     samples=np.array([arr[m][3] for m in methods]))
    out = {}
    for m, (mean, low, high, samples) in arr.items():
        def prob(i, t, samples=samples):
            return float(probability_meets(samples[:, i:i + 1], t)[0])
        out[m] = Prediction(mean, low, high, prob)
    return out


# ----------------------------------------------------------------- scoring
def forecast_rows(studies: list[UserStudy], preds: dict) -> list[dict]:
    rows = []
    for us in studies:
        for c in us.curves:
            for name in preds:
                p = preds[name].get((us.task, us.user, c.method))
                if p is None:
                    continue
                for i, r in enumerate(RATIOS):
                    if r not in c.truth:
                        continue
                    t, _ = c.truth[r]
                    rows.append({"task": us.task, "forecaster": name, "ratio": r,
                                 "err": p.mean[i] - t,
                                 "covered": bool(p.low[i] - 1e-9 <= t <= p.high[i] + 1e-9),
                                 "half": (p.high[i] - p.low[i]) / 2})
    return rows


def task_mean(rows, f) -> float:
    by: dict[str, list[float]] = {}
    for r in rows:
        by.setdefault(r["task"], []).append(f(r))
    return float(np.mean([np.mean(v) for v in by.values()])) if by else float("nan")


def targets_for(us: UserStudy, resolve: float = 0.0) -> list[tuple[str, float, float | None]]:
    """(kind, target, truly cheapest ratio or None) from the truth of the best method.

    ``resolve`` > 0 keeps a "buy" target only where the truth's step that makes it reachable
    first at that ratio exceeds ``resolve`` times the step's standard error (the truths' own
    evaluation noise): a step within that noise does not show which budget is truly the
    cheapest, and whether a plan "reached" such a target is a coin flip of the yardstick."""
    best, best_se = {}, {}
    for r in RATIOS:
        vals = [c.truth[r] for c in us.curves if r in c.truth]
        if len(vals) == len(us.curves) and vals:
            best[r], best_se[r] = max(vals)
    if 1.0 not in best:
        return []
    out = [("owned", best[1.0] - 0.01, 1.0)]
    prev, prev_se = best[1.0], best_se[1.0]
    for r in (1.5, 2.0, 3.0):
        if r not in best:
            break
        step = best[r] - prev
        if step >= max(0.004, resolve * float(np.hypot(best_se[r], prev_se))):
            out.append(("buy", (best[r] + prev) / 2, r))
        if best[r] > prev:
            prev, prev_se = best[r], best_se[r]
    top = max(best.values())
    if max(best) >= 4.0:
        out.append(("unreachable", top + 0.01, None))
    return out


def decide(us: UserStudy, preds: dict, target: float):
    """Cheapest (ratio, method) with probability >= CONFIDENCE, or None (do not buy); of
    equally cheap ones the simplest, then the most probable (the plan's rule,
    ``semisup.plan._choose.simplicity``)."""
    from semisup.plan._choose import simplicity
    from semisup.plan._unlabeled import method_families

    prefer = simplicity(method_families(), us.cells)
    n_max = max(c.n_max for c in us.curves)
    best = None
    for c in us.curves:
        p = preds.get((us.task, us.user, c.method))
        if p is None:
            continue
        simple = prefer(c.method)
        for i, r in enumerate(RATIOS):
            prob = p.prob(i, target)
            if prob >= CONFIDENCE:
                cost = max(0.0, r * n_max - us.user)
                key = (cost, r, simple, -prob)
                if best is None or key < best[0]:
                    best = (key, r, c)
                break
    return None if best is None else (best[1], best[2])


def plan_rows(studies: list[UserStudy], preds: dict, resolve: float = 0.0) -> list[dict]:
    rows = []
    for us in studies:
        n_max = max(c.n_max for c in us.curves)
        for kind, t, cheapest in targets_for(us, resolve):
            d = decide(us, preds, t)
            buy = d is not None and d[0] * n_max > us.user
            hit = None
            if d is not None and d[0] in d[1].truth:
                hit = d[1].truth[d[0]][0] >= t
            rows.append({"task": us.task, "kind": kind, "buy": buy, "hit": hit,
                         "chosen": None if d is None else d[0], "cheapest": cheapest})
    return rows


def fit_inputs(studies: list[UserStudy]):
    """Every curve's summary, truths and their standard errors at ``FIT_RATIOS``, and its
    table: what ``fit_prior`` takes."""
    curves = [(us, c) for us in studies for c in us.curves]
    summ = [summary(c, us.user) for us, c in curves]
    truth = np.array([[c.truth.get(r, (np.nan, np.nan))[0] for r in FIT_RATIOS]
                      for _, c in curves])
    tse = np.array([[c.truth.get(r, (np.nan, np.nan))[1] for r in FIT_RATIOS]
                    for _, c in curves])
    return summ, truth, tse, np.array([us.task for us, _ in curves])


def loto_priors(studies: list[UserStudy]) -> dict:
    """Per table: the continuation prior fitted on every OTHER table's curves."""
    summ, truth, tse, groups = fit_inputs(studies)
    u_fit = np.log2(np.array(FIT_RATIOS))
    out = {}
    for name in sorted(set(groups)):
        keep = groups != name
        out[name] = fit_prior([s for s, k in zip(summ, keep, strict=True) if k], u_fit,
                              truth[keep], tse[keep], groups[keep])
    return out


def all_fit(studies: list[UserStudy], **kw):
    """The continuation prior fitted on every table (what the package ships)."""
    summ, truth, tse, groups = fit_inputs(studies)
    return fit_prior(summ, np.log2(np.array(FIT_RATIOS)), truth, tse, groups, **kw)


def forecast_table(rows: list[dict], forecasters) -> dict:
    """Per forecaster and ratio: MAE, bias, coverage (each table weighs the same), median
    half-width, and MAE relative to the last-value baseline."""
    out: dict = {}
    for r in RATIOS:
        base = None
        for f in forecasters:
            sub = [x for x in rows if x["forecaster"] == f and x["ratio"] == r]
            if not sub:
                continue
            mae = task_mean(sub, lambda x: abs(x["err"]))
            base = mae if f == "last" else base
            out[(f, r)] = {"mae": mae, "bias": task_mean(sub, lambda x: x["err"]),
                           "coverage": task_mean(sub, lambda x: float(x["covered"])),
                           "half": float(np.median([x["half"] for x in sub])),
                           "rel_last": mae / base if base else float("nan"),
                           "n": len(sub)}
    return out


def plan_summary(studies: list[UserStudy], preds: dict, resolve: float = 0.0) -> dict:
    """Decisions at the truth's targets: hits of buy decisions, chosen / cheapest budget,
    buy for unreachable targets, do-not-buy for targets that need a purchase
    (``resolve``: see ``targets_for``)."""
    return rows_summary(plan_rows(studies, preds, resolve))


def rows_summary(pr: list[dict]) -> dict:
    """``plan_summary`` of decisions already made."""
    buys = buy_rows(pr)
    ratio = [x["chosen"] / x["cheapest"] for x in pr
             if x["kind"] in ("buy", "owned") and x["chosen"] is not None]
    unre = [x for x in pr if x["kind"] == "unreachable"]
    reach = [x for x in pr if x["kind"] == "buy"]
    return {"decisions": len(pr), "buys": len(buys),
            "hit": float(np.mean([x["hit"] for x in buys])) if buys else float("nan"),
            "budget_ratio": float(np.median(ratio)) if ratio else float("nan"),
            "buy_unreachable": float(np.mean([x["buy"] for x in unre])) if unre
            else float("nan"), "n_unreachable": len(unre),
            "no_buy_reachable": float(np.mean([x["chosen"] is None or not x["buy"]
                                               for x in reach])) if reach else float("nan"),
            "n_reachable": len(reach)}


# ----------------------------------------------------------------- the decision margin
def buy_rows(rows: list[dict]) -> list[dict]:
    """The "buy" decisions of ``plan_rows`` whose hit is known (reachable targets only)."""
    return [x for x in rows if x["buy"] and x["hit"] is not None and x["kind"] != "unreachable"]


def margin_rows(studies: list[UserStudy], preds: dict) -> dict[float, list[dict]]:
    """``plan_rows`` of every table at every margin of ``MARGINS`` (``preds``: normal
    forecasts, without a margin)."""
    return {m: plan_rows(studies, {k: p.with_margin(m) for k, p in preds.items()})
            for m in MARGINS}


def learn_margin(by_margin: dict[float, list[dict]], *, leave_out: str | None = None,
                 confidence: float = CONFIDENCE) -> float:
    """The smallest margin whose "buy" decisions (pooled over the tables other than
    ``leave_out``) reached their targets at least ``confidence`` of the time; the largest
    margin tried when none does."""
    for m in sorted(by_margin):
        hits = [x["hit"] for x in buy_rows(by_margin[m]) if x["task"] != leave_out]
        if hits and float(np.mean(hits)) >= confidence:
            return float(m)
    return float(max(by_margin))


def loto_margins(studies: list[UserStudy], preds: dict) -> dict[str, float]:
    """Per table: the decision margin learned on every OTHER table's decisions. ``preds``
    are the leave-one-table-out forecasts without a margin (the other tables' forecasts came
    from priors fitted with this table among theirs: a second-order leak, as in stacking)."""
    by = margin_rows(studies, preds)
    return {t: learn_margin(by, leave_out=t) for t in sorted({us.task for us in studies})}
