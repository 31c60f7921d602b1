"""Bad input for `semisup fit` and `semisup predict`: exit code 2, one `error:` line naming the
file / column / value and the fix, and every input left byte-for-byte unchanged (SHA-256 from
hashlib)."""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from _model_support import ID, LABEL, make_study, wine_frame

from semisup.cli import main

pytestmark = pytest.mark.slow  # a real (small) study with a VAE is fitted first, ~15 s
ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def env(tmp_path_factory):
    root = tmp_path_factory.mktemp("cli")
    study = make_study(root)
    assert main(["fit", str(study), "--out", str(root / "model"), "--quiet"]) == 0
    return root, study, root / "model"


def _digest(path: Path) -> dict[str, str]:
    files = [path] if path.is_file() else sorted(p for p in path.rglob("*") if p.is_file())
    return {str(p): hashlib.sha256(p.read_bytes()).hexdigest() for p in files}


def _error(capsys, args, inputs) -> str:
    before = {k: v for p in inputs if p.exists() for k, v in _digest(p).items()}
    code = main(args)
    err = capsys.readouterr().err
    assert code == 2, err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), err
    after = {k: v for p in inputs if p.exists() for k, v in _digest(p).items()}
    assert after == before  # inputs unchanged
    return lines[0]


def _table(root: Path, name: str, change) -> Path:
    frame, _ = wine_frame()
    frame = change(frame.copy())
    path = root / name
    if name.endswith(".parquet"):
        frame.to_parquet(path, index=False)
    else:
        frame.to_csv(path, index=False, sep="\t" if name.endswith(".tsv") else ",")
    return path


def _with_model_copy(root: Path, name: str, edit) -> Path:
    copy = root / name
    if copy.exists():
        shutil.rmtree(copy)
    shutil.copytree(root / "model", copy)
    edit(copy)
    return copy


def _study_copy(root, study, name, edit):
    """A copy of the study folder with one file edited (the original stays untouched)."""
    copy = root / name
    if not copy.exists():
        shutil.copytree(study, copy)
        edit(copy)
    return copy


def _edit_json(path, key, value):
    data = json.loads(path.read_text())
    if isinstance(value, dict):
        data[key].update(value)
    else:
        data[key] = value
    path.write_text(json.dumps(data))


def _no_plan(root, study):
    return _study_copy(root, study, "study-no-plan", lambda c: (c / "plan.json").unlink())


def _plan_without_choice(root, study):
    return _study_copy(root, study, "study-no-choice",
                       lambda c: _edit_json(c / "plan.json", "chosen", None))


def _moved_table(root, study):
    return _study_copy(root, study, "study-moved", lambda c: (_edit_json(
        c / "study.json", "spec", {"data": str(root / "gone.csv")}), _edit_json(
        c / "study.json", "data", {"path": str(root / "gone.csv")})))


FIT_CASES = {
    "no study folder": (lambda r, s: ["fit", str(r / "nowhere"), "--out", str(r / "m1")],
                        ["nowhere", "no such study folder"]),
    "no study.json": (lambda r, s: ["fit", str(r), "--out", str(r / "m2")],
                      ["has no study.json", "semisup study"]),
    "no plan, no --method": (lambda r, s: ["fit", str(_no_plan(r, s)), "--out", str(r / "m3")],
                             ["has no plan.json", "--method"]),
    "plan chose nothing": (lambda r, s: ["fit", str(_plan_without_choice(r, s)), "--out",
                                         str(r / "m4")], ["chose no method", "--method"]),
    "unknown method": (lambda r, s: ["fit", str(s), "--method", "nope", "--out", str(r / "m5")],
                       ["unknown method 'nope'", "known methods"]),
    "confidence cut outside (0, 1)": (
        lambda r, s: ["fit", str(s), "--min-probability", "1.5", "--out", str(r / "m6")],
        ["--min-probability 1.5", "between 0 and 1"]),
    "table moved": (lambda r, s: ["fit", str(_moved_table(r, s)), "--out", str(r / "m7")],
                    ["gone.csv", "is not found", "--data"]),
    "out is someone's folder": (lambda r, s: ["fit", str(s), "--out", str(_busy(r))],
                                ["busy", "is not a semisup model folder", "another --out"]),
}


def _busy(root):
    (root / "busy").mkdir(exist_ok=True)
    (root / "busy" / "keep.txt").write_text("mine")
    return root / "busy"


@pytest.mark.parametrize("case", sorted(FIT_CASES))
def test_fit_bad_input(env, capsys, case):
    root, study, _ = env
    make_args, fragments = FIT_CASES[case]
    args = make_args(root, study)
    line = _error(capsys, [*args, "--quiet"], [study, root / "wine.csv"])
    for fragment in fragments:
        assert fragment in line, line


def _tamper(path):
    data = bytearray((path / "classifier.skops").read_bytes())
    data[100] ^= 0x01
    (path / "classifier.skops").write_bytes(bytes(data))


PREDICT_CASES = {
    "no model folder": (lambda r: (r / "none", None, []), ["none", "no such model folder"]),
    "folder without manifest": (lambda r: (r, None, []),
                                ["not a semisup model folder", "no manifest.json"]),
    "edited classifier file": (lambda r: (_with_model_copy(r, "m-edit", _tamper), None, []),
                               ["classifier.skops", "does not match its checksum"]),
    "manifest not JSON": (
        lambda r: (_with_model_copy(r, "m-json", lambda p: (p / "manifest.json").write_text(
            "{oops")), None, []), ["manifest.json", "is not valid JSON"]),
    "missing feature column": (
        lambda r: (r / "model", _table(r, "no_alcohol.csv", lambda f: f.drop(columns="alcohol")),
                   []), ["no_alcohol.csv", "column 'alcohol'", "is missing"]),
    "numeric column now words": (
        lambda r: (r / "model", _table(r, "words.csv", _words), []),
        ["words.csv", "column 'ash' was numeric in training", "line 5", "'high'"]),
    "categorical column now numbers": (
        lambda r: (r / "model", _table(r, "bands.tsv", _band_numbers), []),
        ["bands.tsv", "column 'colour_band' was categorical in training", "numbers"]),
    "id column absent": (
        lambda r: (r / "model", _table(r, "no_id.parquet", lambda f: f.drop(columns=ID)), []),
        ["no_id.parquet", "id column 'bottle' is missing", "--id-column"]),
    "duplicate ids": (
        lambda r: (r / "model", _table(r, "dup.csv", _dup_ids), []),
        ["dup.csv", "duplicate id 'w000'"]),
    "empty id": (
        lambda r: (r / "model", _table(r, "blank_id.csv", _blank_id), []),
        ["blank_id.csv", "id column 'bottle' is empty at line 4"]),
    "header only": (
        lambda r: (r / "model", _table(r, "header.csv", lambda f: f.iloc[:0]), []),
        ["header.csv", "no data rows"]),
    "out is the input": (
        lambda r: (r / "model", r / "wine.csv", ["--out", str(r / "wine.csv")]),
        ["is the input table"]),
    "bad chunk size": (
        lambda r: (r / "model", r / "wine.csv", ["--chunk-rows", "0"]), ["--chunk-rows 0"]),
    "table missing": (lambda r: (r / "model", r / "absent.csv", []),
                      ["absent.csv", "file not found"]),
}


def _words(f):
    f["ash"] = f["ash"].astype(object)
    f.loc[3, "ash"] = "high"
    return f


def _band_numbers(f):
    f["colour_band"] = (f["color_intensity"] * 10).round().astype(int)
    return f


def _dup_ids(f):
    f.loc[5, ID] = "w000"
    return f


def _blank_id(f):
    f.loc[2, ID] = None
    return f


@pytest.mark.parametrize("case", sorted(PREDICT_CASES))
def test_predict_bad_input(env, capsys, case):
    root, _, _ = env
    make, fragments = PREDICT_CASES[case]
    model, data, extra = make(root)
    data = data or root / "wine.csv"
    out = root / "pred.csv"
    if out.exists():
        out.unlink()
    args = ["predict", str(model), str(data), "--out", str(out), *extra, "--quiet"]
    if "--out" in extra:
        args = ["predict", str(model), str(data), *extra, "--quiet"]
    line = _error(capsys, args, [model, data])
    for fragment in fragments:
        assert fragment in line, line
    if "--out" not in extra:
        assert not out.exists()  # no partial output


def test_unseen_categories_and_missing_cells_are_counted(env, capsys):
    root, _, model = env

    def change(f):
        f.loc[:9, "colour_band"] = "violet"  # never seen in training
        f.loc[10:14, "magnesium"] = None
        f["note"] = "extra column"
        return f

    data = _table(root, "odd.csv", change)
    out = root / "odd-pred.csv"
    assert main(["predict", str(model), str(data), "--out", str(out), "--quiet"]) == 0
    printed = capsys.readouterr().out
    assert "column 'colour_band': 10 cells" in printed and "'violet'" in printed
    assert "column 'magnesium': 5 missing cells" in printed
    assert "ignored columns" in printed and "'note'" in printed
    pred = pd.read_csv(out)
    frame, _ = wine_frame()
    assert list(pred["row_id"]) == list(frame[ID])
    assert list(pred.columns[:2]) == ["row_id", "predicted"]
    assert {"proba_a", "proba_b", "proba_c", "top_probability", "out_of_distribution"} <= set(
        pred.columns)


def test_fit_and_predict_in_a_real_process(env):
    # One case through a subprocess: the installed entry point gives exit 2 and no traceback.
    root, _, model = env
    envvars = {**os.environ, "PYTHONPATH": str(ROOT)}
    bad = _table(root, "sub.csv", lambda f: f.drop(columns="hue"))
    result = subprocess.run([sys.executable, "-m", "semisup", "predict", str(model), str(bad),
                             "--out", str(root / "sub-pred.csv")], env=envvars,
                            capture_output=True, text=True, timeout=300)
    assert result.returncode == 2 and "Traceback" not in result.stderr
    assert result.stderr.strip().splitlines()[-1].startswith("error: ")
    assert "column 'hue'" in result.stderr


def test_pseudo_labels_flag_writes_the_pool(env, capsys):
    root, study, _ = env
    out = root / "pseudo.csv"
    assert main(["fit", str(study), "--out", str(root / "m-pseudo"), "--pseudo-labels",
                 str(out), "--min-probability", "0.8", "--quiet"]) == 0
    printed = capsys.readouterr().out
    assert "expected accuracy" in printed and ">= 0.8" in printed
    frame, _ = wine_frame()
    pseudo = pd.read_csv(out, dtype={"row_id": str})
    assert list(pseudo["row_id"]) == list(frame.loc[frame[LABEL].isna(), ID])
    assert "accepted" in pseudo.columns


@pytest.mark.parametrize("fmt", ["csv", "tsv", "parquet"])
def test_formats_and_chunks_give_the_same_predictions(env, fmt):
    from semisup.model import load_model, predict_file

    root, _, model_dir = env
    model = load_model(model_dir)
    frame, _ = wine_frame()
    data = _table(root, f"same.{fmt}", lambda f: f)
    whole = predict_file(model, data, root / f"whole-{fmt}.parquet", chunk_rows=1000)
    small = predict_file(model, data, root / f"small-{fmt}.csv", chunk_rows=7)
    assert whole.n_rows == small.n_rows == len(frame)
    a = pd.read_parquet(root / f"whole-{fmt}.parquet")
    b = pd.read_csv(root / f"small-{fmt}.csv", dtype={"row_id": str})
    # Batched float maths (BLAS, torch in float32) may differ in the last bits between chunk
    # sizes. A method on the VAE's float32 latents inherits their rounding (float32 epsilon
    # 1.2e-7): probabilities to 1e-6 (1.2e-9 seen), the float32 ELBO to a relative 1e-5.
    assert list(a.columns) == list(b.columns) and (a["row_id"] == b["row_id"]).all()
    proba_cols = [f"proba_{c}" for c in model.classes] + ["top_probability"]
    np.testing.assert_allclose(a[proba_cols], b[proba_cols], rtol=0, atol=1e-6)
    np.testing.assert_allclose(a["density_score"], b["density_score"], rtol=1e-5)
    assert (a["predicted"] == b["predicted"]).mean() > 0.99
    direct = model.predict_proba(frame)
    assert (a[[f"proba_{c}" for c in model.classes]].to_numpy() == direct).all()


def test_duplicate_id_in_a_later_chunk_is_refused(env):
    from semisup._errors import DataError
    from semisup.model import load_model, predict_file

    root, _, model_dir = env

    def dup_late(f):
        f.loc[150, ID] = "w003"
        return f

    data = _table(root, "dup-late.csv", dup_late)
    with pytest.raises(DataError, match="duplicate id 'w003'"):
        predict_file(load_model(model_dir), data, root / "dup-late-pred.csv", chunk_rows=20)
    assert not (root / "dup-late-pred.csv").exists()
