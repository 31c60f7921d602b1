"""The study report: one self-contained HTML file with embedded figures, plus PNG and SVG
files.

``write_report(study_dir)`` reads what the study and the plan wrote and renders it; it
computes no new numbers.
"""

from __future__ import annotations

from ._figures import PALETTE, BudgetFacts, Rendered, curve_figure
from ._html import ReportContent, Section, Table, render_html
from ._write import CAUTIONS, write_report

__all__ = [
    "CAUTIONS",
    "PALETTE",
    "BudgetFacts",
    "Rendered",
    "ReportContent",
    "Section",
    "Table",
    "curve_figure",
    "render_html",
    "write_report",
]
