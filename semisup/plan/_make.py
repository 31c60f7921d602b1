"""Make a plan from a study folder: read (:func:`read_inputs`), build (:func:`build_plan`:
fit, price, choose; no file written; a frozen :class:`Plan`), write (:func:`write_plan`).

Writes, atomically, ``plans/<name>.json`` and ``plans/<name>.forecast.csv`` (the plan kept
by name with the study state it was made from, and its forecast points; :mod:`._history`),
``plan.json`` (a copy of the latest plan, with the earlier plans' track record,
:mod:`._track`) and the annotator sheet ``label_next.csv`` (or ``.xlsx``). The study's
``curves.csv`` is the study's and is only read. The maths is in the pure modules beside this
one.
"""

from __future__ import annotations

import json
import logging
import os
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from .._atomic import atomic_write_text
from .._errors import PlanError
from .._seeding import derive_seed
from ..study import StudyRecord
from ._bootstrap import CurveBand
from ._choose import Option, best_effort, choose, simplicity
from ._continuation import track_sentence
from ._costs import expected_label_price
from ._curves import MAX_EXTRAPOLATION
from ._decision import METRIC_WORDS, decision_lines, forecast_span, forecast_value
from ._families import FAMILIES
from ._history import (
    FORECAST_SUFFIX,
    PLANS_FOLDER,
    PlanStatus,
    list_plans,
    plan_name,
    read_forecast,
    read_measured,
    study_state,
)
from ._honest import overlapping
from ._inputs import (
    data_warnings,
    read_candidates,
    read_cells,
    read_cells_file,
    read_json,
)
from ._label_next import LABEL_NEXT_COLUMNS, default_select_rows, rank_rows, selection_phrase
from ._pipeline import Forecasts, forecast_all
from ._request import METRICS, PlanRequest
from ._sheet import (
    annotator_sheet,
    check_sheet_format,
    read_study_table,
    remove_sheets,
    sheet_name,
    write_sheet,
)
from ._track import track_lines, track_record
from ._unlabeled import measured_gains, method_families, unlabeled_summary

__all__ = [
    "CURVE_COLUMNS",
    "Plan",
    "PlanInputs",
    "build_plan",
    "label_counts",
    "make_plan",
    "order_options",
    "previous_choice",
    "read_inputs",
    "write_plan",
]

log = logging.getLogger(__name__)

CURVE_COLUMNS = ["method", "strategy", "metric", "n_labels", "mean", "low", "high", "measured"]
INTERVAL = 0.9          # coverage of every interval the plan reports
N_BOOT_PLAN = 200       # bootstrap resamples for the plan's metric


@dataclass(frozen=True)
class Plan:
    """A labeling plan: the choice, the options, the backtest and the rows to label next.

    Built by :func:`build_plan` (no file is written) and written by :func:`write_plan`;
    frozen, so what is written is what was built.
    """

    request: PlanRequest
    study_dir: Path
    chosen: Option | None
    runner_up: Option | None
    best: Option | None
    options: tuple[Option, ...]
    backtest: tuple[dict, ...]
    warnings: tuple[str, ...]
    labels_owned: int
    label_price: float
    label_next: pd.DataFrame = field(repr=False)
    label_next_strategy: str = "random"
    #: The rows were drawn weighted towards the pool regions the labeled rows miss.
    label_next_weighted: bool = False
    curves: pd.DataFrame = field(repr=False, default_factory=pd.DataFrame)
    n_max: dict[str, int] = field(default_factory=dict)
    evidence: dict = field(default_factory=dict)
    labels: dict = field(default_factory=dict)
    label_next_written: bool = True
    name: str = ""
    made_at: str = ""
    state: dict = field(default_factory=dict)
    history: tuple[dict, ...] = ()
    track: dict = field(default_factory=dict)
    sheet_format: str = "csv"
    previous_stale: str = ""
    #: the last plan made from an earlier study state: what it expected at its choice and
    #: what this plan forecasts there ({} when there is none)
    previous: dict = field(default_factory=dict)
    #: do the unlabeled rows help: the best method with a generative stage against the best
    #: supervised-only one, paired over the study's draws (``_unlabeled.unlabeled_summary``)
    unlabeled: dict = field(default_factory=dict)
    #: the study's record (the annotator sheet reads the table it names)
    record: StudyRecord = field(default_factory=StudyRecord, repr=False, compare=False)

    @property
    def reached(self) -> bool:
        """True when some option meets the target with the confidence asked for."""
        return self.chosen is not None

    @property
    def sheet_file(self) -> str:
        return sheet_name(self.sheet_format)

    def to_dict(self) -> dict:
        r = self.request
        return {
            "name": self.name,
            "made_at": self.made_at,
            "state": dict(self.state),
            "forecast_file": f"{PLANS_FOLDER}/{self.name}{FORECAST_SUFFIX}" if self.name
            else None,
            "target": {"metric": r.metric, "value": r.target},
            "confidence": r.confidence,
            "cost_per_label": r.cost_per_label,
            "cost_per_round": r.cost_per_round,
            "class_costs": dict(r.class_costs),
            "expected_price_per_label": self.label_price,
            "labels_owned": self.labels_owned,
            "labels": dict(self.labels),
            "reached": self.reached,
            "interval": INTERVAL,
            "max_extrapolation": MAX_EXTRAPOLATION,
            "chosen": None if self.chosen is None else self.chosen.to_dict(),
            "runner_up": None if self.runner_up is None else self.runner_up.to_dict(),
            "best": None if self.best is None else self.best.to_dict(),
            "options": [o.to_dict() for o in self.options],
            "backtest": list(self.backtest),
            **self.evidence,
            "unlabeled_rows": dict(self.unlabeled) or None,
            "label_next": {"strategy": self.label_next_strategy,
                           "weighted_to_pool": self.label_next_weighted,
                           "n_rows": int(len(self.label_next)),
                           "written": self.label_next_written,
                           "file": self.sheet_file if self.label_next_written else None},
            "measured_up_to": dict(self.n_max),
            "previous_plan": dict(self.previous) or None,
            "history": list(self.history),
            "track_record": dict(self.track),
            "warnings": list(self.warnings),
        }

    def summary(self, *, verbose: bool = False) -> str:
        """The plan as text: :func:`decision_lines` first (the same lines as the report's
        decision box), then the checks, the rows to label next, warnings and files.
        ``verbose`` adds the forecast's calibration in numbers."""
        lines = decision_lines(self.to_dict())
        m = self.request.metric
        evaluated = self.labels.get("evaluation_text")
        if evaluated:
            lines.append(f"How the labels are evaluated: {evaluated}")
        # with the corpus continuation, the check is of the curve fitted within the measured
        # budgets; the continuation beyond them has its own track record (below)
        check = ("Check of the fitted curve of" if self.evidence.get("continuation")
                 else "Check of")
        for b in self.backtest:
            if b.get("covered") is None:
                lines.append(f"{check} {b['method']} ({b['strategy']}): not possible, "
                             f"{b.get('reason', '')}.")
            else:
                pred = b["predicted"]
                lines.append(
                    f"{check} {b['method']} ({b['strategy']}): refitted without its "
                    f"{b['n_labels']:,}-label budget it predicted {m} "
                    f"{forecast_value(pred['mean'])} ({INTERVAL:.0%} interval "
                    f"{forecast_span(pred['low'], pred['high'])}) there; measured "
                    f"{b['measured']:.3f}, "
                    f"{'inside' if b['covered'] else 'OUTSIDE'} the interval.")
        lines.extend(_forecast_lines(self.evidence, verbose=verbose))
        note = (self.evidence.get("selection") or {}).get("note")
        if note:
            lines.append(f"Close options: {note}.")
        lines.extend(track_lines(self.track))
        if self.previous_stale:
            lines.append(f"Note: the previous {self.previous_stale}; it is kept in "
                         f"{PLANS_FOLDER}/ as history, this plan replaces it as plan.json.")
        if self.label_next_written and len(self.label_next):
            how = selection_phrase(self.label_next_strategy, self.label_next_weighted)
            lines.append(f"Rows to label next: {len(self.label_next):,} ({how}) in "
                         f"{self.sheet_file}.")
        elif self.label_next_written:
            lines.append(f"Rows to label next: none ({self.sheet_file} lists no rows).")
        else:
            lines.append("Rows to label next: none listed, since nothing should be bought "
                         "(pass --next N to list N rows anyway).")
        for w in self.warnings:
            lines.append(f"Warning: {w}")
        kept = f"{PLANS_FOLDER}/{self.name}.json and its forecast" if self.name else ""
        written = "plan.json" + (f", {kept}" if kept else "") + (
            f" and {self.sheet_file}" if self.label_next_written else "")
        lines.append(f"Wrote {written} in {self.study_dir}.")
        return "\n".join(lines)


def _forecast_lines(evidence: dict, *, verbose: bool) -> list[str]:
    """How the forecast's intervals were checked: in plain words, or (``verbose``) with the
    calibration's numbers and the winning curve families."""
    cont = evidence.get("continuation")
    if cont:
        lines = [f"Forecast: within the measured budgets, curves fitted to the study's cells; "
                 f"beyond them, how the curves of {cont['tables']} real tables continued "
                 "(their level, recent slope and fitted power law weighed as those tables "
                 "taught), with intervals as wide as those tables' errors."]
        if verbose:
            lines.append(f"  Continuation learned from {cont['curves']} curves "
                         f"({cont.get('source', '')}).")
        return lines
    cal = evidence.get("calibration") or {}
    if not cal:
        return []
    if not cal.get("calibrated"):
        return [f"Forecast: its intervals could not be checked against earlier predictions "
                f"({cal.get('reason', '')})."]
    n = cal.get("n_backtests")
    lines = [f"Forecast: checked against {n} earlier predictions of these curves (each curve "
             "refitted on its first budgets and scored on the later ones) and its intervals "
             "widened to match."]
    if verbose:
        wins = ", ".join(f"{k} {v}" for k, v in sorted((evidence.get("family_wins")
                                                        or {}).items()))
        lines.append(f"  Calibration: metric shift "
                     f"{cal.get('metric_shift_per_doubling', 0.0):+.4f} and extra sd "
                     f"{(cal.get('extra_sd_at') or {}).get('2x', 0.0):.4f} per doubling of the "
                     f"budget; curve family winning per curve: {wins or 'none'}.")
    return lines


def _fitted_rows(band: CurveBand, display: np.ndarray, method: str, strategy: str,
                 metric: str) -> list[dict]:
    """The forecast points of one curve at the budgets ``display`` (points of its grid)."""
    idx = np.searchsorted(band.grid, display)
    rows = []
    for i in idx:
        rows.append({"method": method, "strategy": strategy, "metric": metric,
                     "n_labels": int(band.grid[i]), "mean": float(1 - band.point[i]),
                     "low": float(1 - band.high[i]), "high": float(1 - band.low[i]),
                     "measured": False, "extrapolated": bool(band.extrapolated[i]),
                     "fit": band.fit.kind, "flagged": band.fit.flagged, "n_repeats": 0,
                     "interval": band.interval, "sd": None, "min": None, "max": None})
    return rows


def _owned(request: PlanRequest, record: StudyRecord, warnings: list[str]) -> int:
    if request.labels_owned is not None:
        return int(request.labels_owned)
    if record.n_labeled is not None:
        # A budget counts training labels. A fixed holdout's labels are spent on evaluation
        # and stay there, so they do not count towards any budget; under cross-fitting (or
        # with a separate test file) every labeled row of the table can train the model.
        if record.evaluation_protocol in ("cross_fit", "test_file"):
            return int(record.n_labeled)
        return max(0, int(record.n_labeled) - int(record.holdout_rows or 0))
    warnings.append("the number of labels owned is unknown (no n_labeled in study.json); "
                    "assumed 0, pass --labels-owned to set it")
    return 0


def label_counts(record: StudyRecord, labels_owned: int, to_buy: int, *,
                 owned_given: bool = False) -> dict:
    """Every label of the decision: owned for training, kept for evaluation, to buy.

    ``text`` is the short line the plan shows ("You own 300 labels: 250 in the table + 50
    from round 1; all train the final model."); ``evaluation_text`` says how they are
    evaluated. Under cross-fitting no label is set aside: each labeled row of the table
    trains the model in some repeats and is evaluated in the others; rows returned by
    labeling rounds only train.
    """
    n_lab = record.n_labeled
    out: dict = {"protocol": record.evaluation_protocol, "owned_for_training": int(labels_owned),
                 "to_buy": int(to_buy), "kept_for_evaluation": 0}
    source = " (from --labels-owned)" if owned_given else ""
    if record.evaluation_protocol == "cross_fit" and n_lab is not None and not owned_given:
        k = record.folds
        rounds = min(int(record.n_round_rows or 0), int(n_lab))
        table = n_lab - rounds  # the rows the folds are dealt from
        out["evaluated_by_cross_fit"] = int(table)
        folds = (f" ({k} folds: in each repeat about {table - table // k:,} train and "
                 f"{table // k:,} are evaluated)" if k and k > 1 else "")
        out["evaluation_text"] = (
            f"cross-fitting: each of the {table:,} labeled rows in the table trains the model "
            f"in some repeats and is evaluated in others{folds}; none is kept aside"
            + (f"; the {rounds:,} returned by labeling rounds only train." if rounds else "."))
        if rounds:
            out["returned_by_rounds"] = rounds
            out["text"] = (f"You own {n_lab:,} labels: {table:,} in the table + {rounds:,} "
                           f"from {_round_names(record)}; all train the final model.")
        else:
            out["text"] = (f"You own {n_lab:,} labels, all in the table; all train the final "
                           "model.")
    elif record.evaluation_protocol == "test_file":
        n_eval = int(record.n_eval or 0)
        out["kept_for_evaluation"] = n_eval
        out["text"] = (f"You own {labels_owned:,} training labels{source}; the test file's "
                       f"{n_eval:,} labels are for evaluation only.")
    else:
        kept = int(record.holdout_rows or 0) if record.evaluation_protocol != "cross_fit" else 0
        out["kept_for_evaluation"] = kept
        out["text"] = (f"You own {labels_owned:,} training labels{source}"
                       + (f" and {kept:,} kept aside for evaluation (the holdout)" if kept
                          else "") + ".")
    out["in_all"] = out["owned_for_training"] + out["kept_for_evaluation"] + out["to_buy"]
    return out


def _round_names(record: StudyRecord) -> str:
    """"round 1" or "rounds 1-3": the labeling rounds recorded in study.json."""
    rounds = (record.evaluation_block or {}).get("rounds") or []
    numbers = sorted({int(r["round"]) for r in rounds
                      if isinstance(r, dict) and isinstance(r.get("round"), int)})
    if not numbers:
        return "labeling rounds"
    if len(numbers) == 1:
        return f"round {numbers[0]}"
    return f"rounds {numbers[0]}\u2013{numbers[-1]}"


def order_options(options: list[Option], confidence: float) -> list[Option]:
    """The options in the order the plan shows them: what can be bought first.

    Options that meet the target with ``confidence``, cheapest first; then those that buy
    labels, most likely to meet the target first; last the budgets the labels owned already
    cover (nothing to buy) that do not meet it.
    """
    def key(o: Option) -> tuple:
        reaches = o.probability >= confidence
        group = 0 if reaches else (1 if o.n_new > 0 else 2)
        return (group, o.cost if reaches else -o.probability, o.n_labels, o.method,
                o.strategy)

    return sorted(options, key=key)


def _rivals(chosen: Option | None, fc: Forecasts, metric: str) -> list[Option]:
    """Other curves' predictions at the chosen budget whose interval overlaps the chosen's."""
    if chosen is None:
        return []
    at = []
    for (method, strategy, m), band in fc.bands.items():
        if m != metric:
            continue
        i = np.flatnonzero(band.grid == chosen.n_labels)
        if i.size == 0:
            continue
        j = int(i[0])
        at.append(Option(method, strategy, chosen.n_labels, float(1 - band.point[j]),
                         float(1 - band.high[j]), float(1 - band.low[j]), float("nan"),
                         float("nan"), bool(band.extrapolated[j]), fit=band.fit.kind))
    return sorted(overlapping(chosen, at), key=lambda o: -o.mean)


def _overlap_note(chosen: Option | None, rivals: list[Option], metric: str,
                  reached: bool) -> str:
    """Which other curves the study cannot tell from the choice at its budget."""
    if chosen is None or not rivals:
        return ""
    def one(o: Option) -> str:
        return f"{o.method} ({o.strategy}) {forecast_value(o.mean)}"
    names = ", ".join(one(o) for o in rivals[:4])
    more = f" and {len(rivals) - 4} more" if len(rivals) > 4 else ""
    return (f"at {chosen.n_labels:,} labels the {INTERVAL:.0%} intervals of {names}{more} "
            f"overlap that of {one(chosen)}: the study cannot tell these {metric} values "
            "apart, so any of them may do as well"
            + ("; of the options as cheap as the choice that are sure enough, the plan takes "
               "the simplest (no unsupervised stage first, then the quickest to fit)" if reached
               else "; of equal predictions (to three decimals) the plan names the simplest"))


def _evaluation_note(record: StudyRecord, eval_rows: float | None) -> str:
    """One sentence on how the evaluation rows' sampling error enters the intervals."""
    if record.evaluation_protocol == "cross_fit":
        text = ("each repeat was scored on its own fold, so the spread over repeats holds the "
                "evaluation rows' sampling error")
        if eval_rows:
            text += (f"; repeats of the same fold share rows, an effective {eval_rows:.0f} "
                     "shared rows' binomial error is added")
        if record.eval_floor_rows:
            text += (f"; where the spread is below the binomial error of the "
                     f"{record.eval_floor_rows} rows evaluated in all (few folds underestimate "
                     "it), the band is widened to it")
        return text
    if eval_rows:
        return (f"every repeat was scored on the same {eval_rows:.0f} rows; their binomial "
                "sampling error is added to every interval")
    return ("the number of evaluation rows is unknown (no study.json), so no evaluation error "
            "is added beyond the spread over repeats")


def _evidence(fc: Forecasts, record: StudyRecord, eval_rows: float | None, rivals: list[Option],
              note: str, pick: Option | None) -> dict:
    """The plan's evidence: backtests per ratio, calibration, curve families, the choice."""
    cal = fc.calibration.to_dict()
    extra = float(np.hypot(fc.calibration.sd_per_doubling, fc.calibration.shift_se))
    cal["extra_sd_at"] = {"2x": extra, "4x": 2 * extra}
    cal["metric_shift_at"] = {"2x": -fc.calibration.shift_per_doubling,
                              "4x": -2 * fc.calibration.shift_per_doubling}
    winners: dict[str, int] = {}
    for cm in fc.curve_models:
        if cm["winner"]:
            winners[cm["winner"]] = winners.get(cm["winner"], 0) + 1
    continuation, sentence = None, ""
    if fc.prior is not None:
        continuation = {
            "tables": fc.prior.n_tasks, "curves": fc.prior.n_curves, "source": fc.prior.source,
            "track": dict(fc.prior.track),
            # the stated probability beyond the largest measured budget is Phi(z - margin)
            # where the forecast alone gives Phi(z); learned from the corpus's decisions
            "decision_margin": fc.prior.decision_margin,
            "decisions": dict(fc.prior.decisions),
            "curves_continued": {f"{m} ({s})": v for (m, s, met), v in fc.continued.items()
                                 if met == fc.metric},
        }
        if pick is not None:
            model = fc.models.get((pick.method, pick.strategy))
            if model is not None and model.levels.size:
                sentence = track_sentence(fc.prior, pick.n_labels / float(model.levels[-1]))
    return {
        "continuation": continuation,
        "track_sentence": sentence,
        "evaluation": {
            "protocol": record.evaluation_protocol,
            "shared_eval_rows": eval_rows,
            "eval_floor_rows": record.eval_floor_rows,
            "note": _evaluation_note(record, eval_rows),
        },
        "calibration": cal,
        "backtest_by_ratio": fc.by_ratio,
        "backtests": fc.records,
        "curve_families": {name: fam.formula for name, fam in FAMILIES.items()},
        "curve_models": fc.curve_models,
        "family_wins": winners,
        "selection": {
            "winners_curse": ("each method's level at the largest measured budget is shrunk "
                              "toward the mean of the methods (positive-part James-Stein, "
                              "Efron & Morris 1975); the shift moves its whole curve"),
            "overlap": [o.to_dict() for o in rivals],
            "note": note,
            # share of each curve's own deviation from the methods' mean that is kept at the
            # chosen (or best) budget: 1 = not shrunk
            "shrinkage_factor": ({f"{m} ({s})": f[pick.n_labels]
                                  for (m, s), f in fc.shrinkage.items()
                                  if pick is not None and pick.n_labels in f}),
        },
    }


@dataclass(frozen=True)
class PlanInputs:
    """Everything a plan is built from, read from the study folder by :func:`read_inputs`."""

    study_dir: Path
    cells: pd.DataFrame = field(repr=False)
    state: dict
    record: StudyRecord = field(repr=False)
    candidates: dict | None = field(repr=False)
    #: earlier plans (oldest first) with their forecast points
    earlier: tuple[tuple[dict, pd.DataFrame | None], ...] = field(repr=False)
    measured: pd.DataFrame | None = field(repr=False)
    #: the plan.json this plan replaces ({} when none)
    previous: dict = field(repr=False)


def read_inputs(study_dir: str | os.PathLike[str]) -> PlanInputs:
    """Read what a plan needs from ``study_dir`` (cells.csv required; study.json,
    data_card.json, candidates.npz, the kept plans and curves.csv when present)."""
    from ..study import check_exports

    study_dir = Path(study_dir)
    check_exports(study_dir, command="plan")  # a hand-edited cells.csv / curves.csv: one line
    raw = read_cells_file(study_dir)
    cells = read_cells(study_dir, METRICS, raw)
    study = read_json(study_dir / "study.json")
    state = study_state(study, raw)  # cells.csv and study.json are read once
    record = StudyRecord.with_card(study, read_json(study_dir / "data_card.json"))
    earlier = tuple((p, read_forecast(study_dir, p)) for p in list_plans(study_dir))
    return PlanInputs(study_dir=study_dir, cells=cells, state=state, record=record,
                      candidates=read_candidates(study_dir), earlier=earlier,
                      measured=read_measured(study_dir),
                      previous=read_json(study_dir / "plan.json"))


def make_plan(
    study_dir: str | os.PathLike[str],
    request: PlanRequest,
    *,
    select_rows: Callable[..., object] | None = None,
    n_boot: int = N_BOOT_PLAN,
    sheet_format: str = "csv",
    now: datetime | None = None,
) -> Plan:
    """Fit learning curves to a finished study, price the options, choose, and write.

    :func:`read_inputs`, then :func:`build_plan` (which writes nothing), then
    :func:`write_plan`.

    Parameters
    ----------
    study_dir : study folder with ``cells.csv`` (``study.json``, ``data_card.json`` and
        ``candidates.npz`` are used when present).
    request : the target, confidence and prices.
    select_rows : row-selection function with the signature of
        ``semisup.selection.select_rows``; default that function.
    n_boot : bootstrap resamples for the plan's metric and its backtest (half as many for
        the other metrics, whose curves only feed the report).
    sheet_format : "csv" (``label_next.csv``) or "xlsx" (``label_next.xlsx``, needs the
        ``excel`` extra).
    now : the plan's time (its name); default the current UTC time.

    Returns
    -------
    Plan; ``plans/<name>.json``, ``plans/<name>.forecast.csv``, ``plan.json`` and the
    annotator sheet are written in ``study_dir``.
    """
    if not isinstance(request, PlanRequest):
        raise PlanError(f"request must be a PlanRequest, got {type(request).__name__}")
    check_sheet_format(sheet_format)
    plan = build_plan(read_inputs(study_dir), request, select_rows=select_rows, n_boot=n_boot,
                      now=now)
    return write_plan(plan, sheet_format=sheet_format)


def build_plan(inputs: PlanInputs, request: PlanRequest, *,
               select_rows: Callable[..., object] | None = None, n_boot: int = N_BOOT_PLAN,
               now: datetime | None = None) -> Plan:
    """The plan for ``request`` from what :func:`read_inputs` read; writes no file.

    ``select_rows``, ``n_boot`` and ``now`` as for :func:`make_plan`; returns the frozen
    :class:`Plan` that :func:`write_plan` writes.
    """
    study_dir, record, cells_all = inputs.study_dir, inputs.record, inputs.cells
    made_at = (now or datetime.now(timezone.utc)).astimezone(timezone.utc)
    warnings: list[str] = []
    metric = request.metric
    if metric not in cells_all.columns:
        raise PlanError(f"{study_dir / 'cells.csv'} has no column {metric!r}; choose a target "
                        f"on one of {', '.join(m for m in METRICS if m in cells_all.columns)}")

    n_total = len(cells_all)
    cells = cells_all[cells_all["status"] == "ok"]
    n_bad = n_total - len(cells)
    if n_bad:
        warnings.append(f"{n_bad} of {n_total} cells did not finish (failed or skipped) and "
                        "are left out of the curves")
    if cells.empty or cells[metric].notna().sum() == 0:
        raise PlanError(f"{study_dir / 'cells.csv'} has no finished cell with a value of "
                        f"{metric!r}; run or repair the study first "
                        "('semisup study ... --rerun-failed')")

    labels_owned = _owned(request, record, warnings)
    label_price = expected_label_price(request.cost_per_label, request.class_costs,
                                       record.class_counts if request.class_costs else None)
    warnings.extend(data_warnings(record))

    metrics_present = [m for m in METRICS if m in cells.columns and cells[m].notna().any()]
    for m in metrics_present:
        vals = cells[m].dropna()
        if np.any((vals < 0) | (vals > 1)):
            bad = cells.loc[vals.index[(vals < 0) | (vals > 1)][0], "method"]
            raise PlanError(f"{study_dir / 'cells.csv'} column {m!r} has values outside "
                            f"[0, 1] for method {bad!r}; rerun the study")
    eval_rows = record.shared_eval_rows
    fc = forecast_all(
        cells, metric, metrics_present, seed=record.seed or 0, interval=INTERVAL, n_boot=n_boot,
        eval_rows=eval_rows, eval_floor_rows=record.eval_floor_rows, labels_owned=labels_owned,
        option_args={"target": request.target, "confidence": request.confidence,
                     "label_price": label_price, "labels_owned": labels_owned,
                     "cost_per_round": request.cost_per_round})
    warnings.extend(fc.warnings)
    curves = _forecast_table(cells, fc, metric, metrics_present)
    backtests = fc.backtest
    n_max = {f"{k[0]} ({k[1]})": int(mdl.levels[-1]) for k, mdl in fc.models.items()}

    families = method_families()
    prefer = simplicity(families, cells)
    chosen, runner_up = choose(fc.options, request.confidence, prefer=prefer)
    best = chosen if chosen is not None else best_effort(fc.options, prefer=prefer)
    options = order_options(fc.options, request.confidence)
    if chosen is not None and chosen.extrapolated:
        warnings.append(f"the chosen budget ({chosen.n_labels}) lies beyond the largest measured "
                        "budget; its prediction is extrapolated and its interval widened")
    if chosen is not None and chosen.flagged:
        warnings.append("the chosen curve uses the monotone fallback, not a fitted curve "
                        "family")
    pick = chosen if chosen is not None else best
    unlabeled = unlabeled_summary(
        measured_gains(cells, metric, families,
                       strategy=pick.strategy if pick is not None else "random",
                       level=INTERVAL), METRIC_WORDS.get(metric, metric), INTERVAL)
    rivals = _rivals(pick, fc, metric)
    note = _overlap_note(pick, rivals, metric, chosen is not None)
    for b in backtests:
        if b["covered"] is False:
            warnings.append(f"backtest of {b['method']} ({b['strategy']}): the interval did not "
                            f"cover the measured {metric} at {b['n_labels']} labels "
                            f"(error {b['error']:+.3f}); treat its extrapolation with care")

    # Rows to label next. Unreachable target: no purchase list unless --next asks for one
    # (then ranked the way the best option would pick them).
    strategy = best.strategy if best is not None else "random"
    if request.n_next is not None:
        n_rows = int(request.n_next)
    elif chosen is not None:
        n_rows = chosen.n_new
    else:
        n_rows = 0
    select = select_rows if select_rows is not None else default_select_rows()
    ranking = rank_rows(
        inputs.candidates, strategy, n_rows,
        seed=derive_seed(record.seed or 0, "plan", "label_next", strategy), select_rows=select)
    warnings.extend(ranking.warnings)

    state = inputs.state
    prev_status = PlanStatus(inputs.previous, state) if inputs.previous else None
    earlier_plans = [p for p, _ in inputs.earlier]
    return Plan(
        request=request, study_dir=study_dir, chosen=chosen, runner_up=runner_up, best=best,
        options=tuple(options), backtest=tuple(backtests), warnings=tuple(warnings),
        labels_owned=labels_owned, label_price=label_price,
        label_next=ranking.table[LABEL_NEXT_COLUMNS], label_next_strategy=ranking.strategy,
        label_next_weighted=ranking.weighted_to_pool, unlabeled=unlabeled,
        curves=curves, n_max=n_max,
        evidence=_evidence(fc, record, eval_rows, rivals, note, pick),
        labels=label_counts(record, labels_owned, chosen.n_new if chosen is not None else 0,
                            owned_given=request.labels_owned is not None),
        label_next_written=chosen is not None or request.n_next is not None,
        name=plan_name(made_at, state), made_at=made_at.isoformat(), state=dict(state),
        history=tuple(_history_entry(p, state) for p in earlier_plans),
        track=track_record(inputs.earlier, inputs.measured),
        previous_stale=(f"plan ({prev_status.name}) was made from another state of the "
                        f"study: {prev_status.reason}"
                        if prev_status is not None and prev_status.stale else ""),
        previous=previous_choice(earlier_plans, state, curves, options, metric),
        record=inputs.record)


def write_plan(plan: Plan, *, sheet_format: str = "csv") -> Plan:
    """Write ``plan`` into its study folder: ``plans/<name>.json`` and its forecast points,
    ``plan.json`` and the annotator sheet as ``sheet_format`` (or remove an older sheet when
    the plan lists no rows). Returns the plan as written (with the sheet's format and
    warnings)."""
    check_sheet_format(sheet_format)
    plan = replace(plan, sheet_format=sheet_format)
    study_dir = plan.study_dir
    kept = study_dir / PLANS_FOLDER
    atomic_write_text(kept / f"{plan.name}{FORECAST_SUFFIX}", plan.curves.to_csv(index=False))
    if plan.label_next_written:
        table, id_column, label_column, sw = read_study_table(plan.record)
        sheet, more = annotator_sheet(plan.label_next, table, id_column=id_column,
                                      label_column=label_column, record=plan.record)
        if sw or more:
            plan = replace(plan, warnings=(*plan.warnings, *sw, *more))
        write_sheet(sheet, study_dir, plan.sheet_format)
    else:
        # an older plan's list must not be taken for this plan's
        remove_sheets(study_dir)
    text = json.dumps(_jsonable(plan.to_dict()), indent=2) + "\n"
    atomic_write_text(kept / f"{plan.name}.json", text)
    atomic_write_text(study_dir / "plan.json", text)
    log.info("plan written to %s", study_dir / "plan.json")
    return plan


def _forecast_table(cells: pd.DataFrame, fc: Forecasts, metric: str,
                    metrics_present: list[str]) -> pd.DataFrame:
    """The forecast points the plan keeps: the plan's metric on its whole grid (the track
    record reads budgets off it), the report-only metrics at the display budgets."""
    curve_rows: list[dict] = []
    for (method, strategy), grp in cells.groupby(["method", "strategy"], sort=True):
        for m in metrics_present:
            if grp[m].notna().sum() == 0 or (method, strategy, m) not in fc.bands:
                continue
            band = fc.bands[(method, strategy, m)]
            curve_rows.extend(_fitted_rows(band, band.grid if m == metric
                                           else fc.displays[(method, strategy, m)], method,
                                           strategy, m))
    curves = pd.DataFrame(curve_rows)
    if curves.empty:
        return pd.DataFrame(columns=CURVE_COLUMNS)
    extra_cols = [c for c in curves.columns if c not in CURVE_COLUMNS]
    return curves[CURVE_COLUMNS + extra_cols]


def previous_choice(earlier: list[dict], state: Mapping, curves: pd.DataFrame,
                    options: list[Option], metric: str) -> dict:
    """Why the goal moved: the latest plan made from an earlier study state, what it expected
    at its choice, and this plan's forecast (and chance, when that budget is an option) for
    the same method, strategy and budget. {} without such a plan (pure)."""
    state_id = state.get("id")
    older = [p for p in earlier
             if ((p.get("state") or {}).get("id") != state_id)
             and str((p.get("target") or {}).get("metric")) == metric]
    if not older:
        return {}
    p = older[-1]
    pick = p.get("chosen") or p.get("best")
    if not isinstance(pick, Mapping) or not pick.get("method"):
        return {}
    method, strategy = str(pick["method"]), str(pick.get("strategy") or "random")
    n = int(pick.get("n_labels") or 0)
    out = {"plan": p.get("name"), "method": method, "strategy": strategy, "n_labels": n,
           "expected": (pick.get("predicted") or {}).get("mean"), "now": None,
           "probability": None}
    if not curves.empty and n > 0:
        fc = curves[(curves["metric"] == metric) & (curves["method"] == method)
                    & (curves["strategy"] == strategy)].sort_values("n_labels")
        budgets = fc["n_labels"].to_numpy(float)
        if len(budgets) and budgets[0] <= n <= budgets[-1]:
            out["now"] = float(np.interp(np.log(n), np.log(budgets),
                                         fc["mean"].to_numpy(float)))
    same = next((o for o in options if (o.method, o.strategy, o.n_labels)
                 == (method, strategy, n)), None)
    if same is not None:
        out["now"], out["probability"] = same.mean, same.probability
    return out


def _history_entry(p: dict, state: dict) -> dict:
    """One earlier plan in the new plan's history: what it chose and whether it is stale."""
    chosen = p.get("chosen") or p.get("best") or {}
    status = PlanStatus(p, state)
    return {"name": p.get("name"), "made_at": p.get("made_at"),
            "state_id": (p.get("state") or {}).get("id"), "stale": status.stale,
            "target": p.get("target"), "reached": p.get("reached"),
            "choice": {k: chosen.get(k) for k in ("method", "strategy", "n_labels",
                                                   "predicted", "probability")}
            if chosen else None}


def _jsonable(obj):
    """Replace NaN/inf by None and numpy scalars by Python ones (plain JSON)."""
    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if np.isfinite(v) else None
    return obj
