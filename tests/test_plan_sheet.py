"""label_next.csv as an annotator's sheet: the rows' own columns, a label to fill in, and
every cell a spreadsheet would run as a formula neutralised."""

from __future__ import annotations

import hashlib
import json

import pandas as pd
from _plan_synth import stand_in_select_rows, write_study

from semisup._escape import restore_cell
from semisup.plan import PlanRequest, make_plan
from semisup.study import SHEET_STUDY_COLUMN, study_id

# The leading characters the OWASP "CSV Injection" page lists as starting a formula:
# equals, plus, minus, at, tab (0x09) and carriage return (0x0D).
OWASP_PREFIXES = ("=", "+", "-", "@", "\t", "\r")


def _folder_with_table(tmp_path):
    folder = write_study(tmp_path / "s", row_prefix="=r")
    n = 60
    notes = [f"{OWASP_PREFIXES[i % 6]}SUM(A1:A{i})" for i in range(n)]
    table = pd.DataFrame({
        "case": [f"=r{i}" for i in range(n)] + ["x1", "x2"],
        "animal": [""] * n + ["cat", "dog"],
        "=note": notes + ["a", "b"],
        "weight": [-3.5 + i for i in range(n)] + [1.0, 2.0],
        "reason": ["clash"] * (n + 2),
    })
    path = tmp_path / "animals.csv"
    table.to_csv(path, index=False, lineterminator="\r\n")  # keeps a leading CR quoted
    study = json.loads((folder / "study.json").read_text())
    study["spec"].update(data=str(path), label_column="animal", id_column="case")
    study["data"]["sha256"] = hashlib.sha256(path.read_bytes()).hexdigest()
    (folder / "study.json").write_text(json.dumps(study))
    return folder, table, study


def _plan(folder, **kwargs):
    req = {"metric": "accuracy", "target": 0.90, "cost_per_label": 2.0, "labels_owned": 0,
           **kwargs}
    return make_plan(folder, PlanRequest(**req), select_rows=stand_in_select_rows, n_boot=40)


def test_sheet_carries_the_rows_data_and_an_empty_label(tmp_path):
    folder, table, study = _folder_with_table(tmp_path)
    digest = hashlib.sha256((tmp_path / "animals.csv").read_bytes()).hexdigest()
    plan = _plan(folder, n_next=60)
    sheet = pd.read_csv(folder / "label_next.csv", dtype=str, keep_default_na=False)
    assert list(sheet.columns) == ["rank", "row_id", "reason", "animal", "'=note", "weight",
                                   SHEET_STUDY_COLUMN]
    assert (sheet["animal"] == "").all()
    assert (sheet[SHEET_STUDY_COLUMN] == study_id(study)).all()
    assert any("'reason'" in w and "left out" in w for w in plan.warnings)
    by_id = table.set_index("case")
    for row in sheet.itertuples(index=False):
        rid = restore_cell(row.row_id)
        assert restore_cell(row[4]) == by_id.loc[rid, "=note"]
        assert float(row.weight) == by_id.loc[rid, "weight"]
    # the user's table is never modified
    assert hashlib.sha256((tmp_path / "animals.csv").read_bytes()).hexdigest() == digest


def test_no_cell_starts_a_formula(tmp_path):
    folder, _, _ = _folder_with_table(tmp_path)
    _plan(folder, n_next=60)
    sheet = pd.read_csv(folder / "label_next.csv", dtype=str, keep_default_na=False)
    cells = list(sheet.columns) + [v for col in sheet.columns for v in sheet[col]]
    seen = {c[0] for c in cells if c[:1] == "'"}
    assert seen == {"'"} and len([c for c in cells if c.startswith("'")]) >= 120
    for value in cells:
        if value[:1] in OWASP_PREFIXES:
            float(value)  # only plain numbers (-3.5) may start with a sign
    # every OWASP prefix occurred in the data and was quoted
    quoted = {c[1] for c in cells if c.startswith("'") and len(c) > 1}
    assert set(OWASP_PREFIXES) <= quoted


def test_sheet_without_a_readable_table_still_has_the_label_column(tmp_path):
    folder, _, _ = _folder_with_table(tmp_path)
    (tmp_path / "animals.csv").unlink()
    plan = _plan(folder, n_next=5)
    sheet = pd.read_csv(folder / "label_next.csv", dtype=str, keep_default_na=False)
    assert list(sheet.columns) == ["rank", "row_id", "reason", "animal", SHEET_STUDY_COLUMN]
    assert any("cannot be read" in w for w in plan.warnings)
