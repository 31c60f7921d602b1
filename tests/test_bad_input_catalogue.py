"""The bad-input catalogue: unusual or broken inputs to card, study, plan and report, run
through the command line's own ``main`` in this process (fast; the subprocess path is covered
by tests/test_cli_bad_input.py).

Every case asserts the exit status; for exit 2, that stderr holds exactly one ``error:`` line
that names the file / column / option / value and says the fix; never a traceback; and that
no input file changed (SHA-256 from hashlib of every file given to the command, before and
after).
"""

from __future__ import annotations

import bz2
import contextlib
import gzip
import hashlib
import io
import json
import logging
import lzma
import shutil
import sys
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from semisup import cli

ROOT = Path(__file__).resolve().parents[1]


# -- harness ---------------------------------------------------------------------------------


def _tree_hashes(paths: list[Path]) -> dict[str, str]:
    out = {}
    for root in paths:
        files = [root] if root.is_file() else sorted(p for p in root.rglob("*") if p.is_file())
        for f in files:
            out[str(f)] = hashlib.sha256(f.read_bytes()).hexdigest()
    return out


@dataclass
class Outcome:
    code: int
    stdout: str
    stderr: str
    lines: list[str] = field(default_factory=list)

    def error_line(self) -> str:
        errors = [ln for ln in self.stderr.splitlines() if ln.startswith("error: ")]
        assert len(errors) == 1, self.stderr
        return errors[0]


def run_cli(argv: list[str], cwd: Path, monkeypatch, inputs: list[Path]) -> Outcome:
    """``semisup.cli.main(argv)`` in ``cwd``; checks no traceback and unchanged inputs."""
    monkeypatch.chdir(cwd)
    before = _tree_hashes([p for p in inputs if p.exists()])
    out, err = io.StringIO(), io.StringIO()
    root = logging.getLogger()
    saved_handlers = root.handlers[:]
    root.handlers = []  # basicConfig in main binds a handler to this call's stderr
    saved_format = warnings.formatwarning
    try:
        with warnings.catch_warnings(), contextlib.redirect_stdout(out), \
                contextlib.redirect_stderr(err):
            try:
                code = cli.main(argv)
            except SystemExit as exc:  # argparse usage errors
                code = exc.code if isinstance(exc.code, int) else 2
    finally:
        for handler in root.handlers:
            root.removeHandler(handler)
        root.handlers = saved_handlers
        warnings.formatwarning = saved_format
        logging.captureWarnings(False)
    result = Outcome(code, out.getvalue(), err.getvalue())
    assert "Traceback" not in result.stderr, result.stderr
    assert "internal error" not in result.stderr, result.stderr
    after = _tree_hashes([p for p in inputs if p.exists()])
    assert after == before, "an input file changed"
    return result


def expect_error(result: Outcome, *needles: str) -> str:
    assert result.code == 2, (result.code, result.stderr)
    line = result.error_line()
    for needle in needles:
        assert needle in line, (needle, line)
    return line


GOOD = b"a,b,label\n1,x,p\n2,y,q\n3,x,p\n4,y,q\n5,x,\n"


def _xlsx_bytes(frame: pd.DataFrame, header: bool = True) -> bytes:
    pytest.importorskip("openpyxl")
    buffer = io.BytesIO()
    frame.to_excel(buffer, index=False, header=header, engine="openpyxl")
    return buffer.getvalue()


def _parquet_bytes(table) -> bytes:
    import pyarrow.parquet as pq

    buffer = io.BytesIO()
    pq.write_table(table, buffer)
    return buffer.getvalue()


def _nested_parquet(kind: str) -> bytes:
    import pyarrow as pa

    if kind == "struct":
        col = pa.array([{"x": 1, "y": 2}, {"x": 3, "y": 4}, {"x": 5, "y": 6}])
    else:
        col = pa.array([[1, 2], [3], [4, 5, 6]])
    return _parquet_bytes(pa.table({"a": [1.0, 2.0, 3.0], "blob": col,
                                    "label": ["p", "q", "p"]}))


def _zstd(data: bytes) -> bytes:
    zstandard = pytest.importorskip("zstandard")
    return zstandard.ZstdCompressor().compress(data)


# -- card: one-line errors -------------------------------------------------------------------

# name -> (file name, bytes or a function returning bytes, extra args, substrings of the error)
CARD_ERRORS = {
    "gzip name but not gzip": ("t.csv.gz", GOOD, [],
                               ["t.csv.gz", "cannot be decompressed as gzip", ".gz ending"]),
    "truncated gzip": ("t.csv.gz", lambda: gzip.compress(GOOD * 50)[:40], [],
                       ["t.csv.gz", "cannot be decompressed as gzip", "complete"]),
    "bz2 name but not bz2": ("t.csv.bz2", GOOD, [], ["t.csv.bz2", "decompressed as bz2"]),
    "json file": ("t.json", b'[{"a": 1, "label": "p"}]', [],
                  ["t.json", "JSON is not a table format", "convert it to CSV or Parquet"]),
    "ndjson file": ("t.ndjson", b'{"a": 1, "label": "p"}\n', [], ["t.ndjson", "JSON"]),
    "json content named .dat": ("t.dat", b'{"rows": [1, 2]}\n', [],
                                ["t.dat", "looks like JSON", "convert it"]),
    "workbook named .csv": ("t.csv", lambda: _xlsx_bytes(pd.DataFrame({"a": [1], "label": ["p"]})),
                            [], ["t.csv", "ZIP archive", "name it .xlsx"]),
    "parquet named .csv": ("t.csv", lambda: _nested_parquet("list"), [],
                           ["t.csv", "a Parquet file", ".parquet ending"]),
    "gzip named .csv": ("t.csv", lambda: gzip.compress(GOOD), [],
                        ["t.csv", "gzip-compressed", ".gz ending"]),
    "zstd named .csv": ("t.csv", lambda: _zstd(GOOD), [], ["t.csv", "zstd-compressed"]),
    "sqlite named .csv": ("t.csv", b"SQLite format 3\x00" + b"\x00" * 100, [],
                          ["t.csv", "SQLite database", "export"]),
    "old xls named .csv": ("t.csv", b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 64, [],
                           ["t.csv", ".xls", "save it as .xlsx or CSV"]),
    # PNG signature: the PNG specification (ISO/IEC 15948), section 5.2.
    "png image named .csv": ("t.csv", b"\x89PNG\r\n\x1a\n" + b"\x00\x00\x00\rIHDR" * 8, [],
                             ["t.csv", "a PNG image", "not a picture"]),
    "binary named .csv": ("t.csv", b"ab\x00\x01\x02" * 40, [],
                          ["t.csv", "binary file", "not a text table"]),
    "json array named .csv": ("t.csv", b'[{"a": 1, "label": "p"}, {"a": 2, "label": "q"}]\n',
                              [], ["t.csv", "looks like JSON", "convert it"]),
    "json object named .csv": ("t.csv", b'{"a": [1, 2], "label": ["p", "q"]}\n', [],
                               ["t.csv", "looks like JSON"]),
    "utf-16 file": ("t.csv", "a,b,label\n1,2,x\n".encode("utf-16"), [],
                    ["t.csv", "UTF-16", "--encoding utf-16"]),
    "old .xls name": ("t.xls", b"whatever", [], ["t.xls", "old .xls", ".xlsx or CSV"]),
    "compressed parquet": ("t.parquet.gz", gzip.compress(b"PAR1"), [],
                           ["t.parquet.gz", "compressed .parquet", "decompress"]),
    "nested struct column": ("t.parquet", lambda: _nested_parquet("struct"), [],
                             ["t.parquet", "column 'blob'", "nested", "flatten"]),
    "nested list column": ("t.parquet", lambda: _nested_parquet("list"), [],
                           ["t.parquet", "column 'blob'", "nested"]),
    "short row": ("t.csv", b"a,b,label\n1,2,x\n3,4\n5,6,y\n", [],
                  ["t.csv", "line 3 has 2 field(s) but the header has 3", "1 short row",
                   "add the missing fields"]),
    "short rows counted": ("t.csv", b"a,b,label\n1,2,x\n3\n5,6,y\n7,8\n", [],
                           ["t.csv", "line 3", "2 short row(s)"]),
    "header shorter than every row": ("t.csv", b"a,b\n1,2,x\n3,4,y\n", ["--label-column", "b"],
                                      ["t.csv", "data rows have 3 fields", "header names only 2",
                                       "add the missing column name"]),
    "quote as delimiter": ("t.csv", GOOD, ["--delimiter", '"'],
                           ["t.csv", "delimiter '\"' cannot separate fields"]),
    "empty xlsx sheet": ("t.xlsx", lambda: _xlsx_bytes(pd.DataFrame()), [],
                         ["t.xlsx", "first sheet is empty"]),
    "xlsx duplicate header": (
        "t.xlsx", lambda: _xlsx_bytes(pd.DataFrame([["a", "a", "label"], [1, 2, "p"]]),
                                      header=False), [],
        ["t.xlsx", "columns 1 and 2 are both named 'a'", "rename one"]),
    "xlsx missing header cell": (
        "t.xlsx", lambda: _xlsx_bytes(pd.DataFrame([["a", None, "label"], [1, 2, "p"]]),
                                      header=False), [],
        ["t.xlsx", "column 2", "no name", "give every column a name"]),
    "damaged xlsx": ("t.xlsx", b"PK\x03\x04garbage", [], ["t.xlsx", "not a readable .xlsx"]),
    "labels NA only, NA marked unlabeled": (
        "t.csv", b"a,b,label\n1,2,NA\n3,4,NA\n5,6,\n", ["--unlabeled-marker", "NA"],
        ["t.csv", "no labeled rows", "--unlabeled-marker"]),
}


@pytest.mark.parametrize("case", sorted(CARD_ERRORS))
def test_card_bad_input(tmp_path, monkeypatch, case):
    name, content, extra, needles = CARD_ERRORS[case]
    data = tmp_path / name
    data.write_bytes(content() if callable(content) else content)
    args = ["card", name, "--out", "out/card.md"]
    if "--label-column" not in extra:
        args += ["--label-column", "label"]
    result = run_cli(args + extra, tmp_path, monkeypatch, [data])
    expect_error(result, *needles)
    assert not (tmp_path / "out").exists()  # nothing written on bad input


def test_card_xlsx_needs_openpyxl_named(tmp_path, monkeypatch):
    data = tmp_path / "t.xlsx"
    data.write_bytes(_xlsx_bytes(pd.DataFrame({"a": [1, 2], "label": ["p", "q"]})))
    monkeypatch.setitem(sys.modules, "openpyxl", None)  # as if not installed
    result = run_cli(["card", "t.xlsx", "--label-column", "label"], tmp_path, monkeypatch,
                     [data])
    expect_error(result, "t.xlsx", "needs the optional package openpyxl",
                 "pip install 'semisup[excel]'")


def test_card_zstd_needs_zstandard_named(tmp_path, monkeypatch):
    data = tmp_path / "t.csv.zst"
    data.write_bytes(_zstd(GOOD))
    monkeypatch.setitem(sys.modules, "zstandard", None)
    result = run_cli(["card", "t.csv.zst", "--label-column", "label"], tmp_path, monkeypatch,
                     [data])
    expect_error(result, "t.csv.zst", "zstandard", "pip install 'semisup[zstd]'")


def test_card_unwritable_out_folder(tmp_path, monkeypatch):
    data = tmp_path / "t.csv"
    data.write_bytes(GOOD)
    (tmp_path / "locked").mkdir()
    real_access = cli.os.access
    monkeypatch.setattr(cli.os, "access", lambda p, mode: False if Path(p).name == "locked"
                        else real_access(p, mode))  # root ignores chmod; pretend instead
    result = run_cli(["card", "t.csv", "--label-column", "label", "--out", "locked/c.md"],
                     tmp_path, monkeypatch, [data])
    expect_error(result, "--out", "locked", "permission denied", "another folder")


def test_card_permission_error_while_writing_is_one_line(tmp_path, monkeypatch):
    data = tmp_path / "t.csv"
    data.write_bytes(GOOD)
    import semisup.data._card as card_module

    def refuse(path, text):
        raise PermissionError(13, "Permission denied", str(path))

    monkeypatch.setattr(card_module, "atomic_write_text", refuse)
    result = run_cli(["card", "t.csv", "--label-column", "label", "--out", "c.md"], tmp_path,
                     monkeypatch, [data])
    expect_error(result, "cannot use", "c.json", "Permission denied", "permissions")


# -- card: usable but unusual inputs (exit 0, the table read faithfully, a warning if due) ----


def _card_ok(tmp_path, monkeypatch, name, content, *extra, label="label"):
    data = tmp_path / name
    data.write_bytes(content)
    result = run_cli(["card", name, "--label-column", label, "--out", "out/card.md", *extra],
                     tmp_path, monkeypatch, [data])
    assert result.code == 0, result.stderr
    card = json.loads((tmp_path / "out" / "card.json").read_text())
    return result, card


@pytest.mark.parametrize("text", ["None", "NA", "null", "n/a", "NaN"])
def test_missing_like_labels_are_classes(tmp_path, monkeypatch, text):
    body = f"a,b,label\n1,2,{text}\n2,3,{text}\n3,4,ok\n4,5,ok\n5,6,\n".encode()
    result, card = _card_ok(tmp_path, monkeypatch, "t.csv", body)
    # reference: the file itself -- two labeled classes, one empty cell
    assert card["class_counts"] == {text: 2, "ok": 2} and card["n_labeled"] == 4
    assert f"--unlabeled-marker '{text}'" in result.stderr


def test_one_and_one_point_zero_warn(tmp_path, monkeypatch):
    body = b"a,b,label\n1,2,1\n2,3,1.0\n3,4,2\n4,5,2\n5,6,1\n"
    result, card = _card_ok(tmp_path, monkeypatch, "t.csv", body)
    assert card["class_counts"] == {"1": 2, "1.0": 1, "2": 2}  # kept as written
    assert "'1' (2 rows) and '1.0' (1 rows) are the same number written two ways" in \
        result.stderr


def test_continuous_label_gets_a_hint(tmp_path, monkeypatch):
    rng = np.random.default_rng(0)
    frame = pd.DataFrame({"a": rng.normal(size=300), "price": rng.normal(100, 10, 300).round(2)})
    body = frame.to_csv(index=False).encode()
    result, _ = _card_ok(tmp_path, monkeypatch, "t.csv", body, label="price")
    assert "label column 'price'" in result.stderr and "looks continuous" in result.stderr


@pytest.mark.parametrize("suffix,compress", [
    (".csv.gz", gzip.compress), (".csv.bz2", bz2.compress), (".csv.xz", lzma.compress),
    (".csv.zst", _zstd), (".tsv.gz", gzip.compress)])
def test_compressed_tables_read(tmp_path, monkeypatch, suffix, compress):
    plain = GOOD.replace(b",", b"\t") if suffix.startswith(".tsv") else GOOD
    _, card = _card_ok(tmp_path, monkeypatch, "t" + suffix, compress(plain))
    # reference: pandas reading the uncompressed bytes
    ref = pd.read_csv(io.BytesIO(GOOD))
    assert card["n_rows"] == len(ref) and card["class_counts"] == {"p": 2, "q": 2}


def test_xlsx_reads(tmp_path, monkeypatch):
    frame = pd.DataFrame({"a": [1.5, 2.5, None, 4.0], "b": ["x", "NA", "y", "x"],
                          "label": ["p", "NA", "q", None]})
    _, card = _card_ok(tmp_path, monkeypatch, "t.xlsx", _xlsx_bytes(frame))
    assert card["n_rows"] == 4 and card["class_counts"] == {"NA": 1, "p": 1, "q": 1}
    missing = {c["name"]: c["missing"] for c in card["columns"]}
    assert missing["a"] == 1 and missing["b"] == 1  # a feature cell "NA" is missing


def test_ids_named_like_missing_are_ids(tmp_path, monkeypatch):
    body = b"id,a,label\nNA,1,p\nNone,2,q\nnull,3,p\nx,4,q\n"
    _, card = _card_ok(tmp_path, monkeypatch, "t.csv", body, "--id-column", "id")
    assert card["n_rows"] == 4 and card["id_column"] == "id"


def test_card_out_folder_takes_the_card(tmp_path, monkeypatch):
    data = tmp_path / "t.csv"
    data.write_bytes(GOOD)
    (tmp_path / "cards").mkdir()
    result = run_cli(["card", "t.csv", "--label-column", "label", "--out", "cards"], tmp_path,
                     monkeypatch, [data])
    assert result.code == 0, result.stderr
    assert (tmp_path / "cards" / "t.card.md").is_file()


def _rendered(md: str) -> str:
    markdown_it = pytest.importorskip("markdown_it")
    # reference: markdown-it-py, a CommonMark renderer, with GFM tables
    return markdown_it.MarkdownIt("commonmark").enable("table").render(md)


def test_card_names_and_labels_cannot_inject_markup(tmp_path, monkeypatch):
    evil_col = "x`|<script>alert(1)</script>"
    evil_label = "<img src=x onerror=alert(1)>|`"
    frame = pd.DataFrame({evil_col: [1, 2, 3, 4, 5, 6], "label": [evil_label, "*b*"] * 3})
    _, _ = _card_ok(tmp_path, monkeypatch, "t.csv", frame.to_csv(index=False).encode())
    html = _rendered((tmp_path / "out" / "card.md").read_text())
    assert "<script" not in html and "<img" not in html  # only escaped text (&lt;...)
    assert "&lt;script&gt;" in html and "&lt;img src=x onerror=alert(1)&gt;" in html
    assert "<em>b</em>" not in html
    # every table row keeps its cell count: no '|' split a cell
    for table in html.split("<table>")[1:]:
        rows = table.split("</table>")[0].split("<tr>")[1:]
        counts = {row.count("<td") + row.count("<th") for row in rows}
        assert len(counts) == 1, counts


# -- study -----------------------------------------------------------------------------------


def _table(n: int = 60, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    y = np.array(["p", "q"])[np.arange(n) % 2]
    frame = pd.DataFrame({"f1": rng.normal(size=n) + (y == "q"), "f2": rng.normal(size=n),
                          "label": y})
    frame.loc[frame.index % 3 == 0, "label"] = None
    return frame


QUICK = ["--methods", "supervised-logreg", "--budgets", "4,8", "--repeats", "1",
         "--trials", "1", "--jobs", "1"]


def _study_args(data: str, out: str, *extra: str) -> list[str]:
    return ["study", data, "--label-column", "label", "--out", out, *QUICK, *extra]


STUDY_ERRORS = {
    "jobs zero": (["--jobs", "0"], None, ["--jobs", "0 is not allowed", ">= 1"]),
    "jobs negative": (["--jobs", "-2"], None, ["--jobs", "-2 is not allowed"]),
    "jobs not a number": (["--jobs", "two"], None, ["--jobs", "'two' is not a whole number"]),
    "budgets zero": (["--budgets", "0,4"], None, ["--budgets entry 0", ">= 1"]),
    "budgets text": (["--budgets", "a,b"], None, ["--budgets entry 'a' is not a number"]),
    "budget larger than pool": (["--budgets", "4,500"], None, ["500", "larger than the pool"]),
    "unknown method": (["--methods", "best-method"], None, ["best-method"]),
    "holdout above one": (["--holdout", "1.5"], None, ["holdout", "1.5"]),
    "config missing": (["--config", "absent.toml"], None, ["absent.toml"]),
    "config not toml": (["--config", "bad.toml"], b"[study\n", ["bad.toml"]),
    "vae latent_dim zero": (["--config", "spec.toml", "--methods", "latent-logreg"],
                            b"[pretrain.vae]\nlatent_dim = 0\n",
                            ["[pretrain.vae]", "latent_dim=0", "whole number >= 1"]),
    "vae unknown setting": (["--config", "spec.toml", "--methods", "latent-logreg"],
                            b"[pretrain.vae]\nlayers = 3\n",
                            ["[pretrain.vae]", "'layers'", "allowed"]),
    "vae hidden text": (["--config", "spec.toml", "--methods", "latent-logreg"],
                        b"[pretrain.vae]\nhidden = \"big\"\n", ["[pretrain.vae]", "hidden"]),
    "mixture reg_covar negative": (["--config", "spec.toml", "--methods", "mixture-logreg"],
                                   b"[pretrain.mixture]\nreg_covar = -1.0\n",
                                   ["[pretrain.mixture]", "reg_covar=-1.0", ">= 0"]),
    "mixture covariance type": (["--config", "spec.toml", "--methods", "mixture-logreg"],
                                b"[pretrain.mixture]\ncovariance_types = [\"round\"]\n",
                                ["[pretrain.mixture]", "'round'"]),
    "mixture tol zero": (["--config", "spec.toml", "--methods", "mixture-logreg"],
                         b"[pretrain.mixture]\ntol = 0\n", ["[pretrain.mixture]", "tol=0"]),
}


@pytest.mark.parametrize("case", sorted(STUDY_ERRORS))
def test_study_bad_input(tmp_path, monkeypatch, case):
    extra, config, needles = STUDY_ERRORS[case]
    data = tmp_path / "t.csv"
    _table().to_csv(data, index=False)
    inputs = [data]
    if config is not None:
        name = next(a for a in extra if a.endswith(".toml"))
        (tmp_path / name).write_bytes(config)
        inputs.append(tmp_path / name)
    result = run_cli(_study_args("t.csv", "out", *extra), tmp_path, monkeypatch, inputs)
    expect_error(result, *needles)
    assert not (tmp_path / "out" / "cells.csv").exists()


def test_study_out_is_a_file(tmp_path, monkeypatch):
    data = tmp_path / "t.csv"
    _table().to_csv(data, index=False)
    (tmp_path / "taken").write_text("mine")
    result = run_cli(_study_args("t.csv", "taken"), tmp_path, monkeypatch,
                     [data, tmp_path / "taken"])
    expect_error(result, "--out taken is a file", "give a folder")


def test_study_out_not_writable(tmp_path, monkeypatch):
    data = tmp_path / "t.csv"
    _table().to_csv(data, index=False)
    (tmp_path / "ro").mkdir()
    real_access = cli.os.access
    monkeypatch.setattr(cli.os, "access", lambda p, mode: False if Path(p).name == "ro"
                        else real_access(p, mode))  # root ignores chmod; pretend instead
    result = run_cli(_study_args("t.csv", "ro"), tmp_path, monkeypatch, [data])
    expect_error(result, "--out", "cannot write in", "ro", "permission denied")


@pytest.mark.parametrize("name", ["cells.csv", "curves.csv", "study.json", "label_next.csv",
                                  "cache/t.csv", "figures/t.csv"])
def test_study_refuses_an_input_that_is_an_output(tmp_path, monkeypatch, name):
    data = tmp_path / "out" / name
    data.parent.mkdir(parents=True)
    _table().to_csv(data, index=False)
    result = run_cli(_study_args(str(data.relative_to(tmp_path)), "out"), tmp_path,
                     monkeypatch, [data])
    expect_error(result, str(Path("out") / name), "the study would overwrite it",
                 "rename the table or choose another --out")
    assert sorted(p.name for p in (tmp_path / "out").rglob("*")) == sorted(
        Path(name).parts)  # nothing written beside it


def test_second_study_in_the_same_folder_refuses(tmp_path, monkeypatch):
    from semisup.study._lock import study_lock

    data = tmp_path / "t.csv"
    _table().to_csv(data, index=False)
    with study_lock(tmp_path / "out"):  # a first study holds the folder
        result = run_cli(_study_args("t.csv", "out"), tmp_path, monkeypatch, [data])
    expect_error(result, "another study is running in out", "another --out")
    assert not (tmp_path / "out" / "study.sqlite").exists()


# -- plan and report on a real (tiny) study ----------------------------------------------------


@pytest.fixture(scope="module")
def study_dir(tmp_path_factory) -> Path:
    from semisup.study import StudySpec, run_study

    root = tmp_path_factory.mktemp("catalogue-study")
    data = root / "t.csv"
    _table(90).to_csv(data, index=False)
    spec = StudySpec.build(overrides={"data": data, "label_column": "label",
                                      "methods": ["supervised-logreg"], "budgets": [4, 8, 16],
                                      "repeats": 2, "trials": 1})
    run_study(spec, root / "study", jobs=1, progress=False)
    return root / "study"


def _copy(study_dir: Path, tmp_path: Path) -> Path:
    target = tmp_path / "study"
    shutil.copytree(study_dir, target)
    return target


PLAN_ERRORS = {
    "target without value": (["--target", "accuracy"], ["--target 'accuracy'", "METRIC=VALUE"]),
    "target value text": (["--target", "accuracy=high"], ["--target value 'high'"]),
    "target unknown metric": (["--target", "precision=0.9"], ["'precision'", "use one of"]),
    "target above one": (["--target", "accuracy=1.5"], ["accuracy=1.5", "between 0 and 1"]),
    "target log loss": (["--target", "log_loss=0.3"], ["log_loss", "cannot be a target"]),
    "negative cost": (["--cost-per-label", "-1"], ["-1", ">= 0"]),
    "confidence above one": (["--confidence", "1.5"], ["confidence 1.5", "between 0 and 1"]),
    "confidence zero": (["--confidence", "0"], ["confidence 0", "between 0 and 1"]),
    "class cost form": (["--class-cost", "p"], ["--class-cost 'p' is not of the form"]),
    "class cost text": (["--class-cost", "p=cheap"], ["--class-cost p 'cheap' is not a number"]),
    "class cost negative": (["--class-cost", "p=-2"], ["'p'", ">= 0"]),
    "labels owned negative": (["--labels-owned", "-5"], ["labels_owned", ">= 0"]),
    "next negative": (["--next", "-3"], ["n_next", ">= 0"]),
}


@pytest.mark.parametrize("case", sorted(PLAN_ERRORS))
def test_plan_bad_input(study_dir, tmp_path, monkeypatch, case):
    extra, needles = PLAN_ERRORS[case]
    folder = _copy(study_dir, tmp_path)
    args = {"--target": "accuracy=0.8", "--cost-per-label": "1.0"}
    for flag, value in zip(extra[::2], extra[1::2], strict=True):
        args[flag] = value
    argv = ["plan", "study"] + [x for kv in args.items() for x in kv]
    result = run_cli(argv, tmp_path, monkeypatch, [folder])
    expect_error(result, *needles)
    assert not (folder / "plan.json").exists()


@pytest.mark.parametrize("damage", ["no folder", "empty folder", "cells.csv damaged",
                                    "study.json damaged", "candidates.npz damaged"])
def test_plan_on_a_damaged_study(study_dir, tmp_path, monkeypatch, damage):
    folder = tmp_path / "study"
    needles = ["study"]
    if damage == "empty folder":
        folder.mkdir()
    elif damage != "no folder":
        folder = _copy(study_dir, tmp_path)
        name = damage.split()[0]
        (folder / name).write_bytes(b"\x00\x01not what it should be\xff")
        needles = [name]
    result = run_cli(["plan", "study", "--target", "accuracy=0.8", "--cost-per-label", "1"],
                     tmp_path, monkeypatch, [folder])
    expect_error(result, *needles)


@pytest.mark.parametrize("damage", ["no folder", "empty folder", "a file", "cells.csv damaged",
                                    "study.json damaged"])
def test_report_on_a_damaged_study(study_dir, tmp_path, monkeypatch, damage):
    folder = tmp_path / "study"
    needles = ["study"]
    if damage == "empty folder":
        folder.mkdir()
    elif damage == "a file":
        folder.write_text("not a folder")
    elif damage != "no folder":
        folder = _copy(study_dir, tmp_path)
        name = damage.split()[0]
        (folder / name).write_bytes(b"\x00\x01not what it should be\xff")
        needles = [name]
    result = run_cli(["report", "study"], tmp_path, monkeypatch, [folder])
    expect_error(result, *needles)


def test_plan_label_next_neutralises_formula_ids(tmp_path, monkeypatch):
    from semisup.study import StudySpec, run_study

    frame = _table(90)
    frame.insert(0, "rid", [f"=HYPERLINK(\"x\",{i})" if i % 4 == 0 else
                            f"+{i}A" if i % 4 == 1 else f"@r{i}" if i % 4 == 2 else f"-{i}"
                            for i in range(len(frame))])
    data = tmp_path / "t.csv"
    frame.to_csv(data, index=False)
    spec = StudySpec.build(overrides={"data": data, "label_column": "label", "id_column": "rid",
                                      "methods": ["supervised-logreg"], "budgets": [4, 8, 16],
                                      "repeats": 2, "trials": 1})
    run_study(spec, tmp_path / "study", jobs=1, progress=False)
    result = run_cli(["plan", "study", "--target", "accuracy=0.6", "--cost-per-label", "1",
                      "--next", "30"], tmp_path, monkeypatch, [data])
    reached = json.loads((tmp_path / "study" / "plan.json").read_text())["reached"]
    assert result.code == (0 if reached else 3), result.stderr  # 3: target not reachable
    sheet = pd.read_csv(tmp_path / "study" / "label_next.csv", dtype=str, keep_default_na=False)
    assert len(sheet) == 30
    # OWASP CSV injection: no cell may start with = + - @ unless it is a plain number
    for value in sheet.to_numpy().ravel():
        if value and value[0] in "=+-@":  # ("" is in every string: the empty label cells)
            assert value.lstrip("+-").replace(".", "", 1).isdigit(), value
    assert any(v.startswith("'=HYPERLINK") for v in sheet["row_id"])


def test_a_column_named_id_used_as_a_feature_gets_a_hint(tmp_path, monkeypatch):
    body = b"id,b,label\n1,2,x\n1,3,y\n2,4,x\n2,5,y\n3,6,\n"
    result, card = _card_ok(tmp_path, monkeypatch, "t.csv", body)
    # reference: the file itself -- 'id' repeats, so it is read as a number, not as ids
    assert "id" in card["kinds"]["numeric"]
    assert "column 'id' is named like a row id" in result.stderr
    assert "--id-column id" in result.stderr
