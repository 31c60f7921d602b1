"""The whole pipeline on the bundled demo table.

Scenario (ours, invented for the demo): a records office is digitising hand-filled forms. Each
row is one 8x8 crop of a digit box scanned from a form; a clerk has typed in the digit for a few
hundred crops and the rest are unread. The office wants to know how many more crops to have
the clerk read, at an invented price per crop, before a classifier reaches 95% accuracy. The
pixel data are scikit-learn's copy of the UCI handwritten digits (real open data); the form ids,
scan batches, ink density and price are invented.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path

from .data import DEMO_ID_COLUMN, DEMO_LABEL_COLUMN, make_card, write_card, write_demo_table
from .plan import PlanRequest, make_plan
from .report import write_report
from .study import StudySpec, run_study

__all__ = ["DemoResult", "run_demo", "DEMO_LABEL_COLUMN", "DEMO_ID_COLUMN"]

log = logging.getLogger(__name__)

#: Invented price of one clerk-read crop (a few seconds of clerk time), for the demo only.
DEMO_COST_PER_LABEL = 0.25
DEMO_TARGET = ("accuracy", 0.95)


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

    def summary(self) -> str:
        lines = [
            f"demo table:  {self.table}",
            f"data card:   {self.card}",
            f"study:       {self.study_dir}",
            "",
            self.study_summary,
            "",
            self.plan_summary,
            "",
            f"report:      {self.report}",
            "The demo's prices and scenario are invented; the pixel data are real (UCI digits).",
        ]
        return "\n".join(lines)


def run_demo(out_dir: str | Path = "semisup-demo", *, jobs: int | None = None) -> DemoResult:
    """Write the demo table, its data card, a study, a plan and a report under ``out_dir``.

    Running it again resumes the study instead of starting over.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    table = write_demo_table(out / "digits_forms.csv")
    log.info("demo table written to %s", table)

    table_kwargs = {"label_column": DEMO_LABEL_COLUMN, "id_column": DEMO_ID_COLUMN}
    card_md, _ = write_card(make_card(table, **table_kwargs), out / "digits_forms.card.md")

    spec = StudySpec.build(
        config=None,
        overrides={"data": table, **table_kwargs, "strategies": ["random", "representative"]},
    )
    study_dir = out / "study"
    study = run_study(spec, study_dir, jobs=jobs)

    metric, target = DEMO_TARGET
    plan = make_plan(
        study_dir,
        PlanRequest(metric=metric, target=target, cost_per_label=DEMO_COST_PER_LABEL),
    )
    report = write_report(study_dir)
    return DemoResult(
        out_dir=out,
        table=table,
        card=card_md,
        study_dir=study_dir,
        report=report,
        plan_summary=plan.summary(),
        study_summary=study.summary(),
    )
