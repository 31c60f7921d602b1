"""Reading tables: formats, delimiters, encodings, numbers written as text, kind overrides."""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
import pytest

from semisup import DataError, DataWarning
from semisup.data import load_dataset, read_kind_overrides, read_table
from semisup.data._read import _sniff_delimiter, file_sha256


def test_sha256_matches_hashlib(tmp_path):
    data = np.random.default_rng(0).bytes(3_000_000)  # spans several read chunks
    path = tmp_path / "blob.bin"
    path.write_bytes(data)
    # reference: Python's hashlib over the whole byte string
    assert file_sha256(path) == hashlib.sha256(data).hexdigest()


def test_csv_tsv_parquet_read_the_same_table(tmp_path):
    frame = pd.DataFrame({"a": [1.5, 2.0, np.nan], "b": ["x", "y", "x"], "label": ["p", "", "q"]})
    frame.to_csv(tmp_path / "t.csv", index=False)
    frame.to_csv(tmp_path / "t.tsv", index=False, sep="\t")
    frame.to_csv(tmp_path / "t.txt", index=False, sep="|")
    frame.to_parquet(tmp_path / "t.parquet", index=False)
    # reference: pandas' own reader of the CSV
    expected = pd.read_csv(tmp_path / "t.csv")
    for name in ("t.csv", "t.tsv", "t.txt", "t.parquet"):
        got = read_table(tmp_path / name)
        assert list(got.columns) == ["a", "b", "label"], name
        np.testing.assert_allclose(got["a"].to_numpy(dtype=float), expected["a"].to_numpy(),
                                   equal_nan=True)
        assert got["b"].tolist() == ["x", "y", "x"]


@pytest.mark.parametrize("delim", [",", ";", "\t", "|"])
def test_sniffer_finds_delimiter(delim):
    rows = [["id", "name", "score", "label"], ["1", "a b", "3.5", "x"], ["2", "c", "4", "y"]]
    sample = "\n".join(delim.join(r) for r in rows) + "\n"
    assert _sniff_delimiter(sample) == delim


def test_sniffer_is_not_fooled_by_commas_in_quoted_values():
    sample = 'a;b;label\n"1,5";"x, y";p\n"2,5";z;q\n'
    assert _sniff_delimiter(sample) == ";"


def test_label_and_id_text_kept_as_written(tmp_path):
    (tmp_path / "t.csv").write_text("id,a,label\n007,1,01\n008,2,1\n009,3,\n")
    with pytest.warns(DataWarning, match="single labeled row"):
        ds = load_dataset(tmp_path / "t.csv", label_column="label", id_column="id")
    assert ds.row_ids.tolist() == ["007", "008", "009"]
    assert ds.class_names == ["01", "1"]
    assert ds.y.tolist() == [0, 1, -1]


def test_utf8_byte_order_mark_is_not_part_of_first_name(tmp_path):
    (tmp_path / "t.csv").write_bytes("\ufeffa,label\n1,x\n2,y\n".encode())
    assert list(read_table(tmp_path / "t.csv").columns) == ["a", "label"]


def test_latin1_reads_when_named(tmp_path):
    (tmp_path / "t.csv").write_bytes("a,b,label\n1,café,x\n2,thé,y\n".encode("latin-1"))
    frame = read_table(tmp_path / "t.csv", encoding="latin-1")
    assert frame["b"].tolist() == ["café", "thé"]


def test_thousands_separators_parsed_and_noted(tmp_path):
    (tmp_path / "t.csv").write_text(
        'a,b,label\n"1,234.5",2,x\n"12,000",3,y\n7,4,x\n"1,000,000",5,y\n')
    ds = load_dataset(tmp_path / "t.csv", label_column="label")
    assert ds.column_kinds["a"] == "numeric"
    assert any("'1,234.5' -> 1234.5" in n for n in ds.notes)
    # reference: plain float parsing of the same numbers without separators
    values = np.array([1234.5, 12000.0, 7.0, 1e6])
    median = np.median(values)
    q25, q75 = np.percentile(values, [25, 75])
    np.testing.assert_allclose(ds.X[:, 0], (values - median) / (q75 - q25), rtol=1e-6)


def test_decimal_commas_parsed_with_semicolons(tmp_path):
    (tmp_path / "t.csv").write_text("a;b;label\n3,5;2;x\n1.234,5;3;y\n7;4;x\n0,25;5;y\n")
    ds = load_dataset(tmp_path / "t.csv", label_column="label")
    assert ds.column_kinds["a"] == "numeric"
    assert any("decimal commas" in n and "'3,5' -> 3.5" in n for n in ds.notes)
    values = np.array([3.5, 1234.5, 7.0, 0.25])
    q25, q75 = np.percentile(values, [25, 75])
    np.testing.assert_allclose(ds.X[:, 0], (values - np.median(values)) / (q75 - q25),
                               rtol=1e-6)


def test_kind_overrides_from_toml(tmp_path):
    (tmp_path / "k.toml").write_text('[kinds]\nzip = "categorical"\nnote = "text"\n')
    assert read_kind_overrides(tmp_path / "k.toml") == {"zip": "categorical", "note": "text"}
    (tmp_path / "t.csv").write_text(
        "zip,note,a,label\n" + "".join(f"{1000 + i % 3},hello {i},{i / 2},{'xy'[i % 2]}\n"
                                       for i in range(30)))
    ds = load_dataset(tmp_path / "t.csv", label_column="label",
                      kinds=read_kind_overrides(tmp_path / "k.toml"))
    assert ds.column_kinds["zip"] == "categorical"
    assert ds.column_kinds["note"] == "text"
    assert [b.kind for b in ds.blocks] == ["categorical", "numeric"]
    assert "zip=1000" in ds.feature_names


def test_read_errors_are_data_errors(tmp_path):
    with pytest.raises(DataError, match="file not found"):
        read_table(tmp_path / "nope.csv")
    (tmp_path / "d.csv").write_text("a,a\n1,2\n")
    with pytest.raises(DataError, match="columns 1 and 2 are both named 'a'"):
        read_table(tmp_path / "d.csv")
    frame = pd.DataFrame([[1, 2]], columns=["a", "b"])
    frame.to_parquet(tmp_path / "p.parquet")
    assert read_table(tmp_path / "p.parquet").shape == (1, 2)
