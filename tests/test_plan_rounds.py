"""Two labeling rounds end to end on a tiny table: plan, the annotator's sheet (.xlsx) filled
from the table's hidden labels, add-labels, the study grown, a stale plan refused, a new plan
whose track record scores the first plan's forecasts against what the second round measured.
"""

from __future__ import annotations

import contextlib
import io
import json

import numpy as np
import pandas as pd
import pytest
from scipy.interpolate import interp1d
from test_rounds import _truth

from semisup.cli import main
from semisup.study import StudySpec, run_study

pytestmark = pytest.mark.slow  # two small studies (one raw-feature method), ~20 s


def _cli(*argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()


def test_two_rounds_keep_plans_and_score_the_first_forecast(tmp_path):
    openpyxl = pytest.importorskip("openpyxl")
    truth = _truth(n=120, seed=1)
    table = tmp_path / "cases.csv"
    frame = truth.copy()
    frame.loc[frame.index >= 50, "label"] = None   # 50 labels to start with
    frame.to_csv(table, index=False)
    before = table.read_bytes()
    spec = StudySpec.build(overrides={"data": table, "label_column": "label",
                                      "id_column": "case", "methods": ["supervised-logreg"],
                                      "repeats": 5, "trials": 1})
    out = tmp_path / "study"
    run_study(spec, out, jobs=1, progress=False)
    budgets_1 = sorted(pd.read_csv(out / "cells.csv")["n_labels"].unique())

    code, text, err = _cli("plan", out, "--target", "accuracy=0.6", "--cost-per-label", "1",
                           "--next", "30", "--sheet-format", "xlsx", "-q")
    assert code in (0, 3), err
    first = json.loads((out / "plan.json").read_text())
    assert "label_next.xlsx" in text and (out / "label_next.xlsx").is_file()

    # The annotator fills the label column of the workbook with the hidden labels.
    book = openpyxl.load_workbook(out / "label_next.xlsx")
    sheet = book.active
    header = [c.value for c in sheet[1]]
    id_col, lab_col = header.index("row_id") + 1, header.index("label") + 1
    hidden = truth.set_index("case")["label"]
    for r in range(2, sheet.max_row + 1):
        sheet.cell(r, lab_col).value = hidden[sheet.cell(r, id_col).value]
    book.save(tmp_path / "returned.xlsx")
    code, text, err = _cli("add-labels", out, tmp_path / "returned.xlsx", "-q")
    assert code == 0, err and "added 30 label(s)" in text

    run_study(spec, out, jobs=1, progress=False)           # the second round
    cells = pd.read_csv(out / "cells.csv")
    assert max(cells["n_labels"]) > max(budgets_1)         # the grown pool reaches further
    # the first plan is kept, and is stale for the grown study: fit refuses it in one line
    assert (out / "plans" / f"{first['name']}.json").is_file()
    code, _, err = _cli("fit", out, "--out", tmp_path / "model", "-q")
    assert code == 2 and "is stale" in err and len(err.strip().splitlines()) == 1
    assert "STALE" in _report(out)

    code, text, err = _cli("plan", out, "--target", "accuracy=0.6", "--cost-per-label", "1",
                           "-q")
    assert code in (0, 3), err
    second = json.loads((out / "plan.json").read_text())
    track = second["track_record"]
    scored = track["plans"][0]
    assert scored["plan"] == first["name"] and scored["n_compared"] >= 1
    assert "Track record of 1 earlier plan:" in text
    forecast = pd.read_csv(out / first["forecast_file"])
    ok = cells[cells["status"] == "ok"]
    for row in scored["rows"]:
        assert row["n_labels"] > first["measured_up_to"][f"{row['method']} (random)"]
        # measured: the mean over repeats of cells.csv (pandas), as the study measured it
        sel = ok[(ok["method"] == row["method"]) & (ok["n_labels"] == row["n_labels"])]
        assert row["measured"]["mean"] == pytest.approx(sel["accuracy"].mean(), abs=1e-9)
        # predicted: the first plan's stored forecast, read off in log budget (scipy)
        f = forecast[(forecast["method"] == row["method"]) & (forecast["metric"] == "accuracy")]
        at = float(interp1d(np.log(f["n_labels"]), f["mean"])(np.log(row["n_labels"])))
        assert row["predicted"]["mean"] == pytest.approx(at, abs=1e-9)
        assert row["hit"] == (row["predicted"]["low"] <= row["measured"]["mean"]
                              <= row["predicted"]["high"])
    html = _report(out)
    assert "Track record: earlier forecasts against what was measured since" in html
    assert "STALE" not in html
    assert table.read_bytes() == before                    # the user's table is untouched


def _report(out) -> str:
    code, _, err = _cli("report", out, "-q")
    assert code == 0, err
    return (out / "report.html").read_text(encoding="utf-8")
