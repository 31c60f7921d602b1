"""The plan's evidence as a report section: backtests per extrapolation ratio, the calibration
used, the winning curve family per curve, and whether the top options overlap.

Reads only ``plan.json`` (as a dict); computes nothing new. The section is made of
:class:`Section` blocks, so every piece of text is escaped by ``_html`` where it enters the
page. ``evidence_section(plan, study, study_dir)`` is the hook the report calls after the plan
section; ``evidence_html(plan)`` gives the same content as an HTML fragment.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path

from ._html import Section, Table, _block_html

__all__ = ["evidence_html", "evidence_section"]


def _num(v: object, digits: int = 3) -> object:
    if isinstance(v, bool) or v is None:
        return v
    if isinstance(v, (int, float)):
        return round(float(v), digits)
    return v


def _share(v: object) -> str:
    return "\u2013" if not isinstance(v, (int, float)) else f"{100 * float(v):.0f}%"


def evidence_section(plan: Mapping | None, study: Mapping | None = None,
                     study_dir: Path | None = None) -> Section | None:
    """The evidence section of ``plan`` (plan.json as a dict), or None without evidence."""
    if not plan or not isinstance(plan.get("calibration"), Mapping):
        return None
    metric = (plan.get("target") or {}).get("metric", "metric")
    interval = plan.get("interval", 0.9)
    s = Section("evidence", "Evidence behind the forecast")
    s.para(f"Every curve was refitted on its first budgets only and asked to predict the "
           f"later ones it had not seen (rolling-origin backtests). The table shows how far "
           f"those forecasts of {metric} were off, by how far they extrapolated, and how often "
           f"the stated {_share(interval)} interval held the measured value.")
    cal = plan["calibration"]
    rows = []
    for b in plan.get("backtest_by_ratio") or []:
        if not b.get("n"):
            rows.append([b.get("ratio", ""), 0, None, None, None, None])
            continue
        rows.append([b.get("ratio", ""), int(b["n"]), _num(b.get("mean_error")),
                     _num(b.get("mae")), _share(b.get("covered_bootstrap_only")),
                     _share(b.get("covered_calibrated"))])
    if rows:
        s.table(Table(["extrapolation (budget / largest fitted)", "forecasts",
                       "mean error (predicted - measured)", "mean absolute error",
                       "held by the bootstrap interval", "held after calibration (in-sample)"],
                      rows, caption="Backtests per extrapolation ratio; a positive mean error "
                                    "means the forecasts were optimistic"))
    if cal.get("calibrated"):
        shift = cal.get("metric_shift_per_doubling") or 0.0
        extra = (cal.get("extra_sd_at") or {}).get("2x")
        s.para(f"Calibration used ({cal.get('n_backtests')} backtest forecasts): beyond the "
               f"largest measured budget each forecast of {metric} is shifted by "
               f"{shift:+.4f} per doubling of the budget and its spread gets an extra "
               f"standard deviation of {extra if extra is not None else 0:.4f} per doubling "
               "(Paule-Mandel fit of the backtest errors).")
    else:
        s.para(f"The intervals are not calibrated: {cal.get('reason', '')}", "note")
    models = plan.get("curve_models") or []
    if models:
        mrows = []
        for m in models:
            weights = m.get("weights") or {}
            shown = ", ".join(f"{k} {100 * float(v):.0f}%" for k, v in
                              sorted(weights.items(), key=lambda kv: -kv[1]))
            mrows.append([m.get("method", ""), m.get("strategy", ""), m.get("winner", ""),
                          shown, int(m.get("n_backtests") or 0),
                          "fallback: " + m["reason"] if m.get("flagged") else ""])
        s.table(Table(["method", "strategy", "winning curve family", "family weights",
                       "backtests of the curve", "note"], mrows,
                      caption="Curve families weighted by their own backtest errors "
                              "(inverse mean squared error), never by the fit residual"))
    selection = plan.get("selection") or {}
    if selection.get("winners_curse"):
        s.para("Against the winner's curse: " + str(selection["winners_curse"]) + ".", "note")
    margin = (plan.get("continuation") or {}).get("decision_margin")
    if margin:
        s.para(f"Against the winner's curse of the choice: the stated probability of a budget "
               f"beyond the largest measured one is lowered by {float(margin):g} standard "
               "deviations of its forecast, the margin at which the corpus's decisions to buy "
               "labels reached their targets as often as stated.", "note")
    note = selection.get("note")
    s.para(f"Overlap: {note}." if note else
           "Overlap: no other option's interval overlaps the chosen one at its budget.")
    evaluation = plan.get("evaluation") or {}
    if evaluation.get("note"):
        s.para(f"Evaluation ({evaluation.get('protocol', '')}): {evaluation['note']}.", "note")
    return s


def evidence_html(plan: Mapping | None) -> str:
    """The evidence section's blocks as an HTML fragment (empty without evidence)."""
    s = evidence_section(plan)
    if s is None:
        return ""
    return "".join(_block_html(kind, payload) for kind, payload in s.blocks)
