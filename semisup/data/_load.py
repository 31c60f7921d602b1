"""Table -> validated, encoded Dataset."""

from __future__ import annotations

import difflib
import logging
import os
import re
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .._errors import DataError, DataWarning
from ._columns import Where, as_text, infer_column_kinds, prepare_columns
from ._dataset import Dataset
from ._labels import encode_labels
from ._read import check_kinds, file_sha256, is_text_table, read_table
from ._source import TableSource

__all__ = ["dataset_from_frame", "load_dataset", "load_source"]

log = logging.getLogger(__name__)
#: (table hash, note) pairs already logged at INFO in this process
_NOTED: set[tuple[str | None, str]] = set()
#: column names that usually hold row ids (case-insensitive)
_ID_NAME = re.compile(r"(?i)(id|row_?id|record_?id|index|key|uuid|\w+_id)")


@dataclass
class _Loaded:
    """A Dataset plus what the data card needs from the way there."""

    dataset: Dataset
    frame: pd.DataFrame
    features: pd.DataFrame
    id_column: str | None


def _suggest(name: str, columns: Sequence[str]) -> str:
    close = difflib.get_close_matches(name, list(columns), n=1, cutoff=0.6)
    if not close:
        close = [c for c in columns if c.strip().casefold() == name.strip().casefold()][:1]
    return f" (did you mean {close[0]!r}?)" if close else ""


def _column_list(columns: Sequence[str], limit: int = 12) -> str:
    shown = ", ".join(repr(c) for c in columns[:limit])
    return shown + (f", ... ({len(columns)} in all)" if len(columns) > limit else "")


def _check_shape_and_names(
    frame: pd.DataFrame,
    label_column: str,
    id_column: str | None,
    kinds: Mapping[str, str],
    where: Where,
) -> None:
    columns = [str(c) for c in frame.columns]
    duplicated = pd.Index(columns)[pd.Index(columns).duplicated()]
    if len(duplicated):
        raise DataError(f"{where.source}: more than one column is named {duplicated[0]!r}; "
                        "rename them so every column name is unique")
    if len(columns) == 0:
        raise DataError(f"{where.source}: the table has no columns; export it again with a "
                        "header row")
    if len(columns) == 1:
        hint = " (if the fields are separated by another character, pass --delimiter)" \
            if where.text_file else ""
        raise DataError(
            f"{where.source}: the table has only one column ({columns[0]!r}); it needs the label "
            f"column and at least one feature column{hint}"
        )
    if frame.shape[0] == 0:
        raise DataError(f"{where.source}: the table has a header but no data rows (0 rows); "
                        "export it again with its rows")
    if label_column not in columns:
        raise DataError(
            f"{where.source}: no column named {label_column!r}{_suggest(label_column, columns)}; "
            f"columns are {_column_list(columns)}; pass one of them as --label-column"
        )
    if id_column is not None:
        if id_column == label_column:
            raise DataError(f"{where.source}: --id-column and --label-column are both "
                            f"{label_column!r}; the id column must be another column")
        if id_column not in columns:
            raise DataError(
                f"{where.source}: no column named {id_column!r}{_suggest(id_column, columns)} "
                f"for the ids; columns are {_column_list(columns)}; pass one of them as "
                "--id-column or leave it out to use row numbers"
            )
    for column, kind in kinds.items():
        if column not in columns:
            raise DataError(
                f"{where.source}: kind override names column {column!r}"
                f"{_suggest(column, columns)}, which is not in the table; fix the name in "
                "--kind or the [kinds] table"
            )
        check_kinds({column: kind}, lambda c, k: f"kind override {c}={k!r}")
        if column in (label_column, id_column):
            raise DataError(f"kind override {column}={kind!r} names the label or id column; "
                            "remove it (those columns are never features)")


def _row_ids(frame: pd.DataFrame, id_column: str | None, where: Where) -> np.ndarray:
    if id_column is None:
        return np.arange(frame.shape[0]).astype(str).astype(object)
    ids = as_text(frame[id_column])
    missing = ids.isna().to_numpy()
    if missing.any():
        row = int(np.flatnonzero(missing)[0])
        raise DataError(f"{where.source}: id column {id_column!r} is empty at {where.row(row)} "
                        f"({int(missing.sum())} empty ids); give every row an id or leave out "
                        "--id-column to use row numbers")
    repeated = ids.duplicated(keep=False).to_numpy()
    if repeated.any():
        first = int(np.flatnonzero(repeated)[0])
        value = ids.iloc[first]
        rows = np.flatnonzero((ids == value).to_numpy())[:2]
        n_dup = int(ids.duplicated(keep="first").sum())
        raise DataError(
            f"{where.source}: id column {id_column!r} has duplicate id {value!r} at "
            f"{where.row(rows[0])} and {where.row(rows[1])} ({n_dup} repeated ids in all); make "
            "ids unique, or leave out --id-column to use row numbers"
        )
    return ids.to_numpy(dtype=object)


def _build(
    frame: pd.DataFrame,
    *,
    label_column: str,
    id_column: str | None,
    unlabeled_markers: Sequence[str],
    kinds: Mapping[str, str] | None,
    where: Where,
    source: Path | None,
    sha256: str | None,
) -> _Loaded:
    kinds = dict(kinds or {})
    frame.columns = [str(c) for c in frame.columns]
    _check_shape_and_names(frame, label_column, id_column, kinds, where)
    row_ids = _row_ids(frame, id_column, where)
    y, class_names, label_notes = encode_labels(
        frame[label_column], column=label_column, unlabeled_markers=unlabeled_markers,
        where=where,
    )
    features, notes = prepare_columns(
        frame, label_column=label_column, id_column=id_column, overrides=kinds, where=where
    )
    feature_kinds = infer_column_kinds(features, overrides=kinds)
    column_kinds: dict[str, str] = {}
    for column in frame.columns:
        if column == label_column:
            column_kinds[column] = "label"
        elif column == id_column:
            column_kinds[column] = "id"
        elif column in kinds and kinds[column] in ("drop", "text"):
            column_kinds[column] = kinds[column]
        else:
            column_kinds[column] = feature_kinds[column]
    # scikit-learn loads here, after the cheap checks, so bad input fails fast.
    from ._encoder import TableEncoder

    encoder = TableEncoder(kinds=feature_kinds)
    try:
        X = encoder.fit_transform(features)
    except DataError as exc:
        raise DataError(f"{where.source}: {exc}") from None
    for column, kind in column_kinds.items():
        if kind in ("drop", "text") and column not in features.columns:
            reason = "dropped as asked" if kind == "drop" else "free text"
            notes.append(f"column {column!r} is {reason}; not used as a feature")
    dataset = Dataset(
        X=X,
        y=y,
        row_ids=row_ids,
        feature_names=[str(n) for n in encoder.get_feature_names_out()],
        class_names=class_names,
        blocks=encoder.blocks_,
        encoder=encoder,
        column_kinds=column_kinds,
        notes=[*notes, *label_notes, *encoder.notes_],
        source=source,
        sha256=sha256,
        label_column=label_column,
    )
    for column, kind in column_kinds.items():
        if id_column is None and kind == "numeric" and _ID_NAME.fullmatch(column.strip()):
            warnings.warn(f"{where.source}: column {column!r} is named like a row id but is "
                          "used as a numeric feature; if it names the rows, pass --id-column "
                          f"{column} (or --kind {column}=drop)", DataWarning, stacklevel=3)
    for note in dataset.notes:
        # once per table and process: a study loads its table at every step
        level = logging.DEBUG if (sha256, note) in _NOTED else logging.INFO
        _NOTED.add((sha256, note))
        log.log(level, "%s", note)
    return _Loaded(dataset=dataset, frame=frame, features=features, id_column=id_column)


def dataset_from_frame(
    frame: pd.DataFrame,
    *,
    label_column: str,
    id_column: str | None = None,
    unlabeled_markers: Sequence[str] = (),
    kinds: Mapping[str, str] | None = None,
    source: str | os.PathLike[str] | None = None,
) -> Dataset:
    """Validate and encode a DataFrame (see :func:`load_dataset`); the frame is not changed."""
    where = Where(str(source) if source is not None else "table",
                  text_file=source is not None and is_text_table(source))
    return _build(
        frame.copy(deep=False), label_column=label_column, id_column=id_column,
        unlabeled_markers=unlabeled_markers, kinds=kinds, where=where,
        source=Path(source) if source is not None else None, sha256=None,
    ).dataset


def load_source(source: TableSource) -> _Loaded:
    """Read ``source``'s table and build its Dataset (the one reader of every table)."""
    path = source.path
    text_columns = [c for c in (source.label_column, source.id_column) if c]
    frame = read_table(path, delimiter=source.delimiter, encoding=source.encoding,
                       text_columns=text_columns)
    sha256 = file_sha256(path)
    where = Where(str(path), text_file=is_text_table(path))
    return _build(
        frame, label_column=source.label_column, id_column=source.id_column,
        unlabeled_markers=source.unlabeled_markers, kinds=source.kinds, where=where,
        source=path, sha256=sha256,
    )


def load_dataset(
    path: str | os.PathLike[str],
    *,
    label_column: str,
    id_column: str | None = None,
    unlabeled_markers: Sequence[str] = (),
    kinds: Mapping[str, str] | None = None,
    delimiter: str | None = None,
    encoding: str | None = None,
) -> Dataset:
    """Read, validate and encode a table.

    Parameters
    ----------
    path : path-like
        CSV, TSV or Parquet file (see :func:`read_table`).
    label_column : str
        Column holding the class label; empty cells and ``unlabeled_markers`` mean
        unlabeled (texts such as ``NA`` or ``None`` are classes unless given as markers).
    id_column : str, optional
        Column of unique row ids; default: the 0-based row number.
    unlabeled_markers : sequence of str
        Extra label values that mean unlabeled (e.g. ``"?"``).
    kinds : dict of str to str, optional
        Column kind overrides: numeric, categorical, drop or text.
    delimiter, encoding : str, optional
        For text files; the delimiter is sniffed and the encoding defaults to UTF-8.

    Returns
    -------
    Dataset

    Raises
    ------
    DataError
        With a one-line message naming the file, column, row or value and the fix.
    """
    return TableSource(
        path, label_column=label_column, id_column=id_column,
        unlabeled_markers=unlabeled_markers, kinds=kinds or {}, delimiter=delimiter,
        encoding=encoding,
    ).load()
