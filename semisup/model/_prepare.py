"""New rows -> the encoder's input: column checks, kind checks, counts of what was filled in.

Missing cells and category values the training table never had are handled the way the
fitted :class:`~semisup.data.TableEncoder` handles them (median / ``"(missing)"`` /
``"(other)"``); this module only checks the columns and counts those cells for the summary.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from pandas.api import types as ptypes

from .._errors import DataError
from ..data import as_text

__all__ = ["InputCounts", "check_columns", "prepare_rows"]

_NUMBER = r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?"


@dataclass
class InputCounts:
    """What prediction had to fill in, per feature column."""

    n_rows: int = 0
    missing: dict[str, int] = field(default_factory=dict)
    unseen: dict[str, int] = field(default_factory=dict)
    unseen_examples: dict[str, list[str]] = field(default_factory=dict)

    def add(self, column: str, n_missing: int, n_unseen: int = 0, examples=()) -> None:
        if n_missing:
            self.missing[column] = self.missing.get(column, 0) + int(n_missing)
        if n_unseen:
            self.unseen[column] = self.unseen.get(column, 0) + int(n_unseen)
            kept = self.unseen_examples.setdefault(column, [])
            for value in examples:
                if len(kept) >= 3:
                    break
                if value not in kept:
                    kept.append(str(value))

    def to_dict(self) -> dict:
        return {"n_rows": self.n_rows, "missing_cells": dict(sorted(self.missing.items())),
                "unseen_categories": dict(sorted(self.unseen.items())),
                "unseen_examples": dict(sorted(self.unseen_examples.items()))}


def _row_name(source: str, text_file: bool, index: int) -> str:
    return f"line {index + 2}" if text_file else f"row {index} (0-based)"


def check_columns(columns, schema: Mapping[str, str], *, source: str, id_column: str | None,
                  id_required: bool) -> None:
    """Every feature column the model uses is present; the id column too when asked."""
    present = {str(c) for c in columns}
    absent = [c for c in schema if c not in present]
    if absent:
        more = f" (and {len(absent) - 1} more)" if len(absent) > 1 else ""
        raise DataError(
            f"{source}: column {absent[0]!r}{more} that the model was trained on is missing; add "
            "it (empty cells are allowed) or predict with a table of the training columns"
        )
    if id_required and id_column is not None and id_column not in present:
        raise DataError(
            f"{source}: id column {id_column!r} is missing; add it, or pass --id-column with "
            "the table's id column (or --id-column '' to number the rows)"
        )


def prepare_rows(
    frame: pd.DataFrame,
    *,
    schema: Mapping[str, str],
    levels: Mapping[str, list[str]],
    encoder_columns: list[str],
    counts: InputCounts,
    source: str,
    text_file: bool,
    first_row: int = 0,
) -> pd.DataFrame:
    """The encoder's input frame for ``frame`` (same rows), with kinds checked.

    ``schema`` maps each used feature column to ``numeric`` or ``categorical``; ``levels``
    holds each categorical column's fitted levels. Columns the encoder was fitted on but does
    not use (constant, id-like) are filled with missing values when absent.

    Raises
    ------
    DataError
        A numeric column holding words or infinities, or a categorical column that now holds
        only numbers none of which it had in training (a changed column kind).
    """
    out: dict[str, pd.Series] = {}
    n = len(frame)
    counts.n_rows += n
    for column in encoder_columns:
        kind = schema.get(column)
        if kind is None:
            out[column] = frame[column] if column in frame.columns else pd.Series(
                [np.nan] * n, index=frame.index, dtype=float)
            continue
        series = frame[column]
        if kind == "numeric":
            values = _numeric(series, column, source, text_file, first_row)
            counts.add(column, int(np.isnan(values).sum()))
            out[column] = pd.Series(values, index=frame.index)
        else:
            text = as_text(series)
            text = text.where(text.str.strip().str.len() > 0, None)
            missing = text.isna().to_numpy()
            known = pd.Index(levels[column]).get_indexer(text.astype(object)) >= 0
            unseen = ~missing & ~known
            if unseen.any() and not known.any() and _only_numbers(series, text, unseen) \
                    and not any(pd.Series(levels[column], dtype=str).str.fullmatch(_NUMBER)):
                row = int(np.flatnonzero(unseen)[0])
                shown = ", ".join(repr(v) for v in levels[column][:3])
                raise DataError(
                    f"{source}: column {column!r} was categorical in training (levels {shown}, "
                    f"...) but holds numbers here, e.g. {text.iloc[row]!r} at "
                    f"{_row_name(source, text_file, first_row + row)}; give the column its "
                    "training values"
                )
            examples = pd.unique(text[unseen])[:3] if unseen.any() else ()
            counts.add(column, int(missing.sum()), int(unseen.sum()), examples)
            out[column] = text
    return pd.DataFrame(out, index=frame.index)


def _only_numbers(series: pd.Series, text: pd.Series, unseen: np.ndarray) -> bool:
    if ptypes.is_numeric_dtype(series.dtype) and not ptypes.is_bool_dtype(series.dtype):
        return True
    return bool(text[unseen].str.strip().str.fullmatch(_NUMBER).all())


def _numeric(series: pd.Series, column: str, source: str, text_file: bool,
             first_row: int) -> np.ndarray:
    if ptypes.is_bool_dtype(series.dtype):
        values = series.to_numpy(dtype=np.float64, na_value=np.nan)
    elif ptypes.is_numeric_dtype(series.dtype):
        values = series.to_numpy(dtype=np.float64, na_value=np.nan)
    else:
        text = as_text(series)
        text = text.where(text.str.strip().str.len() > 0, None)
        numbers = pd.to_numeric(text.str.strip(), errors="coerce")
        bad = numbers.isna().to_numpy() & text.notna().to_numpy()
        if bad.any():
            row = int(np.flatnonzero(bad)[0])
            raise DataError(
                f"{source}: column {column!r} was numeric in training but "
                f"{_row_name(source, text_file, first_row + row)} holds {text.iloc[row]!r} "
                f"({int(bad.sum())} such cells); write a number there or leave the cell empty"
            )
        values = numbers.to_numpy(dtype=np.float64, na_value=np.nan)
    infinite = np.isinf(values)
    if infinite.any():
        row = int(np.flatnonzero(infinite)[0])
        raise DataError(
            f"{source}: column {column!r} has an infinite value at "
            f"{_row_name(source, text_file, first_row + row)}; replace it with a finite number "
            "or leave the cell empty"
        )
    return values
