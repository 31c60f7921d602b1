"""Write report.html and figures/*.png (+ .svg) for a study folder (I/O edge).

Reads what the study and the plan wrote (cells.csv, study.json, data_card.json, curves.csv
with the study's measured points, plan.json and the latest plan's forecast points in
plans/, the annotator sheet) and shows it; it computes no new statistic. Every number shown
is read from those files and only formatted here (``_text.py``). A plan made from another
study state than the folder's current one is shown as stale, never as the current plan.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Mapping
from pathlib import Path

import pandas as pd

from .. import __version__
from .._atomic import atomic_write_bytes, atomic_write_text
from .._errors import ConfigError, PlanError, StoreError
from ..plan import (
    FORECAST_CEILING,
    METRICS,
    PlanStatus,
    data_warnings,
    decision_lines,
    forecast_span,
    forecast_value,
    list_plans,
    owned_option,
    read_forecast,
    read_json,
    read_measured,
    selection_phrase,
    study_state,
    tidy_cells,
)
from ..study import CURVE_CONFIDENCE, StudyRecord
from ._evidence import evidence_section
from ._figures import METRIC_LABELS, BudgetFacts, curve_figure, curve_panels, interval_name
from ._html import Picture, ReportContent, Section, Table, render_html
from ._text import (
    card_rows,
    columns_table,
    count,
    imbalance_text,
    money,
    num,
    pairs,
    percent,
    short,
    span,
    warning_text,
)

__all__ = ["CAUTIONS", "write_report"]

log = logging.getLogger(__name__)

CAUTIONS = (
    "A classifier trained on few labels can be badly wrong, and wrong with confidence: the "
    "measured numbers above are estimates from a small evaluation sample, not guarantees.",
    "Predictions beyond the largest measured budget are extrapolations of a fitted curve; "
    "check them by labeling in rounds and measuring again.",
    "Decisions about people, health or safety need review by qualified people and must follow "
    "the rules that apply where the model is used; this report does not replace that review.",
)
_MAX_LABEL_ROWS = 50
_REASONS = (
    "Reasons: 'random draw' - picked at random; 'cluster C, rank R' - representative "
    "selection, the (R+1)-th row nearest the centre of k-means cluster C in the unsupervised "
    "representation (rank 0 = nearest; clusters visited largest first); 'margin M' - "
    "uncertainty selection, the two most probable classes differ by M in predicted "
    "probability (small = the model is unsure)."
)


def _read_csv(path: Path) -> pd.DataFrame | None:
    if not path.is_file():
        return None
    try:
        return pd.read_csv(path, dtype={"row_id": str})
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise StoreError(f"{path} cannot be read as CSV ({exc}); write it again") from None


def _curves_table(study_dir: Path, plan: Mapping | None) -> pd.DataFrame | None:
    """The study's measured points (curves.csv) and, for a current plan, its forecast points
    (plans/<name>.forecast.csv, ``measured`` false)."""
    try:
        measured = read_measured(study_dir)
        forecast = read_forecast(study_dir, plan) if plan else None
    except PlanError as exc:
        raise StoreError(str(exc)) from None
    parts = []
    if measured is not None:
        parts.append(measured)
    if forecast is not None and not forecast.empty:
        parts.append(forecast)
    if not parts:
        return None
    return pd.concat(parts, ignore_index=True)


def _measured_level(curves: pd.DataFrame | None, plan: Mapping | None) -> float:
    """Coverage of the measured points' intervals: an ``interval`` column on the measured rows
    where a file has one, else the level the study writes them at (summarize_curves'
    default; the study's curves.csv has no such column)."""
    if curves is not None and "interval" in curves.columns:
        vals = pd.to_numeric(curves.loc[curves["measured"], "interval"], errors="coerce")
        vals = vals.dropna()
        if not vals.empty:
            return float(vals.iloc[0])
    return CURVE_CONFIDENCE


def _repeats(curves: pd.DataFrame | None) -> list[int]:
    if curves is None or "n_repeats" not in curves.columns:
        return []
    vals = pd.to_numeric(curves.loc[curves["measured"], "n_repeats"], errors="coerce")
    return [int(v) for v in vals.dropna().unique()]


def _families(methods) -> dict[str, str]:
    from ..methods import get_method

    out = {}
    for m in methods:
        try:
            out[str(m)] = get_method(str(m)).family
        except ConfigError:
            out[str(m)] = "other"
    return out


def recommended_metric(plan: Mapping | None, card: Mapping) -> tuple[str, str]:
    """The metric to lead with and why: the plan's target metric, else the one the data card
    advises (balanced accuracy for imbalanced labels), else accuracy."""
    target = ((plan or {}).get("target") or {}).get("metric")
    if target in METRICS:
        return str(target), "the plan's target metric"
    named = card.get("recommended_metric")
    if named in METRICS:
        return str(named), "the metric the data card recommends"
    from ..data import is_imbalanced

    ratio = card.get("imbalance_ratio")
    if isinstance(ratio, (int, float)) and is_imbalanced(ratio):
        return "balanced_accuracy", ("the data card finds the labeled classes imbalanced and "
                                     "advises balanced accuracy")
    return "accuracy", "the classes are roughly balanced"


def _summary_budget(record: StudyRecord, curves: pd.DataFrame) -> tuple[int | None, str]:
    """The budget the summary shows (the study's rule, ``StudyRecord.summary_budget``) and
    why."""
    budgets = curves.loc[curves["measured"], "n_labels"]
    if budgets.empty:
        return None, ""
    budget = record.summary_budget(budgets)
    evaluation = record.evaluation_block or {}
    largest = int(budgets.max())
    if budget < largest:
        return budget, (f"the largest budget below the pool of "
                        f"{count(evaluation.get('n_pool_min'))} labeled training rows, so the "
                        "repeats train on different rows")
    if evaluation.get("shared_across_repeats"):
        return budget, "every budget uses the whole pool, so the repeats do not differ"
    return budget, ("the largest measured budget; each repeat draws it from its own training "
                    "folds" if str(evaluation.get("protocol")).replace("-", "_") == "cross_fit"
                    else "the largest measured budget")


def _eval_rows_label(record: StudyRecord) -> str:
    """What the evaluation-row count means under the study's protocol."""
    if record.evaluation_protocol == "cross_fit":
        return ("evaluation rows per repeat (cross-fit: each of the table's labeled rows is "
                "evaluated in turn; rows returned by labeling rounds only train)")
    return "holdout rows (evaluation only)"


def _summary_section(study_dir: Path, record: StudyRecord, cells, curves, plan,
                     currency: str, status: PlanStatus) -> Section:
    s = Section("summary", "Job summary")
    if plan and status.stale:
        s.para(f"No current plan. The latest {status.message('plan')}; it is shown below "
               "under 'Plan and backtest' as a stale plan only.", "warn")
    elif plan:
        s.decision(decision_lines(plan, currency=currency), plan.get("chosen") is not None)
    else:
        s.para("No plan has been made for this study yet. Make one with "
               f"'semisup plan {study_dir} --target accuracy=0.9 --cost-per-label 1' "
               "(your own target and price), then run 'semisup report' again.", "note")
    rows: list[list[object]] = []
    rounds = record.n_round_rows
    n_lab = record.n_labeled
    in_table = None if n_lab is None else n_lab - rounds
    for label, value in (("rows in the table", record.n_rows),
                         ("labeled rows in the table", in_table),
                         ("labeled rows returned by labeling rounds", rounds or None),
                         ("unlabeled rows", record.n_unlabeled),
                         (_eval_rows_label(record), record.holdout_rows)):
        if value is not None:
            rows.append([label, count(value)])
    classes = record.data.class_names
    if classes:
        rows.append(["classes", ", ".join(str(c) for c in classes)])
    if cells is not None:
        rows.append(["methods", ", ".join(sorted(cells["method"].astype(str).unique()))])
        rows.append(["training-label budgets measured", ", ".join(
            count(n) for n in sorted(cells["n_labels"].unique()))])
        rows.append(["selection strategies",
                     ", ".join(sorted(cells["strategy"].astype(str).unique()))])
        status = cells["status"].astype(str).str.lower().value_counts()
        rows.append(["cells (method x budget x repeat x strategy)",
                     ", ".join(f"{k}: {count(v)}" for k, v in status.items())])
    s.table(Table(["fact", "value"], rows))
    return s


def _measured_table(s: Section, record: StudyRecord, curves, plan, card: Mapping) -> None:
    """The measured metric of every method at the summary budget (the study's rule)."""
    metric, why = recommended_metric(plan, card)
    part = curves[curves["measured"] & (curves["metric"] == metric)]
    budget, where = _summary_budget(record, curves)
    if budget is None or part.empty:
        return
    at = part[part["n_labels"].astype(int) == budget].sort_values("mean", ascending=False)
    level = _measured_level(curves, plan)
    kind = interval_name(level, "repeat", _repeats(curves))
    label = METRIC_LABELS.get(metric, metric)
    s.heading(f"Measured {label} at {count(budget)} training labels")
    s.para(f"Shown: {label} ({why}), at {count(budget)} labels ({where}). "
           f"Interval: {kind}.", "note")
    s.table(Table(["method", "strategy", f"mean {label}",
                   interval_name(level, "repeat", brief=True)],
                  [[r.method, r.strategy, num(r.mean), span(r.low, r.high)]
                   for r in at.itertuples(index=False)]))


def _card_section(card: Mapping, record: StudyRecord) -> Section:
    s = Section("data", "Data card highlights")
    if not card:
        s.para("No data_card.json in the study folder; 'semisup card' writes one.", "note")
    rows = card_rows(card)
    if rows:
        s.table(Table(["item", "value"], rows))
    text = imbalance_text(card)
    if text:
        s.para(text)
    counts = card.get("class_counts") or record.class_counts
    shares = card.get("labeled_class_shares")
    if isinstance(counts, Mapping) and counts:
        rows = [[str(k), count(v)] + ([percent((shares or {}).get(k))]
                                      if isinstance(shares, Mapping) else [])
                for k, v in counts.items()]
        s.heading("Labeled rows per class")
        s.table(Table(["class", "labeled rows"]
                      + (["share"] if isinstance(shares, Mapping) else []), rows))
    kinds = card.get("kinds")
    if isinstance(kinds, Mapping) and kinds:
        s.heading("Column kinds")
        s.table(Table(["kind", "columns"],
                      [[k, short(", ".join(map(str, v)) if isinstance(v, list) else v, 300)]
                       for k, v in kinds.items()]))
    elif isinstance(card.get("column_kinds"), Mapping) and card["column_kinds"]:
        s.heading("Column kinds")
        s.table(Table(["column", "kind"], pairs(card["column_kinds"], limit=60)))
    table = columns_table(card.get("columns"))
    if table is not None:
        s.heading("Columns")
        s.table(table)
    for key, title in (("warnings", "Data card warnings"), ("notes", "Data card notes")):
        value = card.get(key)
        if isinstance(value, list) and value:
            s.heading(title)
            s.bullets([warning_text(short(v, 400)) for v in value],
                      "warn" if key == "warnings" else "")
    return s


def _curves_section(curves, plan, record: StudyRecord, card: Mapping, figures_dir: Path,
                    written: list[Path], currency: str) -> Section:
    s = Section("curves", "Learning curves")
    if curves is None or curves.empty:
        s.para("No curve points: curves.csv is missing or empty (the study writes it once a "
               "cell has finished).", "note")
        return s
    target = (plan or {}).get("target") or {}
    plan_metric = target.get("metric")
    metrics = [m for m in METRICS if m in set(curves["metric"])]
    if plan_metric in metrics:
        metrics.remove(plan_metric)
        metrics.insert(0, plan_metric)
    _measured_table(s, record, curves, plan, card)
    measured_kind = interval_name(_measured_level(curves, plan), "repeat", _repeats(curves))
    fitted_kind = interval_name((plan or {}).get("interval"),
                                "continued" if (plan or {}).get("continuation") else "bootstrap")
    fitted = (~curves["measured"]).any()
    # the upper axis (training + evaluation labels) only where a fixed holdout is set aside
    holdout = record.evaluation_protocol == "holdout"
    s.heading("Figures")
    s.para(f"One panel per method family, on a shared scale. Points: measured mean on the "
           f"evaluation rows; bars: {measured_kind}."
           + (f" Lines: the forecast, a fitted learning curve (curve families weighted by their "
              "backtests; "
              f"see 'Evidence behind the forecast'); bands: "
              f"{fitted_kind}; the grey area is extrapolated beyond the largest measured budget."
              if fitted else " No curves are fitted until a plan is made ('semisup plan').")
           + " The axis counts training labels"
           + ("; the upper axis adds the labels of the fixed holdout, kept for evaluation"
              if holdout else "") + ". Bars cut by the axes end in an open triangle. "
           f"Forecast lines stop at {FORECAST_CEILING:g} and their bands are cut there: a "
           "few hundred evaluated labels cannot tell higher forecasts apart.", "note")
    families = _families(curves["method"].unique())
    budget = BudgetFacts(n_holdout=record.holdout_rows if holdout else None,
                         labels_owned=(plan or {}).get("labels_owned"), currency=currency)
    reached = bool((plan or {}).get("chosen"))
    mark = (plan or {}).get("chosen") or (plan or {}).get("best")
    figures_dir.mkdir(parents=True, exist_ok=True)
    for m in metrics:
        is_plan = m == plan_metric
        options = {"target": target.get("value") if is_plan else None,
                   "chosen": mark if is_plan else None, "chosen_reached": reached,
                   "families": families, "facts": budget, "measured_interval": measured_kind,
                   "fitted_interval": fitted_kind if fitted else ""}
        fig = curve_figure(curves, m, **options)
        panels = curve_panels(curves, m, **options)
        for ext, payload in (("png", fig.png), ("svg", fig.svg)):
            path = figures_dir / f"curves_{m}.{ext}"
            atomic_write_bytes(path, payload)
            written.append(path)
        label = METRIC_LABELS.get(m, m)
        caption = (f"{label[:1].upper() + label[1:]} against training labels, one panel per "
                   "method family")
        if is_plan:
            star = ("star: the plan's choice" if reached else
                    "open star: the best option, which misses the target's confidence")
            caption += (f" (the plan's metric; dashed red line: the target "
                        f"{num(target.get('value'))}; {star})")
        caption += f". Also as figures/curves_{m}.svg."
        s.figure(Picture(fig.png, caption, f"learning curves of {label} by method family",
                         panels=[(p.png, p.text_px) for p in panels], text_px=fig.text_px))
    return s


def _methods_section(cells, curves, plan, record: StudyRecord, card: Mapping) -> Section:
    s = Section("methods", "Methods")
    if cells is None:
        s.para("No cells.csv in the study folder.", "note")
        return s
    metric, _ = recommended_metric(plan, card)
    if curves is not None and not curves.empty:
        part = curves[curves["measured"] & (curves["metric"] == metric)]
        if not part.empty:
            wide = part.pivot_table(index=["method", "strategy"], columns="n_labels",
                                    values="mean", aggfunc="first")
            budgets = [int(b) for b in wide.columns]
            rows = [[method, strategy, *[num(v) for v in vals]]
                    for (method, strategy), vals in zip(wide.index, wide.to_numpy(),
                                                        strict=True)]
            label = METRIC_LABELS.get(metric, metric)
            s.table(Table(["method", "strategy", *[f"{count(b)} labels" for b in budgets]],
                          rows, caption=f"Mean {label} on the evaluation rows over repeats, by "
                                        "training-label budget (from curves.csv)"))
    timing = record.raw.get("timing") if isinstance(record.raw.get("timing"), Mapping) else {}
    if timing.get("cells_seconds_total") is not None:
        s.para(f"Compute time of all cells: {num(timing['cells_seconds_total'], 0)} s "
               "(summed over workers, from study.json).", "note")
    bad = cells[cells["status"].astype(str).str.lower() != "ok"]
    if not bad.empty:
        s.heading("Cells that did not finish")
        cols = [c for c in ("method", "strategy", "status", "error") if c in bad.columns]
        text = bad[cols].astype(object).where(bad[cols].notna(), "").astype(str)
        grouped = text.groupby(cols).size().reset_index(name="cells")
        s.table(Table([*cols, "cells"], grouped.values.tolist()))
    return s


def _plan_section(plan: Mapping | None, study_dir: Path, currency: str,
                  status: PlanStatus) -> Section:
    s = Section("plan", "Plan and backtest")
    if not plan:
        s.para("No plan.json yet. Run 'semisup plan "
               f"{study_dir} --target METRIC=VALUE --cost-per-label X' to choose a budget, "
               "method and selection strategy, then run 'semisup report' again.", "note")
        return s
    if status.stale:
        s.para(f"STALE: {status.message('plan.json')}. What it said, for the record only:",
               "warn")
        s.bullets(decision_lines(plan, currency=currency))
        return s
    if plan.get("name"):
        s.para(f"Plan {plan['name']} (made {plan.get('made_at')}, kept in "
               f"plans/{plan['name']}.json) from the study's current state.", "note")
    s.decision(decision_lines(plan, currency=currency), plan.get("chosen") is not None)
    kind = interval_name(plan.get("interval"), "bootstrap")
    s.para(f"Predicted: the forecast at that budget, with its {kind}; forecasts above "
           f"{FORECAST_CEILING:g} read 'at least {FORECAST_CEILING:g}'. Chance: the share of "
           "calibrated bootstrap curves (repeats resampled; the sampling error of "
           "evaluation rows shared by every repeat added) whose forecast meets the target. "
           "Cost: labels still to buy times the price per label, plus the price of each "
           "labeling round" + (f", in {currency}" if currency else "") + ".", "note")
    _options_tables(s, plan, currency)
    bt = plan.get("backtest") or []
    if bt:
        s.heading("Backtest: refit without the largest budget, predict it")
        brow = []
        for b in bt:
            p = b.get("predicted") or {}
            covered = b.get("covered")
            err = b.get("error")
            brow.append([b.get("method"), b.get("strategy"), count(b.get("n_labels")),
                         forecast_value(p.get("mean")), forecast_span(p.get("low"), p.get("high")),
                         num(b.get("measured")),
                         f"{float(err):+.3f}" if isinstance(err, (int, float)) else "\u2013",
                         "not possible: " + str(b.get("reason")) if covered is None
                         else ("yes" if covered else "NO")])
        s.table(Table(["method", "strategy", "training labels", "predicted",
                       interval_name(plan.get("interval"), "bootstrap", brief=True),
                       "measured mean", "error", "interval covered"], brow))
        s.para("A curve whose interval did not cover its own held-back budget should not be "
               "trusted far beyond the measured range.", "note")
    return s


#: Options shown before the fold: the choice, what the owned labels give, then this many more.
_OPTIONS_SHOWN = 5


def _options_tables(s: Section, plan: Mapping, currency: str) -> None:
    """The options: the choice, what the labels owned give and the next few in the plan's
    order (semisup.plan.order_options: what reaches the target, cheapest first; then what
    buys labels, most likely first; last the budgets already owned), the rest folded away.
    The decisive columns (the chance and the cost) come first, so a phone shows them."""
    options = [o for o in plan.get("options") or [] if isinstance(o, Mapping)]
    if not options:
        return
    def key(o: Mapping) -> tuple:
        return (o.get("method"), o.get("strategy"), o.get("n_labels"))
    chosen, owned = plan.get("chosen"), owned_option(options)
    top: list[tuple[Mapping, str]] = []
    for o, why in ((chosen, "the plan's choice"), (plan.get("best") if not chosen else None,
                                                   "the best (not sure enough)"),
                   (owned, "with the labels you own")):
        if o and key(o) not in {key(t) for t, _ in top}:
            top.append((o, why))
    seen = {key(o) for o, _ in top}
    rest = [o for o in options if key(o) not in seen]
    shown = top + [(o, "") for o in rest[:_OPTIONS_SHOWN]]
    folded = rest[_OPTIONS_SHOWN:]
    level = plan.get("interval")
    heads = ["option", "chance of reaching the target", "cost", "labels to buy",
             "training labels", "predicted", interval_name(level, "bootstrap", brief=True),
             "extrapolated"]

    def row(o: Mapping, why: str) -> list[object]:
        p = o.get("predicted") or {}
        name = f"{o.get('method')} ({o.get('strategy')})" + (f": {why}" if why else "")
        return [name, percent(o.get("probability")), money(o.get("cost"), currency),
                count(o.get("n_new") or 0), count(o.get("n_labels")),
                forecast_value(p.get("mean")), forecast_span(p.get("low"), p.get("high")),
                "yes" if o.get("extrapolated") else "no"]

    hl = {i for i, (o, _) in enumerate(shown) if chosen and key(o) == key(chosen)}
    s.table(Table(heads, [row(o, why) for o, why in shown], hl, key_columns={0, 1, 2},
                  caption="Options: the plan's choice (highlighted), what the labels you own "
                          f"give, and the next {_OPTIONS_SHOWN} in the plan's order (sure "
                          "enough, cheapest first; then most likely first)"))
    if folded:
        s.details(f"{len(folded)} more options", Table(
            heads, [row(o, "") for o in folded], key_columns={0, 1, 2},
            caption="The other options, in the plan's order (all are in plan.json)"))


def _rounds_section(plan: Mapping | None, plans: list[dict], state: Mapping) -> Section:
    """Every kept plan (current or stale now) and the latest plan's track record."""
    s = Section("rounds", "Plans kept and their track record")
    if not plans:
        s.para("No plan has been kept yet ('semisup plan' keeps each plan in plans/).", "note")
        return s
    rows = []
    for p in plans:
        st = PlanStatus(p, state)
        pick = p.get("chosen") or p.get("best") or {}
        target = p.get("target") or {}
        rows.append([p.get("name"), short(p.get("made_at"), 40),
                     f"{METRIC_LABELS.get(str(target.get('metric')), target.get('metric'))} "
                     f">= {num(target.get('value'))}",
                     (f"{pick.get('method')} ({pick.get('strategy')}) at "
                      f"{count(pick.get('n_labels'))}" if pick else "\u2013")
                     + ("" if p.get("chosen") else " (best; target not reached)"),
                     "stale" if st.stale else "current"])
    s.table(Table(["plan", "made at (UTC)", "target", "choice", "now"], rows,
                  caption="Every plan made on this folder, oldest first (plans/*.json)"))
    track = (plan or {}).get("track_record") or {}
    scored = [p for p in track.get("plans") or [] if p.get("rows")]
    if PlanStatus(plan, state).stale or not plan:
        return s
    if not scored:
        s.para("Track record: no budget an earlier plan forecast has been measured since. "
               "Label the rows of the sheet, 'semisup add-labels', run the study again and "
               "make a new plan to score the earlier forecasts.", "note")
        return s
    s.heading("Track record: earlier forecasts against what was measured since")
    rows, hl = [], set()
    for p in scored:
        for r in p["rows"]:
            pred, got = r["predicted"], r["measured"]
            if r.get("plan_choice"):
                hl.add(len(rows))
            rows.append([p.get("plan"), r["method"], r["strategy"], count(r["n_labels"]),
                         forecast_value(pred["mean"]), forecast_span(pred["low"], pred["high"]),
                         num(got["mean"]),
                         f"{float(r['error']):+.3f}", "hit" if r["hit"] else "MISS"])
    level = interval_name(scored[0].get("interval"), "bootstrap", brief=True)
    s.table(Table(["plan", "method", "strategy", "training labels", "predicted", level,
                   "measured mean", "error", "inside the interval"], rows, hl,
                  caption="Each earlier plan's forecast at the budgets measured since (the "
                          "curve it chose highlighted)"))
    n, hits = track.get("n_compared") or 0, track.get("n_hit") or 0
    share = percent(hits / n) if n else "\u2013"
    s.para(f"{hits} of {n} forecasts fell inside their {level} "
           f"({share}): this table's own check of the plan's "
           "stated coverage, round after round.")
    return s


def _label_section(label_next: pd.DataFrame | None, plan: Mapping | None,
                   status: PlanStatus) -> Section:
    s = Section("label-next", "Rows to label next")
    if plan and status.stale:
        s.para("No current list: the rows listed by the stale plan were chosen for another "
               "state of the study; make a new plan.", "warn")
        return s
    if label_next is None:
        if plan and (plan.get("label_next") or {}).get("written") is False:
            s.para("No rows to label: the plan found nothing worth buying ('semisup plan "
                   "--next N' lists N rows anyway).", "note")
        else:
            s.para("No label_next.csv yet; 'semisup plan' writes it.", "note")
        return s
    if label_next.empty:
        s.para("label_next.csv lists no rows (nothing to buy, or no candidates).", "note")
        return s
    sheet = (plan or {}).get("label_next") or {}
    if sheet.get("strategy"):
        how = selection_phrase(str(sheet["strategy"]), bool(sheet.get("weighted_to_pool")))
        s.para(f"Chosen by {how}. Send these rows to the annotators in this order (rank 1 "
               "first).")
        if sheet.get("weighted_to_pool"):
            s.para("The labeled rows look unlike the pool (see the data card's check), so "
                   "these rows lean towards the regions the labels miss; the weight in each "
                   "row's reason says how much. Labeling them makes the labeled rows more like "
                   "the pool, and the curves and forecasts more trustworthy for it.", "note")
    s.para(_REASONS, "note")
    cols = [c for c in ("rank", "row_id", "reason") if c in label_next.columns]
    head = label_next[cols].head(_MAX_LABEL_ROWS)
    rows = [[_cell(v) for v in r] for r in head.itertuples(index=False)]
    more = len(label_next) - len(head)
    names = {"rank": "rank", "row_id": "row id", "reason": "reason"}
    s.table(Table([names[c] for c in cols], rows,
                  caption=f"first {len(head)} of {len(label_next)} rows"
                  + (f"; {more} more in label_next.csv" if more else "")))
    return s


def _read_sheet(study_dir: Path, plan: Mapping | None) -> pd.DataFrame | None:
    """The annotator sheet the plan names (label_next.csv or .xlsx), ids as text."""
    name = ((plan or {}).get("label_next") or {}).get("file") or "label_next.csv"
    path = study_dir / str(name)
    if path.suffix.lower() != ".xlsx":
        return _read_csv(path)
    if not path.is_file():
        return None
    from ..data import read_table

    return read_table(path, text_columns=("row_id",))


def _cell(v: object) -> object:
    if isinstance(v, float) and v == int(v):
        return int(v)
    if hasattr(v, "item"):
        return v.item()  # numpy scalar
    return v


def _protocol_section(record: StudyRecord) -> Section:
    s = Section("protocol", "Protocol")
    protocol = record.raw.get("protocol")
    if isinstance(protocol, (list, tuple)) and protocol:
        s.bullets([short(p, 600) for p in protocol])
    elif isinstance(protocol, Mapping) and protocol:
        s.table(Table(["item", "value"], pairs(protocol)))
    elif isinstance(protocol, str) and protocol:
        s.para(protocol)
    else:
        s.para("study.json does not describe the protocol.", "note")
    spec = record.spec
    if spec:
        protocol = str(spec.get("evaluation") or "").replace("_", "-")
        # a setting the chosen evaluation does not use is left out (the holdout share under
        # cross-fitting, the folds under a holdout)
        unused = {"cross-fit": {"holdout"}, "holdout": {"folds"},
                  "test-file": {"holdout", "folds"}}.get(protocol, set())
        s.heading("Study settings")
        s.table(Table(["setting", "value"], pairs({k: v for k, v in spec.items()
                                                   if k not in unused}, limit=40)))
    diag, errors = record.representation, record.representation_errors
    if diag or errors:
        s.heading("Unsupervised stage diagnostics")
        s.para("How well the unsupervised stage fits the table, on rows it was not trained "
               "on. ELBO: the VAE's evidence lower bound per row (higher is better). "
               "Reconstruction: how well the VAE rebuilds each row from its latent code: "
               "numeric RMSE in standard deviations of the column, and for categorical "
               "columns the share of cells rebuilt as another category (0 is perfect; "
               "guessing scores about 1 - 1/levels). Active units: latent dimensions the VAE "
               "uses. Mixture: the number of Gaussian components BIC selected.", "note")
        if diag:
            s.table(Table(["item", "value"], pairs(diag, limit=60)))
        if isinstance(errors, Mapping) and errors:
            s.bullets([f"{k}: {short(v, 300)}" for k, v in errors.items()], "warn")
    return s


def _title(record: StudyRecord, study_dir: Path) -> str:
    source = record.data.source or record.spec.get("data")
    if source:
        return f"Label-budget study of {Path(str(source)).name}"
    return f"Label-budget study in {study_dir.resolve().name}"


def write_report(study_dir: str | os.PathLike[str], *, currency: str = "") -> Path:
    """Write ``report.html`` (one self-contained file) and ``figures/*.png`` / ``*.svg``.

    Works with or without a plan (``plan.json``); ``currency`` (e.g. "EUR") is written
    before every price. Returns the path of the HTML file.
    """
    study_dir = Path(study_dir)
    if not study_dir.is_dir():
        raise StoreError(f"study folder {study_dir} does not exist; run 'semisup study' first")
    from ..study import check_exports

    check_exports(study_dir, command="report")  # a hand-edited cells.csv / curves.csv
    cells = _read_csv(study_dir / "cells.csv")
    try:
        study = read_json(study_dir / "study.json")
        card = read_json(study_dir / "data_card.json")
        plan = read_json(study_dir / "plan.json") or None
        # the study state from the files as read (cells.csv and study.json are read once)
        state = study_state(study, cells if cells is not None else pd.DataFrame())
        if cells is not None:
            cells = tidy_cells(cells, study_dir / "cells.csv", ("method", "n_labels", "status"))
        plans = list_plans(study_dir)
    except PlanError as exc:
        raise StoreError(str(exc)) from None
    if cells is None and not study:
        raise StoreError(f"{study_dir} has neither cells.csv nor study.json; run "
                         "'semisup study' first")
    currency = currency.strip()
    record = StudyRecord.with_card(study, card)
    status = PlanStatus(plan, state)
    live = None if status.stale else plan  # a stale plan is never shown as current
    curves = _curves_table(study_dir, live)
    label_next = _read_sheet(study_dir, plan)

    figures: list[Path] = []
    warnings = data_warnings(record)
    for w in (live or {}).get("warnings") or []:
        if w not in warnings:
            warnings.append(str(w))
    chosen = (live or {}).get("chosen") or {}
    if chosen.get("extrapolated"):
        note = ("the plan's budget lies beyond the largest measured budget, so its prediction "
                "is an extrapolation")
        if not any("extrapolat" in w for w in warnings):
            warnings.append(note)
    if status.stale:
        warnings.insert(0, status.message("plan.json"))
    evidence = None if status.stale else evidence_section(plan, study, study_dir)
    sections = [
        _summary_section(study_dir, record, cells, curves, plan, currency, status),
        _card_section(card, record),
        _curves_section(curves, live, record, card, study_dir / "figures", figures,
                        currency),
        _methods_section(cells, curves, live, record, card),
        _plan_section(plan, study_dir, currency, status),
        *([evidence] if evidence is not None else []),
        _rounds_section(plan, plans, state),
        _label_section(label_next, plan, status),
        _protocol_section(record),
        Section("warnings", "Warnings").bullets([warning_text(w) for w in warnings]
                                                or ["None."], "warn"),
        Section("cautions", "Cautions").bullets(CAUTIONS, "caution"),
    ]
    content = ReportContent(
        title=_title(record, study_dir),
        subtitle=f"semisup {__version__} report of the study folder {study_dir}",
        sections=sections,
    )
    out = atomic_write_text(study_dir / "report.html", render_html(content))
    log.info("report written to %s (%d figure files)", out, len(figures))
    return out
