"""Taking labels back: semisup add-labels merges a returned sheet into the study's own
labeled set, the next study run grows the study with it (cell by cell the same numbers as a
study run from scratch on the table and the same labels_added.csv, every earlier cell kept),
and every bad return is one line, exit 2, nothing
changed (the harness of tests/test_bad_input_catalogue.py: exit status, one error line,
SHA-256 of every input before and after)."""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import shutil

import numpy as np
import pandas as pd
import pytest

from semisup.cli import main
from semisup.plan import PlanRequest, make_plan
from semisup.study import ADDED_LABELS_FILE, SHEET_STUDY_COLUMN, StudySpec, run_study


def _truth(n: int = 90, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    y = np.array(["p", "q"])[np.arange(n) % 2]
    shift = np.where(y == "p", 0.0, 1.5)
    return pd.DataFrame({"case": [f"c{i:03d}" for i in range(n)],
                         "f1": rng.normal(size=n) + shift, "f2": rng.normal(size=n),
                         "label": y})


def _with_blanks(truth: pd.DataFrame) -> pd.DataFrame:
    frame = truth.copy()
    frame.loc[frame.index % 3 == 0, "label"] = None
    return frame


def _spec(data) -> StudySpec:
    return StudySpec.build(overrides={"data": data, "label_column": "label",
                                      "id_column": "case", "methods": ["supervised-logreg"],
                                      "repeats": 2, "trials": 1})


def _hashes(*paths) -> dict[str, str]:
    out = {}
    for root in paths:
        files = [root] if root.is_file() else sorted(p for p in root.rglob("*") if p.is_file())
        out.update({str(f): hashlib.sha256(f.read_bytes()).hexdigest() for f in files})
    return out


def _cli(*argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    base = tmp_path_factory.mktemp("rounds")
    truth = _truth()
    table = base / "cases.csv"
    _with_blanks(truth).to_csv(table, index=False)
    out = base / "study"
    run_study(_spec(table), out, jobs=1, progress=False)
    make_plan(out, PlanRequest(metric="accuracy", target=0.6, cost_per_label=1.0, n_next=12))
    return base, out, table, truth


def _filled_sheet(out, truth, path):
    sheet = pd.read_csv(out / "label_next.csv", dtype=str, keep_default_na=False)
    sheet["label"] = truth.set_index("case").loc[sheet["row_id"], "label"].to_numpy()
    sheet.to_csv(path, index=False)
    return sheet


@pytest.mark.slow
def test_added_labels_give_the_same_cells_as_a_study_from_scratch(folder, tmp_path):
    base, out0, table, truth = folder
    out = tmp_path / "study"
    shutil.copytree(out0, out)
    sheet = _filled_sheet(out, truth, tmp_path / "returned.csv")
    before = _hashes(table)
    code, stdout, err = _cli("add-labels", out, tmp_path / "returned.csv", "-q")
    assert code == 0, err
    assert "added 12 label(s)" in stdout
    added = pd.read_csv(out / ADDED_LABELS_FILE, dtype=str)
    assert list(added.columns) == ["row_id", "label", "round"] and len(added) == 12
    assert set(added["round"]) == {"1"}
    assert _hashes(table) == before  # the user's table is never modified
    # again: nothing new, every row already carries that label
    assert _cli("add-labels", out, tmp_path / "returned.csv", "-q")[0] == 0
    assert len(pd.read_csv(out / ADDED_LABELS_FILE)) == 12

    n_before = len(pd.read_csv(out / "cells.csv"))
    grown = run_study(_spec(table), out, jobs=1, progress=False)  # a new round, no --restart
    assert (out / ADDED_LABELS_FILE).is_file()
    # the round's rows follow the table's own in every pool, so every earlier cell is kept;
    # the default grid gains the grown pool (the old pool plus the 12 rows), 2 repeats
    assert grown.info["this_run"]["kept"] == n_before
    assert grown.info["this_run"]["run"] == 2
    assert max(grown.info["budgets"]) == 48 + 12
    assert sheet["row_id"].isin(pd.read_csv(out / ADDED_LABELS_FILE)["row_id"]).all()
    # the same inputs (the table and labels_added.csv) run from scratch
    (tmp_path / "scratch").mkdir()
    shutil.copy(out / ADDED_LABELS_FILE, tmp_path / "scratch" / ADDED_LABELS_FILE)
    scratch = run_study(_spec(table), tmp_path / "scratch", jobs=1, progress=False)
    assert scratch.info["this_run"]["kept"] == 0
    a = pd.read_csv(out / "cells.csv")
    b = pd.read_csv(tmp_path / "scratch" / "cells.csv")
    keys = ["method", "strategy", "n_labels", "repeat"]
    a, b = a.sort_values(keys).reset_index(drop=True), b.sort_values(keys).reset_index(drop=True)
    for col in ("accuracy", "balanced_accuracy", "macro_f1", "log_loss", "n_eval"):
        if col in a.columns:
            np.testing.assert_array_equal(a[col].to_numpy(), b[col].to_numpy(), err_msg=col)
    info = json.loads((out / "study.json").read_text())
    assert info["data"]["n_labeled"] == 60 + 12
    assert grown is not None and scratch is not None
    # --restart discards the added labels with the rest of the old study
    run_study(_spec(table), out, jobs=1, restart=True, progress=False)
    assert not (out / ADDED_LABELS_FILE).exists()


def _bad_sheets(out, truth):
    study = pd.read_csv(out / "label_next.csv", dtype=str, keep_default_na=False)
    sid = study[SHEET_STUDY_COLUMN].iloc[0]
    unl = list(study["row_id"][:3])
    lab = {r: truth.set_index("case").loc[r, "label"] for r in unl}
    owned = truth["case"][1]  # labeled "q" in the table
    return {
        "unknown id": (pd.DataFrame({"row_id": ["nope", unl[0]], "label": ["p", "p"],
                                     SHEET_STUDY_COLUMN: sid}), "'nope' is not in"),
        "contradiction": (pd.DataFrame({"row_id": [owned], "label": ["p"],
                                        SHEET_STUDY_COLUMN: sid}), "labeled 'p' here but 'q'"),
        "new class": (pd.DataFrame({"row_id": [unl[0]], "label": ["r"],
                                    SHEET_STUDY_COLUMN: sid}), "--allow-new-class"),
        "duplicate ids": (pd.DataFrame({"row_id": [unl[0], unl[0]],
                                        "label": [lab[unl[0]]] * 2, SHEET_STUDY_COLUMN: sid}),
                          "appears twice"),
        "empty sheet": (pd.DataFrame({"row_id": unl, "label": ["", "", ""],
                                      SHEET_STUDY_COLUMN: sid}), "holds no label"),
        "another study": (pd.DataFrame({"row_id": unl, "label": [lab[r] for r in unl],
                                        SHEET_STUDY_COLUMN: "0123456789abcdef"}),
                          "made for study '0123456789abcdef'"),
        "no label column": (pd.DataFrame({"row_id": unl}), "no column 'label'"),
    }


@pytest.mark.slow
@pytest.mark.parametrize("case", ["unknown id", "contradiction", "new class", "duplicate ids",
                                  "empty sheet", "another study", "no label column"])
def test_bad_return_is_one_line_exit_2_and_changes_nothing(folder, tmp_path, case):
    base, out, table, truth = folder
    frame, match = _bad_sheets(out, truth)[case]
    sheet = tmp_path / "returned.csv"
    frame.to_csv(sheet, index=False)
    before = _hashes(table, sheet, out)
    code, stdout, err = _cli("add-labels", out, sheet)
    assert code == 2, (stdout, err)
    lines = [ln for ln in err.splitlines() if ln.startswith("error: ")]
    assert len(lines) == 1 and len(err.strip().splitlines()) == 1, err
    assert match in lines[0] and "Traceback" not in err
    assert _hashes(table, sheet, out) == before
    assert not (out / ADDED_LABELS_FILE).exists()


@pytest.mark.slow
def test_new_class_with_the_flag_and_xlsx_and_neutralised_ids(folder, tmp_path):
    pytest.importorskip("openpyxl")
    base, out0, table, truth = folder
    out = tmp_path / "study"
    shutil.copytree(out0, out)
    sheet = pd.read_csv(out / "label_next.csv", dtype=str, keep_default_na=False)
    first = sheet["row_id"].iloc[0]
    frame = pd.DataFrame({"row_id": [first], "label": ["r"],
                          SHEET_STUDY_COLUMN: sheet[SHEET_STUDY_COLUMN].iloc[0]})
    frame.to_excel(tmp_path / "returned.xlsx", index=False)
    code, stdout, err = _cli("add-labels", out, tmp_path / "returned.xlsx",
                             "--allow-new-class", "-q")
    assert code == 0, err
    assert "new class(es): r" in stdout
    added = pd.read_csv(out / ADDED_LABELS_FILE, dtype=str)
    assert added.to_dict("list") == {"row_id": [first], "label": ["r"], "round": ["1"]}
