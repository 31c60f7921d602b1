"""read_table_chunks reads what read_table reads, chunk by chunk, with the same checks.

The reference is the whole-file reader (``read_table``) and, for the cells, pandas'
``read_csv`` on the same file; ``semisup predict`` reads through this function, so a table a
study accepted is read the same way when it is scored.
"""

from __future__ import annotations

import gzip

import numpy as np
import pandas as pd
import pytest

from semisup._errors import DataError
from semisup.data import read_table, read_table_chunks


def _table(n: int = 23) -> pd.DataFrame:
    rng = np.random.default_rng(0)
    return pd.DataFrame({
        "id": [f"r{i:03d}" for i in range(n - 2)] + ["NA", "None"],
        "x": rng.normal(size=n).round(6),
        "colour": rng.choice(["red", "blue", "NA"], size=n),
        "label": rng.choice(["a", "b", "NA"], size=n),
    })


def _chunks(path, k, **kw) -> list[pd.DataFrame]:
    return list(read_table_chunks(path, chunk_rows=k, **kw))


@pytest.mark.parametrize("suffix", [".csv", ".tsv", ".csv.gz", ".parquet", ".xlsx"])
def test_chunks_concatenate_to_the_whole_table(tmp_path, suffix):
    frame = _table()
    path = tmp_path / f"t{suffix}"
    if suffix == ".parquet":
        frame.to_parquet(path, index=False)
    elif suffix == ".xlsx":
        pytest.importorskip("openpyxl")
        frame.to_excel(path, index=False)
    elif suffix == ".tsv":
        frame.to_csv(path, sep="\t", index=False)
    elif suffix == ".csv.gz":
        with gzip.open(path, "wt", newline="") as handle:
            frame.to_csv(handle, index=False)
    else:
        frame.to_csv(path, index=False)
    text = ("id", "label")
    whole = read_table(path, text_columns=text)
    parts = _chunks(path, 5, text_columns=text)
    assert [len(p) for p in parts] == [5, 5, 5, 5, 3]
    joined = pd.concat(parts).reset_index(drop=True)
    pd.testing.assert_frame_equal(joined, whole)


def test_id_and_label_texts_are_values_not_missing(tmp_path):
    # The whole-file reader keeps "NA" / "None" in the id and label columns as texts; an
    # earlier chunked reader used pandas' default missing markers there and lost them.
    path = tmp_path / "t.csv"
    _table().to_csv(path, index=False)
    joined = pd.concat(_chunks(path, 7, text_columns=("id", "label")))
    assert joined["id"].tolist()[-2:] == ["NA", "None"]
    assert joined["id"].notna().all()
    # a feature column uses pandas' usual missing markers (pandas read_csv's defaults)
    reference = pd.read_csv(path)
    assert joined["colour"].isna().sum() == reference["colour"].isna().sum() > 0


def test_a_short_row_in_a_later_chunk_is_refused_with_its_line(tmp_path):
    path = tmp_path / "t.csv"
    lines = ["a,b,label"] + [f"{i},{i},x" for i in range(20)]
    lines[15] = "14,14"  # line 16 of the file lost its label field
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(DataError, match=r"line 16 has 2 field\(s\) but the header has 3"):
        _chunks(path, 4)
    with pytest.raises(DataError, match=r"line 16 has 2 field"):  # the same as read_table
        read_table(path)


def test_the_whole_file_checks_apply(tmp_path):
    js = tmp_path / "t.dat"
    js.write_text('[{"a": 1}]\n')
    with pytest.raises(DataError, match="looks like JSON"):
        _chunks(js, 10)
    dup = tmp_path / "dup.csv"
    dup.write_text("a,a\n1,2\n")
    with pytest.raises(DataError, match="both named 'a'"):
        _chunks(dup, 10)
    long = tmp_path / "long.csv"
    long.write_text("a,b\n1,2,3\n4,5,6\n")
    with pytest.raises(DataError, match="header names only 2"):
        _chunks(long, 1)
    with pytest.raises(DataError, match="not found|does not exist|no such"):
        _chunks(tmp_path / "missing.csv", 10)
