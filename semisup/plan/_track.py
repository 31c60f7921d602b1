"""The plans' track record: what each earlier plan forecast against what was measured since.

Pure functions (no I/O). An earlier plan's forecast of a curve (method, strategy, the plan's
metric) counts at every budget the study measures now that lay beyond the largest budget
measured when the plan was made (``measured_up_to`` in the plan): there the plan forecast and
the study has since measured. Budgets between the forecast's stored grid points (about 5%
apart, :func:`semisup.plan.budget_grid`) are read off linearly in log budget. A forecast
*hits* when the measured mean lies inside its interval: round after round, the share of hits
is this table's own check of the plan's stated coverage.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import numpy as np
import pandas as pd

from ..study import truthy as _truthy
from ._decision import forecast_span, forecast_value

__all__ = ["score_plan", "track_lines", "track_record"]


def _curve_key(o: Mapping | None) -> tuple[str, str] | None:
    if not isinstance(o, Mapping) or not o.get("method"):
        return None
    return str(o["method"]), str(o.get("strategy") or "random")


def score_plan(plan: Mapping, forecast: pd.DataFrame | None,
               measured: pd.DataFrame | None) -> dict:
    """One earlier plan's forecasts at the budgets measured since, against the measurements.

    Parameters
    ----------
    plan : the earlier plan (plan.json's keys; uses ``name``, ``made_at``, ``target.metric``,
        ``interval``, ``measured_up_to`` {"method (strategy)": budget}, ``chosen``/``best``).
    forecast : its forecast points (columns method, strategy, metric, n_labels, mean, low,
        high).
    measured : the study's measured points now (curves.csv: method, strategy, metric,
        n_labels, mean, low, high, measured).

    Returns
    -------
    dict with ``plan``, ``made_at``, ``metric``, ``interval``, ``rows`` (one per curve and
    budget: method, strategy, n_labels, predicted {mean, low, high}, measured {mean, low,
    high}, error = measured - predicted mean, hit, plan_choice), ``n_compared``, ``n_hit``,
    ``coverage`` (None without comparisons) and ``mean_abs_error``.
    """
    metric = str((plan.get("target") or {}).get("metric") or "")
    up_to = plan.get("measured_up_to") or {}
    pick = _curve_key(plan.get("chosen")) or _curve_key(plan.get("best"))
    rows: list[dict] = []
    if forecast is not None and measured is not None and not forecast.empty \
            and not measured.empty and metric:
        fc = forecast[forecast["metric"].astype(str) == metric]
        ms = measured[(measured["metric"].astype(str) == metric)
                      & _truthy(measured["measured"])] if "measured" in measured.columns \
            else measured[measured["metric"].astype(str) == metric]
        for (method, strategy), grp in fc.groupby(["method", "strategy"], sort=True):
            key = f"{method} ({strategy})"
            if key not in up_to:
                continue
            limit = float(up_to[key])
            grp = grp.sort_values("n_labels")
            n = grp["n_labels"].to_numpy(float)
            now = ms[(ms["method"].astype(str) == str(method))
                     & (ms["strategy"].astype(str) == str(strategy))]
            for r in now.sort_values("n_labels").itertuples(index=False):
                b = float(r.n_labels)
                if b <= limit or b < n[0] or b > n[-1]:
                    continue
                x = np.log(n)
                pred = {c: float(np.interp(np.log(b), x, grp[c].to_numpy(float)))
                        for c in ("mean", "low", "high")}
                got = float(r.mean)
                rows.append({
                    "method": str(method), "strategy": str(strategy), "n_labels": int(b),
                    "predicted": pred,
                    "measured": {"mean": got, "low": float(r.low), "high": float(r.high)},
                    "error": got - pred["mean"],
                    "hit": bool(pred["low"] <= got <= pred["high"]),
                    "plan_choice": (str(method), str(strategy)) == pick,
                })
    n_hit = sum(r["hit"] for r in rows)
    return {
        "plan": plan.get("name"),
        "made_at": plan.get("made_at"),
        "metric": metric,
        "interval": plan.get("interval"),
        "rows": rows,
        "n_compared": len(rows),
        "n_hit": int(n_hit),
        "coverage": n_hit / len(rows) if rows else None,
        "mean_abs_error": float(np.mean([abs(r["error"]) for r in rows])) if rows else None,
    }


def _forecast_key(plan: Mapping) -> tuple | None:
    """Plans with one key made the same forecasts: the same study state, metric and interval
    (a plan run again with another target or price). A plan without a state id is its own."""
    state = plan.get("state") if isinstance(plan.get("state"), Mapping) else {}
    if not state.get("id"):
        return None
    return (state["id"], str((plan.get("target") or {}).get("metric") or ""),
            plan.get("interval"))


def track_record(earlier: Iterable[tuple[Mapping, pd.DataFrame | None]],
                 measured: pd.DataFrame | None) -> dict:
    """Every earlier plan scored against the study's measured points now (pure).

    ``earlier`` yields ``(plan, forecast points)`` oldest first. Plans made again from the
    same study state (same metric and interval) forecast the same numbers: only the latest
    of them is scored, the others are named in ``repeated_plans``, so a forecast counts once.
    Returns ``plans`` (one :func:`score_plan` result each), ``repeated_plans`` and the totals
    ``n_compared``, ``n_hit``, ``coverage``.
    """
    items = list(earlier)
    latest = {_forecast_key(p): i for i, (p, _) in enumerate(items)}
    plans, repeated = [], []
    for i, (p, f) in enumerate(items):
        key = _forecast_key(p)
        if key is not None and latest[key] != i:
            repeated.append(p.get("name"))
            continue
        plans.append(score_plan(p, f, measured))
    n = sum(p["n_compared"] for p in plans)
    hits = sum(p["n_hit"] for p in plans)
    return {"plans": plans, "repeated_plans": repeated, "n_compared": n, "n_hit": hits,
            "coverage": hits / n if n else None}


def _plural(n: int, noun: str) -> str:
    return f"{n} {noun}" + ("" if n == 1 else "s")


def track_lines(track: Mapping | None) -> list[str]:
    """Plain-text lines of a track record (for the plan's summary)."""
    plans = list((track or {}).get("plans") or [])
    if not plans:
        return []
    out = [f"Track record of {_plural(len(plans), 'earlier plan')}: "
           + (f"{track['n_hit']} of {track['n_compared']} forecasts at budgets measured "
              "since fell inside their interval." if track.get("n_compared")
              else "no budget they forecast has been measured since.")]
    repeated = list((track or {}).get("repeated_plans") or [])
    if repeated:
        out[0] += (f" ({_plural(len(repeated), 'more plan')} made again from the same study "
                   "state forecast the same numbers and are counted once.)")
    for p in plans:
        mine = [r for r in p["rows"] if r["plan_choice"]] or p["rows"]
        if not mine:
            continue
        r = mine[-1]
        pred = r["predicted"]
        out.append(f"  {p['plan']}: {r['method']} ({r['strategy']}) at {r['n_labels']:,} "
                   f"labels predicted {p['metric']} {forecast_value(pred['mean'])} "
                   f"({forecast_span(pred['low'], pred['high'])}), measured "
                   f"{r['measured']['mean']:.3f}: "
                   f"{'hit' if r['hit'] else 'MISS'}; all its curves: {p['n_hit']} of "
                   f"{p['n_compared']} hits.")
    return out
