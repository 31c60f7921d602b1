"""The whole pipeline on the bundled demo table, two labeling rounds long.

Scenario (ours, invented for the demo): a records office is digitising hand-filled forms. Each
row is one 8x8 crop of a digit box scanned from a form; a clerk has typed in the digit for a
few crops and the rest are unread. The office wants to know how many more crops to have the
clerk read, at an invented price per crop, before a classifier reaches its target accuracy.
The pixel data are scikit-learn's copy of the UCI handwritten digits (real open data); the
form ids, scan batches, ink density and price are invented.

The story: study the few labels, plan (a reachable target), hand the plan's sheet to a
simulated clerk (who fills in the table's own hidden digits), take the labels back
(``add_labels``), grow the study, plan again, and report, with the first plan's forecasts
scored against what the second round measured (the track record).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from ._atomic import atomic_write_text
from ._escape import restore_cell
from .data import (
    DEMO_ID_COLUMN,
    DEMO_LABEL_COLUMN,
    demo_table,
    make_card,
    write_card,
    write_demo_table,
)
from .plan import PlanRequest, make_plan
from .report import write_report
from .study import ADDED_LABELS_FILE, StudySpec, add_labels, run_study

__all__ = ["DEMO_ID_COLUMN", "DEMO_LABEL_COLUMN", "DemoResult", "run_demo"]

log = logging.getLogger(__name__)

#: Invented price of one clerk-read crop (a few seconds of clerk time), for the demo only.
DEMO_COST_PER_LABEL = 0.25
DEMO_TARGET = ("accuracy", 0.96)
#: Labels the clerk has typed when the demo starts (the first of the table's 400).
DEMO_START_LABELS = 250
#: The demo's study, kept small so both rounds run in about two minutes on 2 cores: a
#: supervised baseline, a latent-feature method on the VAE and a classic semi-supervised one.
DEMO_STUDY = {"methods": ["supervised-logreg", "latent-logreg", "label-spreading"],
              "strategies": ["random"], "trials": 2}
#: Rows the clerk reads in the round when the plan asks for more (a round's size; the plan
#: may want more in all, and the next plan says what is still missing).
DEMO_ROUND_ROWS = 150


@dataclass
class DemoResult:
    out_dir: Path
    table: Path
    card: Path
    study_dir: Path
    report: Path
    plan_summary: str
    study_summary: str
    files: list[Path] = field(default_factory=list)
    rounds: list[str] = field(default_factory=list)

    def summary(self) -> str:
        lines = [
            f"demo table:  {self.table}",
            f"data card:   {self.card}",
            f"study:       {self.study_dir}",
            "",
            *self.rounds,
            f"report:      {self.report}",
            "The demo's prices and scenario are invented; the pixel data are real (UCI digits).",
        ]
        return "\n".join(lines)


def _clerk(sheet_path: Path, returned: Path, truth: pd.Series) -> int:
    """The simulated clerk: fills the sheet's label column with the hidden digits."""
    sheet = pd.read_csv(sheet_path, dtype=str, keep_default_na=False)
    ids = sheet["row_id"].map(restore_cell)
    sheet[DEMO_LABEL_COLUMN] = truth.loc[ids].to_numpy()
    atomic_write_text(returned, sheet.to_csv(index=False, lineterminator="\r\n"))
    return len(sheet)


def run_demo(out_dir: str | Path = "semisup-demo", *, jobs: int | None = None) -> DemoResult:
    """Card, study, plan, a simulated labeling round, the grown study, a new plan and the
    report (with the first plan's track record) under ``out_dir``.

    Running it again starts the two rounds over (the first round's study is restarted once
    labels were added); an interrupted first round resumes.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    table = write_demo_table(out / "digits_forms.csv", n_labeled=DEMO_START_LABELS)
    log.info("demo table written to %s", table)
    truth = demo_table(all_labeled=True).set_index(DEMO_ID_COLUMN)[DEMO_LABEL_COLUMN]

    table_kwargs = {"label_column": DEMO_LABEL_COLUMN, "id_column": DEMO_ID_COLUMN}
    card_md, _ = write_card(make_card(table, **table_kwargs), out / "digits_forms.card.md")
    spec = StudySpec.build(config=None, overrides={"data": table, **table_kwargs, **DEMO_STUDY})
    study_dir = out / "study"
    metric, target = DEMO_TARGET
    request = PlanRequest(metric=metric, target=target, cost_per_label=DEMO_COST_PER_LABEL)
    rounds: list[str] = []

    restart = (study_dir / ADDED_LABELS_FILE).exists()  # an earlier demo's second round
    study = run_study(spec, study_dir, jobs=jobs, restart=restart)
    plan = make_plan(study_dir, request)
    rounds += [f"== Round 1: {DEMO_START_LABELS} labels typed by the clerk", "",
               study.summary(), "", plan.summary(), ""]
    want = plan.chosen.n_new if plan.chosen is not None else 0
    if want <= 0:  # nothing to buy: the demo still shows a round, with a sheet asked for
        want = DEMO_ROUND_ROWS
    n_rows = min(want, DEMO_ROUND_ROWS)
    if plan.label_next_written is False or len(plan.label_next) != n_rows:
        request_round = PlanRequest(metric=metric, target=target,
                                    cost_per_label=DEMO_COST_PER_LABEL, n_next=n_rows)
        plan = make_plan(study_dir, request_round)
    returned = out / "label_next_returned.csv"
    n_back = _clerk(study_dir / "label_next.csv", returned, truth)
    added = add_labels(study_dir, returned)
    rounds += [f"== The clerk reads the {n_back} listed crops (the demo's hidden digits) and "
               f"returns {returned.name}: {added.summary()}", ""]

    study = run_study(spec, study_dir, jobs=jobs)
    plan = make_plan(study_dir, request)
    report = write_report(study_dir)
    rounds += [f"== Round 2: {DEMO_START_LABELS + added.n_added} labels", "",
               study.summary(), "", plan.summary(), ""]
    return DemoResult(
        out_dir=out,
        table=table,
        card=card_md,
        study_dir=study_dir,
        report=report,
        plan_summary=plan.summary(),
        study_summary=study.summary(),
        rounds=rounds,
    )
