"""Write report.html and figures/*.png for a study folder (I/O edge).

Reads what the study and the plan wrote (cells.csv, study.json, data_card.json, curves.csv,
plan.json, label_next.csv); computes nothing new beyond grouping and averaging for display.
"""

from __future__ import annotations

import json
import logging
import os
from collections.abc import Mapping
from pathlib import Path

import pandas as pd

from .. import __version__
from .._atomic import atomic_write_bytes, atomic_write_text
from .._errors import PlanError, StoreError
from ..plan import METRICS, data_warnings, read_json, study_facts, tidy_cells
from ._figures import METRIC_LABELS, curve_figure
from ._html import Picture, ReportContent, Section, Table, render_html

__all__ = ["CAUTIONS", "write_report"]

log = logging.getLogger(__name__)

CAUTIONS = (
    "A classifier trained on few labels can be badly wrong, and wrong with confidence: the "
    "holdout numbers above are estimates from a small sample, not guarantees.",
    "Predictions beyond the largest measured budget are extrapolations of a fitted curve; "
    "check them by labeling in rounds and measuring again.",
    "Decisions about people, health or safety need review by qualified people and must follow "
    "the rules that apply where the model is used; this report does not replace that review.",
)
_MAX_LABEL_ROWS = 50
_MAX_OPTIONS = 40


def _read_csv(path: Path) -> pd.DataFrame | None:
    if not path.is_file():
        return None
    try:
        return pd.read_csv(path, dtype={"row_id": str})
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise StoreError(f"{path} cannot be read as CSV ({exc}); write it again") from None


def _find(src: Mapping, *names: str):
    """First value under one of ``names`` at the top level or one level down."""
    for name in names:
        if isinstance(src, Mapping) and src.get(name) is not None:
            return src[name]
    for value in (src.values() if isinstance(src, Mapping) else ()):
        if isinstance(value, Mapping):
            for name in names:
                if value.get(name) is not None:
                    return value[name]
    return None


def _scalar(v: object) -> bool:
    return isinstance(v, (str, int, float, bool)) or v is None


def _text(value: object) -> object:
    if _scalar(value):
        return value
    if isinstance(value, (list, tuple)) and all(_scalar(x) for x in value):
        shown = [f"{x:.4g}" if isinstance(x, float) else str(x) for x in value[:30]]
        return ", ".join(shown) + (" ..." if len(value) > 30 else "")
    return _short(json.dumps(value, default=str))


def _pairs(d: Mapping, limit: int = 30, prefix: str = "", depth: int = 0) -> list[list[object]]:
    """Key/value rows of a mapping; nested mappings flattened to dotted keys (two levels),
    anything deeper shortened to readable text."""
    rows: list[list[object]] = []
    for key, value in d.items():
        if len(rows) >= limit:
            rows.append(["...", "more in the JSON file"])
            break
        name = f"{prefix}{key}"
        if isinstance(value, Mapping) and value and depth < 2:
            rows.extend(_pairs(value, limit - len(rows), f"{name}.", depth + 1))
        else:
            rows.append([name, _text(value)])
    return rows[: limit + 1]


def _curves_table(study_dir: Path, cells: pd.DataFrame | None) -> pd.DataFrame | None:
    curves = _read_csv(study_dir / "curves.csv")
    needed = {"method", "strategy", "metric", "n_labels", "mean", "low", "high", "measured"}
    if curves is not None and needed <= set(curves.columns):
        return curves
    if cells is None:
        return None
    ok = cells[cells["status"].astype(str).str.lower() == "ok"]
    rows = []
    for m in METRICS:
        if m not in ok.columns:
            continue
        g = ok.groupby(["method", "strategy", "n_labels"])[m]
        agg = g.agg(["mean", "min", "max"]).reset_index()
        for r in agg.itertuples(index=False):
            rows.append({"method": r.method, "strategy": r.strategy, "metric": m,
                         "n_labels": r.n_labels, "mean": r.mean, "low": r.min, "high": r.max,
                         "measured": True})
    return pd.DataFrame(rows) if rows else None


def _summary_section(study_dir: Path, study: Mapping, facts, cells, plan) -> Section:
    s = Section("summary", "Job summary")
    if plan:
        s.decision(_decision_lines(plan), plan.get("chosen") is not None)
    else:
        s.para("No plan has been made for this study yet. Make one with "
               f"'semisup plan {study_dir} --target accuracy=0.9 --cost-per-label 1' "
               "(your own target and price), then run 'semisup report' again.", "note")
    rows: list[list[object]] = []
    for label, value in (("rows in the table", facts.n_rows),
                         ("labeled rows", facts.n_labeled),
                         ("unlabeled rows", facts.n_unlabeled),
                         ("holdout rows (evaluation only)", facts.n_holdout)):
        if value is not None:
            rows.append([label, value])
    classes = _find(study, "class_names", "classes")
    if isinstance(classes, (list, tuple)):
        rows.append(["classes", ", ".join(str(c) for c in classes)])
    if cells is not None:
        rows.append(["methods", ", ".join(sorted(cells["method"].astype(str).unique()))])
        rows.append(["label budgets", ", ".join(str(int(n)) for n in
                                                sorted(cells["n_labels"].unique()))])
        rows.append(["selection strategies",
                     ", ".join(sorted(cells["strategy"].astype(str).unique()))])
        status = cells["status"].astype(str).str.lower().value_counts()
        rows.append(["cells", ", ".join(f"{k}: {v}" for k, v in status.items())])
    s.table(Table(["fact", "value"], rows))
    return s


def _decision_lines(plan: Mapping) -> list[str]:
    target = plan.get("target") or {}
    metric = str(target.get("metric", "metric"))
    head = (f"Target: {metric} >= {target.get('value')} with probability >= "
            f"{plan.get('confidence')}; cost per label {plan.get('cost_per_label')}.")

    def describe(o: Mapping) -> str:
        p = o.get("predicted") or {}
        extra = " (extrapolated)" if o.get("extrapolated") else ""
        return (f"{o.get('method')} with {o.get('strategy')} selection at {o.get('n_labels')} "
                f"labels: predicted {metric} {_num(p.get('mean'))} "
                f"[{_num(p.get('low'))}, {_num(p.get('high'))}]{extra}, probability "
                f"{_num(o.get('probability'), 2)}, cost {_num(o.get('cost'), 2)}")

    chosen = plan.get("chosen")
    if chosen:
        n_new = chosen.get("n_new")
        buy = f"buy {n_new} labels and use " if n_new else "no labels to buy; use "
        lines = [head, f"Decision: {buy}{describe(chosen)}."]
        runner = plan.get("runner_up")
        lines.append(f"Runner-up: {describe(runner)}." if runner else
                     "Runner-up: none meets the target with this confidence.")
    else:
        best = plan.get("best")
        tail = f"; the best is {describe(best)}." if best else "."
        lines = [head, f"Decision: not reachable with these data and methods{tail}"]
    return lines


def _num(v: object, digits: int = 3) -> str:
    try:
        return f"{float(v):.{digits}f}"  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return "\u2013"


def _card_section(card: Mapping, study: Mapping) -> Section:
    s = Section("data", "Data card highlights")
    if not card:
        s.para("No data_card.json in the study folder; 'semisup card' writes one.", "note")
    scalars = {k: v for k, v in card.items() if _scalar(v)}
    if scalars:
        s.table(Table(["item", "value"], _pairs(scalars)))
    counts = _find(card, "class_counts") or _find(study, "class_counts")
    if isinstance(counts, Mapping) and counts:
        total = sum(float(v) for v in counts.values() if _is_number(v)) or 1.0
        rows = [[str(k), v, float(v) / total if _is_number(v) else None]
                for k, v in counts.items()]
        s.heading("Labeled rows per class")
        s.table(Table(["class", "labeled rows", "share"], rows))
    for key in ("column_kinds", "kinds", "columns"):
        value = card.get(key)
        if isinstance(value, Mapping) and value:
            s.heading(f"Columns ({key.replace('_', ' ')})")
            s.table(Table(["column", "details"], _pairs(value, limit=60)))
            break
        if isinstance(value, list) and value and all(isinstance(x, Mapping) for x in value):
            keys = list(dict.fromkeys(k for x in value[:60] for k in x))[:6]
            s.heading("Columns")
            s.table(Table(keys, [[_short(x.get(k)) for k in keys] for x in value[:60]]))
            break
    for key in ("warnings", "notes", "issues"):
        value = card.get(key)
        if isinstance(value, list) and value:
            s.heading(f"Data card {key}")
            s.bullets([_short(v) for v in value], "warn" if key == "warnings" else "")
    return s


def _is_number(v: object) -> bool:
    try:
        float(v)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return False
    return True


def _short(v: object) -> object:
    if _scalar(v):
        return v
    text = str(v)
    return text if len(text) <= 120 else text[:117] + "..."


def _curves_section(curves, plan, figures_dir: Path, written: list[Path]) -> Section:
    s = Section("curves", "Learning curves")
    if curves is None or curves.empty:
        s.para("No measured points: cells.csv has no finished cell.", "note")
        return s
    target = plan.get("target") or {} if plan else {}
    plan_metric = target.get("metric")
    metrics = [m for m in METRICS if m in set(curves["metric"].astype(str))]
    if plan_metric in metrics:
        metrics.remove(plan_metric)
        metrics.insert(0, plan_metric)
    interval = plan.get("interval") if plan else None
    measured = curves["measured"].astype(str).str.strip().str.lower().isin(("true", "1"))
    if (~measured).any():
        s.para("Points are measured means over repeats with their intervals; lines are the "
               "fitted inverse power law error(n) = a + b n^(-c) with shaded bootstrap bands. "
               "In the grey area the curve is extrapolated beyond the largest measured budget "
               "(dashed line) and its band is widened; one panel per selection strategy.", "note")
    else:
        s.para("Points are measured means over repeats with their spread; no curves are "
               "fitted until a plan is made ('semisup plan').", "note")
    for m in metrics:
        is_plan = m == plan_metric
        png = curve_figure(curves, m, target=target.get("value") if is_plan else None,
                           chosen=plan.get("chosen") if is_plan else None, interval=interval)
        path = figures_dir / f"curves_{m}.png"
        atomic_write_bytes(path, png)
        written.append(path)
        caption = f"{METRIC_LABELS.get(m, m)} against label budget"
        if is_plan:
            caption += " (plan metric; dashed line: target; star: the plan's choice)"
        s.figure(Picture(png, caption, f"learning curves of {METRIC_LABELS.get(m, m)}"))
    return s


def _methods_section(cells, curves, plan) -> Section:
    s = Section("methods", "Methods")
    if cells is None:
        s.para("No cells.csv in the study folder.", "note")
        return s
    metric = ((plan or {}).get("target") or {}).get("metric") or "accuracy"
    if metric not in cells.columns:
        metric = next((m for m in METRICS if m in cells.columns), None)
    ok = cells[cells["status"].astype(str).str.lower() == "ok"]
    if metric is not None and not ok.empty:
        budgets = sorted(int(b) for b in ok["n_labels"].unique())
        means = ok.groupby(["method", "strategy", "n_labels"])[metric].mean()
        secs = (ok.groupby(["method", "strategy"])["seconds"].mean()
                if "seconds" in ok.columns else None)
        rows = []
        for (method, strategy), _ in ok.groupby(["method", "strategy"], sort=True):
            row: list[object] = [str(method), str(strategy)]
            for b in budgets:
                v = means.get((method, strategy, b))
                row.append(float(v) if v is not None and pd.notna(v) else None)
            if secs is not None:
                row.append(float(secs.get((method, strategy), float("nan"))))
            rows.append(row)
        headers = ["method", "strategy", *[f"n={b}" for b in budgets]]
        if secs is not None:
            headers.append("seconds per cell")
        s.table(Table(headers, rows, caption=f"Mean {METRIC_LABELS.get(metric, metric)} on "
                                             "the holdout over repeats, by label budget"))
    bad = cells[cells["status"].astype(str).str.lower() != "ok"]
    if not bad.empty:
        s.heading("Cells that did not finish")
        cols = [c for c in ("method", "strategy", "status", "error") if c in bad.columns]
        text = bad[cols].astype(object).where(bad[cols].notna(), "").astype(str)
        grouped = text.groupby(cols).size().reset_index(name="cells")
        s.table(Table([*cols, "cells"], grouped.values.tolist()))
    return s


def _plan_section(plan: Mapping | None, study_dir: Path) -> Section:
    s = Section("plan", "Plan and backtest")
    if not plan:
        s.para("No plan.json yet. Run 'semisup plan "
               f"{study_dir} --target METRIC=VALUE --cost-per-label X' to choose a budget, "
               "method and selection strategy, then run 'semisup report' again.", "note")
        return s
    s.decision(_decision_lines(plan), plan.get("chosen") is not None)
    s.para("Predicted: the fitted curve at that budget, with its bootstrap interval. Probability: "
           "the share of bootstrap curves (repeats resampled, the holdout's sampling error "
           "added when its size is known) whose predicted metric meets the target. Cost: "
           "labels still to buy times the expected price per label, plus the price of each "
           "labeling round.", "note")
    options = list(plan.get("options") or [])
    chosen = plan.get("chosen") or {}
    key = (chosen.get("method"), chosen.get("strategy"), chosen.get("n_labels"))
    options.sort(key=lambda o: (float(o.get("cost") or 0), o.get("n_labels") or 0))
    rows, hl = [], set()
    for i, o in enumerate(options[:_MAX_OPTIONS]):
        p = o.get("predicted") or {}
        if (o.get("method"), o.get("strategy"), o.get("n_labels")) == key:
            hl.add(i)
        rows.append([o.get("method"), o.get("strategy"), o.get("n_labels"), p.get("mean"),
                     p.get("low"), p.get("high"), o.get("probability"), o.get("cost"),
                     bool(o.get("extrapolated"))])
    if rows:
        more = len(options) - len(rows)
        s.table(Table(["method", "strategy", "labels", "predicted", "low", "high",
                       "probability", "cost", "extrapolated"], rows, hl,
                      caption="Options, cheapest first (the plan's choice highlighted)"
                      + (f"; {more} more in plan.json" if more > 0 else ""),
                      formats={6: ".2f", 7: ",.2f"}))
    bt = plan.get("backtest") or []
    if bt:
        s.heading("Backtest: refit without the largest budget, predict it")
        brow = []
        for b in bt:
            p = b.get("predicted") or {}
            covered = b.get("covered")
            brow.append([b.get("method"), b.get("strategy"), b.get("n_labels"), p.get("mean"),
                         p.get("low"), p.get("high"), b.get("measured"), b.get("error"),
                         "not possible: " + str(b.get("reason")) if covered is None
                         else ("yes" if covered else "NO")])
        s.table(Table(["method", "strategy", "labels", "predicted", "low", "high", "measured",
                       "error", "interval covered"], brow))
        s.para("A curve whose interval did not cover its own held-back budget should not be "
               "trusted far beyond the measured range.", "note")
    return s


def _label_section(label_next: pd.DataFrame | None, plan: Mapping | None) -> Section:
    s = Section("label-next", "Rows to label next")
    if label_next is None:
        s.para("No label_next.csv yet; 'semisup plan' writes it.", "note")
        return s
    if label_next.empty:
        s.para("label_next.csv lists no rows (nothing to buy, or no candidates).", "note")
        return s
    strategy = ((plan or {}).get("label_next") or {}).get("strategy")
    if strategy:
        s.para(f"Selection strategy: {strategy}. Send these rows to the annotators in this "
               "order.")
    cols = [c for c in ("rank", "row_id", "reason") if c in label_next.columns]
    head = label_next[cols].head(_MAX_LABEL_ROWS)
    rows = [[_cell(v) for v in r] for r in head.itertuples(index=False)]
    more = len(label_next) - len(head)
    s.table(Table(cols, rows, caption=f"first {len(head)} of {len(label_next)} rows"
                                      + (f"; {more} more in label_next.csv" if more else "")))
    return s


def _cell(v: object) -> object:
    if isinstance(v, float) and v == int(v):
        return int(v)
    if hasattr(v, "item"):
        return v.item()  # numpy scalar
    return v


def _protocol_section(study: Mapping) -> Section:
    s = Section("protocol", "Protocol")
    protocol = study.get("protocol")
    if isinstance(protocol, (list, tuple)) and protocol:
        s.bullets([_short(p) for p in protocol])
    elif isinstance(protocol, Mapping) and protocol:
        s.table(Table(["item", "value"], _pairs(protocol)))
    elif isinstance(protocol, str) and protocol:
        s.para(protocol)
    else:
        s.para("study.json does not describe the protocol.", "note")
    spec = study.get("spec")
    if isinstance(spec, Mapping) and spec:
        s.heading("Study settings")
        s.table(Table(["setting", "value"], _pairs(spec, limit=40)))
    rep = _find(study, "representation", "representations")
    if isinstance(rep, Mapping) and rep:
        s.heading("Unsupervised stage diagnostics")
        s.table(Table(["item", "value"], _pairs(rep)))
    return s


def write_report(study_dir: str | os.PathLike[str], *, currency: str = "") -> Path:
    """Write ``report.html`` (one self-contained file) and ``figures/*.png`` for a study.

    Works with or without a plan (``plan.json``); returns the path of the HTML file.
    """
    study_dir = Path(study_dir)
    if not study_dir.is_dir():
        raise StoreError(f"study folder {study_dir} does not exist; run 'semisup study' first")
    cells = _read_csv(study_dir / "cells.csv")
    try:
        if cells is not None:
            cells = tidy_cells(cells, study_dir / "cells.csv", ("method", "n_labels", "status"))
        study = read_json(study_dir / "study.json")
        card = read_json(study_dir / "data_card.json")
        plan = read_json(study_dir / "plan.json") or None
    except PlanError as exc:
        raise StoreError(str(exc)) from None
    if cells is None and not study:
        raise StoreError(f"{study_dir} has neither cells.csv nor study.json; run "
                         "'semisup study' first")
    facts = study_facts(study, card)
    curves = _curves_table(study_dir, cells)
    label_next = _read_csv(study_dir / "label_next.csv")

    figures: list[Path] = []
    warnings = data_warnings(facts)
    for w in (plan or {}).get("warnings") or []:
        if w not in warnings:
            warnings.append(str(w))
    chosen = (plan or {}).get("chosen") or {}
    if chosen.get("extrapolated"):
        note = ("the plan's budget lies beyond the largest measured budget, so its prediction "
                "is an extrapolation")
        if not any("extrapolat" in w for w in warnings):
            warnings.append(note)
    sections = [
        _summary_section(study_dir, study, facts, cells, plan),
        _card_section(card, study),
        _curves_section(curves, plan, study_dir / "figures", figures),
        _methods_section(cells, curves, plan),
        _plan_section(plan, study_dir),
        _label_section(label_next, plan),
        _protocol_section(study),
        Section("warnings", "Warnings").bullets(warnings or ["none"], "warn"),
        Section("cautions", "Cautions").bullets(CAUTIONS, "caution"),
    ]
    content = ReportContent(
        title=f"Label-budget study: {study_dir.resolve().name}",
        subtitle=f"semisup {__version__} report of the study folder {study_dir}",
        sections=sections,
    )
    out = atomic_write_text(study_dir / "report.html", render_html(content))
    log.info("report written to %s (%d figures)", out, len(figures))
    return out
