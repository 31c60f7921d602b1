"""The annotator's sheet: ``label_next.csv`` with the rows' own data and a label to fill in.

The plan ranks rows (``rank, row_id, reason``, :mod:`._label_next`); this module joins each
ranked row to its own columns in the study's table, adds an empty column named after the
study's label column and a column naming the study the sheet belongs to
(:data:`semisup.study.SHEET_STUDY_COLUMN`, checked when labels come back), and neutralises
every cell a spreadsheet would run as a formula (:func:`semisup._escape.neutralise_frame`).
"""

from __future__ import annotations

import logging
from pathlib import Path

import pandas as pd

from .._atomic import atomic_path
from .._errors import PlanError, SemisupError
from .._escape import neutralise_frame, restore_cell
from .._tables_out import write_table
from ..study import SHEET_STUDY_COLUMN, StudyRecord, study_id
from ._label_next import LABEL_NEXT_COLUMNS

__all__ = ["SHEET_FORMATS", "annotator_sheet", "check_sheet_format", "read_study_table",
           "remove_sheets", "sheet_name", "write_sheet"]

log = logging.getLogger(__name__)


def read_study_table(record: StudyRecord) -> tuple[pd.DataFrame | None, str | None, str | None,
                                                list[str]]:
    """The study's own table, indexed by row id, with its id and label column names.

    Returns ``(table or None, id_column, label_column, warnings)``; the table is None (and a
    warning says why) when study.json does not name it or it cannot be read any more.
    """
    from ..data import read_table
    from ..study import recorded_table, study_table

    spec, study = record.spec, record.raw
    path = recorded_table(study, ".")[0]  # by its absolute path, whatever the current folder
    label_column = spec.get("label_column")
    id_column = spec.get("id_column")
    if not path:
        return None, id_column, label_column, [
            "study.json does not name the study's table, so label_next.csv lists row ids "
            "without the rows' data"]
    check = study_table(".", study, strict=False)
    if check.changed:
        return None, id_column, label_column, [
            f"the study's table {check.path} changed since the study read it (its SHA-256 "
            "differs from study.json's), so label_next.csv lists row ids without the rows' "
            "data; restore the table or run a new study on it"]
    try:
        frame = read_table(Path(path), delimiter=spec.get("delimiter"),
                           encoding=spec.get("encoding"),
                           text_columns=(id_column,) if id_column else ())
    except (SemisupError, OSError) as exc:
        return None, id_column, label_column, [
            f"the study's table {path} cannot be read ({exc}), so label_next.csv lists row "
            "ids without the rows' data"]
    frame.columns = [str(c) for c in frame.columns]
    if id_column and id_column in frame.columns:
        ids = frame[id_column].astype(str)
    else:
        ids = pd.Series(range(len(frame))).astype(str)
    frame = frame.set_axis(ids.to_numpy(), axis=0)
    return frame, id_column, label_column, []


def annotator_sheet(ranked: pd.DataFrame, table: pd.DataFrame | None, *,
                    id_column: str | None, label_column: str | None,
                    record: StudyRecord) -> tuple[pd.DataFrame, list[str]]:
    """The sheet an annotator fills in, neutralised for spreadsheets.

    Columns: ``rank, row_id, reason``, the label column (empty, named after the study's label
    column, or ``label``), the row's own columns from ``table`` (its id and label columns
    left out: ``row_id`` is the id and the label is to be filled in), and last
    :data:`SHEET_STUDY_COLUMN`, the study's id.
    """
    warnings: list[str] = []
    label = str(label_column) if label_column else "label"
    taken = set(LABEL_NEXT_COLUMNS) | {label, SHEET_STUDY_COLUMN}
    sheet = ranked[LABEL_NEXT_COLUMNS].copy()
    for column in ("row_id", "reason"):  # ranked rows come neutralised; neutralise once
        sheet[column] = sheet[column].map(restore_cell)
    sheet[label] = ""
    if table is not None and not sheet.empty:
        own = [c for c in table.columns if c not in (id_column, label_column)]
        clash = [c for c in own if c in taken]
        if clash:
            warnings.append(f"the table's column(s) {', '.join(map(repr, clash))} share a name "
                            "with a column of label_next.csv and are left out of it")
        own = [c for c in own if c not in taken]
        ids = sheet["row_id"].astype(str)
        found = ids.isin(table.index)
        if not found.all():
            warnings.append(f"{int((~found).sum())} listed row ids are not in the study's "
                            "table any more; their data columns are left empty")
        rows = table.reindex(ids.to_numpy())[own].reset_index(drop=True)
        sheet = pd.concat([sheet.reset_index(drop=True), rows], axis=1)
    sheet[SHEET_STUDY_COLUMN] = study_id(record) or ""
    # Ids, values and column names like "=HYPERLINK(...)" would run as formulas when an
    # annotator opens the sheet (OWASP, "CSV Injection").
    return neutralise_frame(sheet), warnings


#: Formats of the annotator sheet: file name in the study folder by format.
SHEET_FORMATS = {"csv": "label_next.csv", "xlsx": "label_next.xlsx"}


def sheet_name(sheet_format: str) -> str:
    """The sheet's file name for ``sheet_format`` ("csv" or "xlsx"); PlanError otherwise."""
    try:
        return SHEET_FORMATS[sheet_format]
    except KeyError:
        raise PlanError(f"sheet format {sheet_format!r} is not known; use one of "
                        f"{', '.join(SHEET_FORMATS)}") from None


def check_sheet_format(sheet_format: str) -> None:
    """PlanError before any work when ``sheet_format`` cannot be written here."""
    sheet_name(sheet_format)
    if sheet_format == "xlsx":
        try:
            import openpyxl  # noqa: F401
        except ImportError:
            raise PlanError("writing the sheet as .xlsx needs the optional package openpyxl; "
                            "install it with pip install 'semisup[excel]', or leave out "
                            "--sheet-format to write label_next.csv") from None


def write_sheet(sheet: pd.DataFrame, folder: Path, sheet_format: str) -> Path:
    """Write the (already neutralised) sheet as ``label_next.<format>`` in ``folder``,
    atomically; the other format's older sheet is removed, so no list of an earlier plan
    is taken for this one's."""
    check_sheet_format(sheet_format)
    path = Path(folder) / sheet_name(sheet_format)
    if sheet_format == "csv":
        # CRLF line ends (RFC 4180): the csv writer then quotes a cell holding a lone CR,
        # which a "\n" line end would leave bare, splitting the row in a spreadsheet.
        write_table(sheet, path, neutralised=True)  # the one spreadsheet-safe writer
    else:
        # Cells come neutralised (a leading "'"), so openpyxl stores no text as a formula;
        # it writes a string starting with "=" as one, which neutralising rules out.
        with atomic_path(path) as tmp:
            sheet.to_excel(tmp, index=False, sheet_name="label_next", engine="openpyxl")
    for other in SHEET_FORMATS.values():
        if other != path.name:
            (Path(folder) / other).unlink(missing_ok=True)
    return path


def remove_sheets(folder: Path) -> None:
    """Remove every annotator sheet of an earlier plan from ``folder``."""
    for name in SHEET_FORMATS.values():
        (Path(folder) / name).unlink(missing_ok=True)
