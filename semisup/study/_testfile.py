"""A separate labeled test file: read it, check it against the table, encode its rows.

The test rows are only ever evaluated on: their labels are never trained or tuned on, and their
features reach the unsupervised stage and the semi-supervised methods only when the study is
transductive.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._errors import ConfigError, DataError

__all__ = ["TestRows", "load_test_rows"]

_PARQUET = (".parquet", ".pq")


@dataclass
class TestRows:
    """The test file's rows, encoded with the table's encoder."""

    X: np.ndarray
    y: np.ndarray
    row_ids: np.ndarray
    path: str
    sha256: str


def _where(path: Path, i: int) -> str:
    return f"row {i} (0-based)" if path.suffix.lower() in _PARQUET else f"line {i + 2}"


def _refuse_rows(path: Path, bad: np.ndarray, words: Callable[[int, int], str]) -> None:
    """Raise a one-line DataError for the first row flagged in ``bad``."""
    if bad.any():
        raise DataError(f"test file {path}: {words(int(np.flatnonzero(bad)[0]), int(bad.sum()))}")


def load_test_rows(spec: Any, ds: Any) -> TestRows:
    """Read ``spec.test_data`` and check it matches the table ``ds``.

    Raises :class:`DataError` (one line, naming the file and the value) when the test file's
    columns differ from the table's, a row has no label or a label that is not a class of the
    table, or a row id (with ``id_column``) is also a row id of the table.
    """
    from ..data import as_text, file_sha256, read_table

    path = Path(spec.test_data)
    if getattr(ds, "encoder", None) is None or not ds.column_kinds:
        raise ConfigError("a test file needs the table read from a file (its encoder encodes "
                          "the test rows); pass the table as 'data'")
    label, id_col = spec.label_column, spec.id_column
    frame = read_table(path, delimiter=spec.delimiter, encoding=spec.encoding,
                       text_columns=[c for c in (label, id_col) if c])
    frame.columns = [str(c) for c in frame.columns]
    table_cols = list(ds.column_kinds)
    missing = [c for c in table_cols if c not in frame.columns]
    if missing:
        raise DataError(
            f"test file {path}: column {missing[0]!r} of the table is missing "
            f"({len(missing)} missing); give the test file the same columns as the table"
        )
    extra = [c for c in frame.columns if c not in table_cols]
    if extra:
        raise DataError(
            f"test file {path}: column {extra[0]!r} is not a column of the table "
            f"({len(extra)} extra); give the test file the same columns as the table"
        )
    if len(frame) == 0:
        raise DataError(f"test file {path} has no rows; give it labeled rows to evaluate on")
    text = as_text(frame[label]).str.strip()
    markers = {m.strip() for m in spec.unlabeled_markers}
    empty = (text.isna() | (text.str.len() == 0) | text.isin(markers)).to_numpy()
    _refuse_rows(path, empty, lambda i, n: (
        f"label column {label!r} is empty at {_where(path, i)} ({n} unlabeled rows); every "
        "test row needs a label, remove the unlabeled rows"))
    classes = list(ds.class_names)
    codes = text.map({name.strip(): k for k, name in enumerate(classes)})
    _refuse_rows(path, codes.isna().to_numpy(), lambda i, n: (
        f"label {text.iloc[i]!r} at {_where(path, i)} is not a class of the table (classes: "
        f"{', '.join(classes)}; {n} such rows); fix the labels or remove those rows"))
    if id_col:
        ids = as_text(frame[id_col]).to_numpy(dtype=object)
        _refuse_rows(path, pd.isna(ids), lambda i, n: (
            f"id column {id_col!r} is empty at {_where(path, i)} ({n} empty ids); give every "
            "test row an id"))
        shared = np.isin(ids.astype(str), np.asarray(ds.row_ids, dtype=str))
        _refuse_rows(path, shared, lambda i, n: (
            f"row id {ids[i]!r} at {_where(path, i)} is also a row of the table ({n} shared "
            "ids); a test row must never be a training row, remove the shared rows from one of "
            "the files"))
        if len(set(ids.astype(str))) != len(ids):
            raise DataError(f"test file {path}: id column {id_col!r} has duplicate ids; make "
                            "the test file's ids unique")
        row_ids = np.array([f"{v}" for v in ids], dtype=object)
    else:
        row_ids = np.array([f"test:{i}" for i in range(len(frame))], dtype=object)
    encoder = ds.encoder
    try:
        X = encoder.transform(frame[list(encoder.feature_names_in_)])
    except DataError as exc:
        raise DataError(f"test file {path}: {exc}") from None
    return TestRows(X=np.asarray(X, dtype=np.float32), y=codes.to_numpy(dtype=np.int64),
                    row_ids=row_ids, path=str(path), sha256=file_sha256(path))
