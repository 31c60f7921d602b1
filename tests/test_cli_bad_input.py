"""Every bad-input case of the data layer, through the real command line in a subprocess.

Each case checks: exit code 2 (or 0 with a warning where the input is usable), a one-line
message naming the file / column / row / value and the fix, no traceback, and that the input
file's bytes are unchanged (SHA-256 from hashlib).
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]


def _run(args: list[str], cwd: Path) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-m", "semisup", *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=300)


def _card(tmp_path: Path, name: str, content: bytes | None, *extra: str,
          label: str = "label") -> tuple[subprocess.CompletedProcess, Path]:
    path = tmp_path / name
    if content is not None:
        path.write_bytes(content)
    before = hashlib.sha256(content).hexdigest() if content is not None else None
    result = _run(["card", name, "--label-column", label, "--out", "out/card.md", *extra],
                  cwd=tmp_path)
    assert "Traceback" not in result.stderr, result.stderr
    if content is not None:
        # the input is only read: bytes unchanged (hashlib SHA-256)
        assert hashlib.sha256(path.read_bytes()).hexdigest() == before
    return result, path


def _error_line(result: subprocess.CompletedProcess) -> str:
    assert result.returncode == 2, (result.returncode, result.stdout, result.stderr)
    lines = [line for line in result.stderr.splitlines() if line.startswith("error: ")]
    assert len(lines) == 1, result.stderr
    return lines[0]


GOOD = b"a,b,label\n1,x,p\n2,y,q\n3,x,p\n4,y,q\n5,x,\n"


# (file name, bytes, extra CLI args, substrings the one-line error must contain)
ERROR_CASES = {
    "missing file": ("absent.csv", None, [], ["absent.csv", "file not found", "check the path"]),
    "empty file": ("empty.csv", b"", [], ["empty.csv", "file is empty (0 bytes)", "export"]),
    "blank file": ("blank.csv", b"  \n\n", [], ["blank.csv", "only blank space"]),
    "wrong delimiter given": (
        "semi.csv", b"a;b;label\n1;2;x\n3;4;y\n", ["--delimiter", ","],
        ["semi.csv", "one column with delimiter ','", "contains ';'",
         "pass --delimiter ';'"]),
    "tsv suffix on a comma file": (
        "comma.tsv", b"a,b,label\n1,2,x\n3,4,y\n", [],
        ["comma.tsv", "contains ','", "pass --delimiter ','"]),
    "ragged rows": (
        "ragged.csv", b"a,b,label\n1,2,x\n3,4,y,9,9\n", [],
        ["ragged.csv", "same number of fields", "--delimiter"]),
    "unreadable encoding": (
        "latin.csv", "a,b,label\n1,café,x\n2,thé,y\n".encode("latin-1"), [],
        ["latin.csv", "cannot be decoded as utf-8", "0xe9", "--encoding"]),
    "undecodable byte past the sniffed sample": (
        "late.csv", b"a,b,label\n" + b"1,abc,x\n" * 40_000 + "2,café,y\n".encode("latin-1"), [],
        ["late.csv", "cannot be decoded as utf-8", "0xe9", "--encoding"]),
    "unknown encoding name": (
        "good.csv", GOOD, ["--encoding", "klingon-8"], ["unknown text encoding 'klingon-8'"]),
    "label column absent": (
        "nolabel.csv", b"a,b,lable\n1,2,x\n3,4,y\n", [],
        ["nolabel.csv", "no column named 'label'", "did you mean 'lable'", "--label-column"]),
    "id column absent": (
        "good.csv", GOOD, ["--id-column", "row_id"],
        ["no column named 'row_id'", "--id-column"]),
    "no labeled rows": (
        "unl.csv", b"a,b,label\n1,2,\n3,4,NA\n5,6,?\n",
        ["--unlabeled-marker", "?", "--unlabeled-marker", "NA"],
        ["unl.csv", "label column 'label' has no labeled rows", "label some rows"]),
    "one class labeled": (
        "one.csv", b"a,b,label\n1,2,cat\n3,4,cat\n5,6,\n", [],
        ["one.csv", "only one class ('cat')", "2 labeled rows", "another class"]),
    "duplicate ids": (
        "dupid.csv", b"id,a,label\nr1,1,x\nr2,2,y\nr1,3,x\n", ["--id-column", "id"],
        ["dupid.csv", "duplicate id 'r1'", "line 2 and line 4", "make ids unique"]),
    "duplicate column names": (
        "dupcol.csv", b"a,b,a,label\n1,2,3,x\n4,5,6,y\n", [],
        ["dupcol.csv", "columns 1 and 3 are both named 'a'", "rename one"]),
    "all-missing column": (
        "allna.csv", b"a,b,label\n1,,x\n2,,y\n3,,x\n", [],
        ["allna.csv", "column 'b' is empty in every row", "--kind b=drop"]),
    "infinite value": (
        "inf.csv", b"a,b,label\n1,2,x\n2,inf,y\n3,-inf,x\n", [],
        ["inf.csv", "column 'b' has an infinite value (inf) at line 3", "2 such cells",
         "finite number"]),
    "ambiguous thousands separator or decimal comma": (
        "ambig.csv", b'a,b,label\n"1,234",2,x\n"2,500",3,y\n"7,125",4,x\n', [],
        ["ambig.csv", "column 'a'", "'1,234'", "thousands separators or decimal commas",
         "plain numbers"]),
    "mixed number styles": (
        "styles.csv", b'a,b,label\n"1,234.5",2,x\n"3,5",3,y\n', [],
        ["styles.csv", "column 'a' mixes number styles", "'1,234.5'", "'3,5'"]),
    "mixed types in one column": (
        "mixed.csv", b"a,b,label\n1,2,x\n2,3,y\n3,4,x\n4,5,y\nabc,6,x\n", [],
        ["mixed.csv", "column 'a' holds numbers in 80% of its filled cells", "line 6",
         "'abc'", "--kind a=categorical"]),
    "declared numeric but text": (
        "declared.csv", b"a,b,label\n1,lo,x\n2,hi,y\n", ["--kind", "b=numeric"],
        ["declared.csv", "column 'b' is declared numeric", "line 2", "'lo'"]),
    "zero rows": (
        "header.csv", b"a,b,label\n", [], ["header.csv", "no data rows"]),
    "one column": (
        "onecol.csv", b"label\nx\ny\n", [], ["onecol.csv", "only one column ('label')"]),
    "bad kind value": (
        "good.csv", GOOD, ["--kind", "a=numbers"], ["a='numbers' is not a kind", "numeric"]),
    "kind for absent column": (
        "good.csv", GOOD, ["--kind", "zz=drop"], ["column 'zz'", "not in the table"]),
    "kind not NAME=VALUE": ("good.csv", GOOD, ["--kind", "a"], ["'a' is not of the form"]),
    "no feature left": (
        "nofeat.csv", b"a,b,label\n1,k,x\n1,k,y\n1,k,x\n", [],
        ["nofeat.csv", "no feature columns are left", "--kind"]),
    "not parquet": (
        "fake.parquet", b"a,b,label\n1,2,x\n", [], ["fake.parquet", "not a readable Parquet"]),
}


@pytest.mark.parametrize("case", sorted(ERROR_CASES))
def test_bad_input_gives_one_line_error(tmp_path, case):
    name, content, extra, expected = ERROR_CASES[case]
    result, _ = _card(tmp_path, name, content, *extra)
    line = _error_line(result)
    for text in expected:
        assert text in line, (text, line)
    assert not (tmp_path / "out" / "card.md").exists()


def test_kinds_file_without_kinds_table(tmp_path):
    (tmp_path / "kinds.toml").write_text("[other]\na = 'numeric'\n")
    result, _ = _card(tmp_path, "good.csv", GOOD, "--kinds-file", "kinds.toml")
    assert "kinds.toml: no [kinds] table" in _error_line(result)


def test_kinds_file_bad_toml_and_bad_kind(tmp_path):
    (tmp_path / "kinds.toml").write_text("[kinds\n")
    result, _ = _card(tmp_path, "good.csv", GOOD, "--kinds-file", "kinds.toml")
    assert "kinds.toml: not valid TOML" in _error_line(result)
    (tmp_path / "kinds.toml").write_text("[kinds]\na = 'blob'\n")
    result, _ = _card(tmp_path, "good.csv", GOOD, "--kinds-file", "kinds.toml")
    assert "[kinds] a = 'blob' is not a kind" in _error_line(result)


def test_debug_flag_shows_traceback(tmp_path):
    (tmp_path / "empty.csv").write_bytes(b"")
    result = _run(["card", "empty.csv", "--label-column", "label", "--debug"], cwd=tmp_path)
    assert result.returncode != 0
    assert "Traceback" in result.stderr and "DataError" in result.stderr


def _card_json(tmp_path: Path) -> dict:
    return json.loads((tmp_path / "out" / "card.json").read_text())


def test_single_label_class_warns_and_card_is_written(tmp_path):
    content = b"a,b,label\n1,2,x\n2,3,x\n3,4,y\n4,5,\n"
    result, _ = _card(tmp_path, "single.csv", content)
    assert result.returncode == 0, result.stderr
    assert "DataWarning" in result.stderr
    assert "1 class(es) have a single labeled row ('y')" in result.stderr
    card = _card_json(tmp_path)
    assert card["class_counts"] == {"x": 2, "y": 1}
    assert any("single labeled row" in w for w in card["warnings"])


def test_case_and_space_variants_of_a_label_warn(tmp_path):
    content = b"a,b,label\n1,2,Cat\n2,3,cat\n3,4,cat\n4,5,dog\n5,6,dog \n6,7,dog\n"
    result, _ = _card(tmp_path, "typo.csv", content)
    assert result.returncode == 0, result.stderr
    assert "values 'Cat' (1 rows) and 'cat' (2 rows) differ only in letter case" in result.stderr
    assert "'dog' (2 rows) and 'dog ' (1 rows)" in result.stderr
    # labels are kept as written: four classes, nothing merged silently
    assert sorted(_card_json(tmp_path)["class_counts"]) == ["Cat", "cat", "dog", "dog "]


@pytest.mark.slow
def test_more_than_a_million_categorical_levels(tmp_path):
    n = 1_000_001
    codes = np.char.add("c", np.arange(n).astype(str))
    labels = np.where(np.arange(n) % 2 == 0, "x", "y")
    body = "\n".join(np.char.add(np.char.add(np.char.add(codes, ",1,"), labels), ""))
    content = ("a,b,label\n" + body + "\n").encode()
    result, _ = _card(tmp_path, "levels.csv", content, "--kind", "a=categorical")
    line = _error_line(result)
    assert "levels.csv: column 'a' has 1,000,001 distinct values, more than 1,000,000" in line
    assert "--kind a=drop" in line
