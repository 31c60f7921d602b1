"""The bad-input catalogue, part two: what the commands write and which folder they trust.

Cases from a new user's campaign against ``fit``, ``predict``, ``add-labels``, ``plan`` and
``report``, grouped as the campaign found them:

1. an output over an input (the table, the sheet, the study's files, a model file);
2. an output inside a model folder;
3. an edited ``manifest.json`` (class names, flag threshold, checksums);
4. formula-like ids and class names in the CSV outputs (exit 0, neutralised output);
5. a study folder used from another folder, a moved or changed table;
6. a hand-edited ``cells.csv`` / ``curves.csv``;
7. the smaller ones: locks, a malicious tensor file named by its own name.

Every case runs ``semisup.cli.main`` in this process through the catalogue's harness
(``tests/test_bad_input_catalogue.py``: no traceback, no "internal error", SHA-256 from
hashlib of every input file before and after) and asserts the exit status and, for exit 2,
the one ``error:`` line.
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import shutil
from pathlib import Path

import pandas as pd
import pytest
from _model_support import ID, LABEL, make_study, wine_frame
from test_bad_input_catalogue import expect_error, run_cli

from semisup import cli
from semisup.model._file import manifest_digest

pytestmark = pytest.mark.slow  # one real (small) study, plan and model first, ~20 s

PLAN = ["--target", "accuracy=0.8", "--cost-per-label", "1"]


@pytest.fixture(scope="module")
def env(tmp_path_factory):
    root = tmp_path_factory.mktemp("writes")
    study = make_study(root)
    model = root / "model"
    assert cli.main(["fit", str(study), "--method", "supervised-logreg", "--out", str(model),
                     "-q"]) == 0
    frame, _ = wine_frame()
    frame.drop(columns=[LABEL]).head(30).to_csv(root / "new.csv", index=False)
    return root, study, model


def _copy_study(env, tmp: Path, edit=None) -> Path:
    root, study, _ = env
    copy = tmp / "study"
    shutil.copytree(study, copy)
    if edit is not None:
        edit(copy)
    return copy


def _copy_model(env, tmp: Path, edit=None) -> Path:
    copy = tmp / "model"
    shutil.copytree(env[2], copy)
    if edit is not None:
        edit(copy)
    return copy


def _json_edit(path: Path, change) -> None:
    data = json.loads(path.read_text())
    change(data)
    path.write_text(json.dumps(data, indent=1))


def _manifest(change, *, resign=False):
    """An edit of manifest.json; ``resign``: the editor also fixes the file checksums."""
    def edit(folder: Path) -> None:
        def apply(m):
            change(m, folder)
            if resign:
                m["manifest_sha256"] = manifest_digest(m)
        _json_edit(folder / "manifest.json", apply)
    return edit


def _swap_classes(m, folder):
    m["classes"][0], m["classes"][1] = m["classes"][1], m["classes"][0]


def _threshold(m, folder):
    m["density"]["threshold"] = 1e9


def _evil_weights(m, folder):
    """A density.pt that is a pickle running code, with every checksum recomputed."""
    import pickle

    class Boom:
        def __reduce__(self):
            return (os.system, ("echo pwned",))

    data = pickle.dumps({"x": Boom()})
    (folder / "density.pt").write_bytes(data)
    m["files"]["density.pt"] = hashlib.sha256(data).hexdigest()


def _cells_edit(change):
    def edit(folder: Path) -> None:
        path = folder / "cells.csv"
        frame = pd.read_csv(path, dtype=str, keep_default_na=False)
        frame = change(frame)
        frame.to_csv(path, index=False, lineterminator="\n")
    return edit


def _set_first(column, value):
    def change(frame):
        frame.loc[0, column] = value
        return frame
    return change


def _legacy(edit):
    """A study folder of an earlier release (no export digests in study.json), then ``edit``."""
    def both(folder: Path) -> None:
        _json_edit(folder / "study.json", lambda d: d.pop("exports"))
        edit(folder)
    return both


def _sheet(tmp: Path, rows: list[tuple[str, str]], name="returned.csv") -> Path:
    path = tmp / name
    pd.DataFrame(rows, columns=["row_id", LABEL]).to_csv(path, index=False)
    return path


def _unlabeled_id() -> str:
    frame, _ = wine_frame()
    return str(frame.loc[frame[LABEL].isna(), ID].iloc[0])


def _labeled(frame=None) -> tuple[str, str]:
    frame = wine_frame()[0] if frame is None else frame
    row = frame.loc[frame[LABEL].notna()].iloc[0]
    return str(row[ID]), str(row[LABEL])


def _other_label(label: str) -> str:
    return "b" if label != "b" else "a"


def _relative_study(env, tmp: Path, *, keep_path=True) -> Path:
    """A study copy whose spec names its table relatively (as a user types it); study.json
    keeps the absolute path unless ``keep_path`` is False (a study of an earlier release)."""
    root = env[0]

    def edit(folder: Path) -> None:
        def change(d):
            d["spec"]["data"] = "wine.csv"
            if keep_path:
                d["data"]["path"] = str(root / "wine.csv")
            else:
                d["data"].pop("path", None)
        _json_edit(folder / "study.json", change)
    return _copy_study(env, tmp, edit)


def _other_folder_with_another_table(tmp: Path) -> Path:
    """A folder holding a different wine.csv: the first labeled row relabeled."""
    other = tmp / "elsewhere"
    other.mkdir()
    frame, _ = wine_frame()
    rid, label = _labeled(frame)
    frame.loc[frame[ID] == rid, LABEL] = _other_label(label)
    frame.to_csv(other / "wine.csv", index=False)
    return other


# -- the cases: name -> builder(env, tmp) -> (argv, cwd, inputs, code, needles) ----------------


def _c(argv, cwd, inputs, code, *needles):
    return [str(a) for a in argv], cwd, inputs, code, needles


def _fit(study, out, *extra):
    return ["fit", study, "--out", out, "--method", "supervised-logreg", *extra]


CASES = {
    # 1. outputs over inputs
    "fit --pseudo-labels is the study's table (relative)": lambda e, t: _c(
        _fit(e[1], t / "m", "--pseudo-labels", "wine.csv"), e[0], [e[0] / "wine.csv", e[1]], 2,
        "--pseudo-labels wine.csv is the study's table"),
    "fit --pseudo-labels is a symlink to the table": lambda e, t: (
        os.symlink(e[0] / "wine.csv", t / "link.csv"), _c(
            _fit(e[1], t / "m", "--pseudo-labels", t / "link.csv"), t,
            [e[0] / "wine.csv", e[1]], 2, "is the study's table"))[1],
    "fit --pseudo-labels is the study's cells.csv": lambda e, t: _c(
        _fit(e[1], t / "m", "--pseudo-labels", e[1] / "cells.csv"), t, [e[1]], 2,
        "is the study's file cells.csv"),
    "fit --pseudo-labels over the study's labels file": lambda e, t: _c(
        _fit(e[1], t / "m", "--pseudo-labels", e[1] / "labels_added.csv"), t, [e[1]], 2,
        "labels_added.csv"),
    "fit --pseudo-labels inside the new model folder": lambda e, t: _c(
        _fit(e[1], t / "m", "--pseudo-labels", t / "m" / "pool.csv"), t, [e[1]], 2,
        "lies inside --out"),
    "fit --pseudo-labels inside an existing model folder": lambda e, t: _c(
        _fit(e[1], t / "m", "--pseudo-labels", e[2] / "pool.csv"), t, [e[1], e[2]], 2,
        "inside the model folder"),
    "fit --pseudo-labels is --out": lambda e, t: _c(
        _fit(e[1], t / "m", "--pseudo-labels", t / "m"), t, [e[1]], 2,
        "also given as --out"),
    "fit --out is the study folder": lambda e, t: _c(
        _fit(e[1], e[1]), t, [e[1]], 2, "--out", "is the study folder"),
    "fit --out is the table": lambda e, t: _c(
        _fit(e[1], e[0] / "wine.csv"), t, [e[1], e[0] / "wine.csv"], 2,
        "is the study's table"),
    "fit --out holds the study folder": lambda e, t: _c(
        _fit(e[1], e[0]), t, [e[1], e[0] / "wine.csv"], 2, "holds"),
    "fit --out is the study's cache folder": lambda e, t: _c(
        _fit(e[1], e[1] / "cache"), t, [e[1]], 2, "cache"),
    "predict --out is the input table (relative)": lambda e, t: _c(
        ["predict", e[2], "new.csv", "--out", "new.csv"], e[0], [e[0] / "new.csv", e[2]], 2,
        "--out new.csv is the input table"),
    "predict --out is a symlink to the input": lambda e, t: (
        os.symlink(e[0] / "new.csv", t / "out.csv"), _c(
            ["predict", e[2], e[0] / "new.csv", "--out", t / "out.csv"], t,
            [e[0] / "new.csv", e[2]], 2, "is the input table"))[1],
    "predict --out is a hard link of the input": lambda e, t: (
        os.link(e[0] / "new.csv", t / "hard.csv"), _c(
            ["predict", e[2], e[0] / "new.csv", "--out", t / "hard.csv"], t,
            [e[0] / "new.csv", e[2]], 2, "is the input table"))[1],
    # 2. into a model folder
    "predict --out is the model's manifest.json": lambda e, t: _c(
        ["predict", e[2], e[0] / "new.csv", "--out", e[2] / "manifest.json"], t,
        [e[0] / "new.csv", e[2]], 2, "manifest.json", "inside the model folder"),
    "predict --out is the model's classifier.skops": lambda e, t: _c(
        ["predict", e[2], e[0] / "new.csv", "--out", e[2] / "classifier.skops"], t,
        [e[0] / "new.csv", e[2]], 2, "inside the model folder"),
    "predict --out is a new file in the model folder": lambda e, t: _c(
        ["predict", e[2], e[0] / "new.csv", "--out", e[2] / "out.csv"], t,
        [e[0] / "new.csv", e[2]], 2, "inside the model folder"),
    "predict --out is the model folder itself": lambda e, t: _c(
        ["predict", e[2], e[0] / "new.csv", "--out", e[2]], t, [e[0] / "new.csv", e[2]], 2,
        "model folder"),
    "predict --out reaches the manifest through ..": lambda e, t: _c(
        ["predict", "model", "new.csv", "--out", "model/../model/manifest.json"], e[0],
        [e[0] / "new.csv", e[2]], 2, "inside the model folder"),
    "predict --out into another model folder": lambda e, t: _c(
        ["predict", _copy_model(e, t), e[0] / "new.csv", "--out", e[2] / "p.csv"], t,
        [e[0] / "new.csv", e[2], t / "model"], 2, "inside the model folder"),
    "card --out is the table": lambda e, t: (
        shutil.copy(e[0] / "new.csv", t / "t.csv"), _c(
            ["card", t / "t.csv", "--label-column", "alcohol", "--out", t / "t.csv"], t,
            [t / "t.csv"], 2, "--out", "is the input table"))[1],
    "card --out inside a model folder": lambda e, t: _c(
        ["card", e[0] / "wine.csv", "--label-column", LABEL, "--out", e[2] / "c.md"], t,
        [e[0] / "wine.csv", e[2]], 2, "inside the model folder"),
    "study --out inside a model folder": lambda e, t: _c(
        ["study", e[0] / "wine.csv", "--label-column", LABEL, "--out", e[2] / "s"], t,
        [e[0] / "wine.csv", e[2]], 2, "inside the model folder"),
    "add-labels sheet is the study's labels file": lambda e, t: (
        _sheet(_copy_study(e, t), [(_unlabeled_id(), "a")], "labels_added.csv"), _c(
            ["add-labels", t / "study", t / "study" / "labels_added.csv"], t,
            [t / "study", e[0] / "wine.csv"], 2, "is the returned sheet"))[1],
    # 3. edited manifest.json
    "manifest: two class names swapped": lambda e, t: _c(
        ["predict", _copy_model(e, t, _manifest(_swap_classes)), e[0] / "new.csv", "--out",
         t / "p.csv"], t, [t / "model", e[0] / "new.csv"], 2,
        "manifest.json does not match its own checksum"),
    "manifest: flag threshold set to 1e9": lambda e, t: _c(
        ["predict", _copy_model(e, t, _manifest(_threshold)), e[0] / "new.csv", "--out",
         t / "p.csv"], t, [t / "model", e[0] / "new.csv"], 2, "manifest.json", "edited"),
    "manifest: its own checksum removed": lambda e, t: _c(
        ["predict", _copy_model(e, t, _manifest(lambda m, f: m.pop("manifest_sha256"))),
         e[0] / "new.csv", "--out", t / "p.csv"], t, [t / "model", e[0] / "new.csv"], 2,
        "carries no checksum of itself"),
    "manifest: a feature's kind changed": lambda e, t: _c(
        ["predict", _copy_model(e, t, _manifest(
            lambda m, f: m["features"][0].update(kind="categorical"))), e[0] / "new.csv",
         "--out", t / "p.csv"], t, [t / "model", e[0] / "new.csv"], 2, "own checksum"),
    "manifest: a file checksum edited": lambda e, t: _c(
        ["predict", _copy_model(e, t, _manifest(
            lambda m, f: m["files"].update({"classifier.skops": "0" * 64}))),
         e[0] / "new.csv", "--out", t / "p.csv"], t, [t / "model", e[0] / "new.csv"], 2,
        "own checksum"),
    # 5. the study's table: another folder, moved, changed
    "add-labels from a folder with another wine.csv": lambda e, t: (
        _relative_study(e, t), _c(
            ["add-labels", t / "study", _sheet(t, [(_labeled()[0],
                                                    _other_label(_labeled()[1]))])],
            _other_folder_with_another_table(t), [t / "study", t / "returned.csv",
                                                  t / "elsewhere", e[0] / "wine.csv"], 2,
            "is labeled", "already"))[1],
    "fit from a folder with another wine.csv, old study.json": lambda e, t: (
        _relative_study(e, t, keep_path=False), _c(
            _fit(t / "study", t / "m"), _other_folder_with_another_table(t),
            [t / "study", t / "elsewhere"], 2, "wine.csv", "as given to the study",
            "is not the table the study read", "folder the study ran in"))[1],
    "add-labels, old study.json, no wine.csv here": lambda e, t: (
        _relative_study(e, t, keep_path=False), _c(
            ["add-labels", t / "study", _sheet(t, [(_unlabeled_id(), "a")])], t,
            [t / "study", t / "returned.csv"], 2, "wine.csv", "as given to the study",
            "is not found"))[1],
    "fit: the recorded table is gone": lambda e, t: _c(
        _fit(_copy_study(e, t, lambda f: _json_edit(f / "study.json", lambda d: d["data"].update(
            path=str(t / "gone.csv")))), t / "m"), t, [t / "study"], 2,
        "gone.csv", "recorded in", "is not found", "--data"),
    "add-labels: the recorded table is gone": lambda e, t: _c(
        ["add-labels", _copy_study(e, t, lambda f: _json_edit(
            f / "study.json", lambda d: d["data"].update(path=str(t / "gone.csv")))),
         _sheet(t, [(_unlabeled_id(), "a")])], t, [t / "study", t / "returned.csv"], 2,
        "gone.csv", "is not found", "move it back"),
    "fit: the table changed since the study": lambda e, t: _c(
        _fit(_copy_study(e, t, lambda f: _json_edit(f / "study.json", lambda d: d["data"].update(
            path=str(_other_folder_with_another_table(t) / "wine.csv")))), t / "m"), t,
        [t / "study", t / "elsewhere"], 2, "changed since the study read it", "SHA-256"),
    "add-labels: the table changed since the study": lambda e, t: _c(
        ["add-labels", _copy_study(e, t, lambda f: _json_edit(
            f / "study.json", lambda d: d["data"].update(
                path=str(_other_folder_with_another_table(t) / "wine.csv")))),
         _sheet(t, [(_unlabeled_id(), "a")])], t,
        [t / "study", t / "elsewhere", t / "returned.csv"], 2, "changed since the study"),
    "fit --data is another table": lambda e, t: _c(
        _fit(e[1], t / "m", "--data", _other_folder_with_another_table(t) / "wine.csv"), t,
        [e[1], t / "elsewhere"], 2, "--data", "is not the study's table"),
    # 6. hand-edited cells.csv / curves.csv
    "plan: n_labels 1.5 in cells.csv": lambda e, t: _c(
        ["plan", _copy_study(e, t, _cells_edit(_set_first("n_labels", "1.5"))), *PLAN], t,
        [t / "study" / "cells.csv", t / "study" / "study.json"], 2,
        "cells.csv was changed after the study wrote it", "semisup study"),
    "plan: a row of cells.csv deleted": lambda e, t: _c(
        ["plan", _copy_study(e, t, _cells_edit(lambda f: f.iloc[1:])), *PLAN], t,
        [t / "study" / "cells.csv"], 2, "cells.csv was changed"),
    "plan: an accuracy blanked": lambda e, t: _c(
        ["plan", _copy_study(e, t, _cells_edit(_set_first("accuracy", ""))), *PLAN], t,
        [t / "study" / "cells.csv"], 2, "cells.csv was changed"),
    "plan: curves.csv edited": lambda e, t: _c(
        ["plan", _copy_study(e, t, lambda f: (f / "curves.csv").write_text(
            (f / "curves.csv").read_text().replace("random", "randon", 1))), *PLAN], t,
        [t / "study" / "curves.csv"], 2, "curves.csv was changed"),
    "plan: cells.csv removed": lambda e, t: _c(
        ["plan", _copy_study(e, t, lambda f: (f / "cells.csv").unlink()), *PLAN], t,
        [t / "study"], 2, "cells.csv is missing although the study wrote it"),
    "report: a row of cells.csv deleted": lambda e, t: _c(
        ["report", _copy_study(e, t, _cells_edit(lambda f: f.iloc[1:]))], t,
        [t / "study" / "cells.csv"], 2, "'report' would read edited results"),
    "fit: cells.csv edited": lambda e, t: _c(
        _fit(_copy_study(e, t, _cells_edit(_set_first("accuracy", "0.99"))), t / "m"), t,
        [t / "study" / "cells.csv"], 2, "'fit' would read edited results"),
    "plan, older study: n_labels 1.5": lambda e, t: _c(
        ["plan", _copy_study(e, t, _legacy(_cells_edit(_set_first("n_labels", "1.5")))),
         *PLAN], t, [t / "study" / "cells.csv"], 2, "'n_labels' holds '1.5'"),
    "plan, older study: a row deleted": lambda e, t: _c(
        ["plan", _copy_study(e, t, _legacy(_cells_edit(lambda f: f.iloc[1:]))), *PLAN], t,
        [t / "study" / "cells.csv"], 2, "cells but study.json records"),
    # 7. smaller
    "predict: malicious density.pt, every checksum forged": lambda e, t: _c(
        ["predict", _copy_model(e, t, _manifest(_evil_weights, resign=True)), e[0] / "new.csv",
         "--out", t / "p.csv"], t, [t / "model", e[0] / "new.csv"], 2, "density.pt",
        "network weights cannot be read"),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_write_and_trust_catalogue(env, tmp_path, monkeypatch, case):
    argv, cwd, inputs, code, needles = CASES[case](env, tmp_path)
    result = run_cli(argv, cwd, monkeypatch, inputs)
    if code == 2:
        line = expect_error(result, *needles)
        assert "\n" not in line
    else:
        assert result.code == code, result.stderr
    assert not (tmp_path / "m").exists()  # a refused fit writes no model folder
    assert not (tmp_path / "p.csv").exists()


def test_catalogue_has_every_group():
    assert len(CASES) >= 40


@pytest.mark.parametrize("command", ["add-labels", "fit"])
def test_add_labels_and_fit_wait_for_a_running_study(env, tmp_path, monkeypatch, command):
    from semisup.study._lock import study_lock

    study = _copy_study(env, tmp_path)
    argv = (["add-labels", study, _sheet(tmp_path, [(_unlabeled_id(), "a")])]
            if command == "add-labels" else _fit(study, tmp_path / "m"))
    with study_lock(study):  # a study (or another add-labels / fit) holds the folder
        result = run_cli([str(a) for a in argv], tmp_path, monkeypatch,
                         [study, tmp_path / "returned.csv"])
    expect_error(result, f"{command}: a study, add-labels or fit is running", "again")
    assert not (study / "labels_added.csv").exists()


def test_predict_neutralises_formula_ids_and_keeps_them_raw_on_request(env, tmp_path,
                                                                        monkeypatch):
    # OWASP "CSV Injection": a cell starting with = + - @ tab CR runs as a formula
    root, _, model = env
    frame = pd.read_csv(root / "new.csv", dtype={ID: str})
    frame.loc[0, ID] = '=HYPERLINK("http://example.invalid","x")'
    frame.loc[1, ID] = "@SUM(1+1)"
    frame.to_csv(tmp_path / "hostile.csv", index=False)
    inputs = [tmp_path / "hostile.csv", model]
    ok = run_cli(["predict", str(model), "hostile.csv", "--out", "p.csv"], tmp_path,
                 monkeypatch, inputs)
    assert ok.code == 0, ok.stderr
    with open(tmp_path / "p.csv", newline="", encoding="utf-8") as handle:
        rows = list(csv.reader(handle))
    assert rows[1][0] == "'" + frame.loc[0, ID] and rows[2][0] == "'@SUM(1+1)"
    raw = run_cli(["predict", str(model), "hostile.csv", "--out", "raw.csv", "--raw-cells"],
                  tmp_path, monkeypatch, inputs)
    assert raw.code == 0, raw.stderr
    assert pd.read_csv(tmp_path / "raw.csv", dtype=str)["row_id"][0] == frame.loc[0, ID]
