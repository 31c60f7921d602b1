"""Column checks, numbers written as text, and column-kind inference.

Everything here works on whole columns (vectorised over distinct values), never row by row.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd
from pandas.api import types as ptypes

from .._errors import DataError
from ._read import check_kinds

__all__ = ["COLUMN_KINDS", "Where", "as_text", "infer_column_kinds", "looks_like_dates",
           "prepare_columns"]

#: Every kind a source column can end up with.
COLUMN_KINDS = ("numeric", "categorical", "constant", "id-like", "text", "datetime", "drop",
                "label", "id")

#: Share of a column's distinct values that must read as dates (or date-times) for the
#: column to be of kind "datetime" (common practice, no source: a few stray entries allowed).
DATETIME_SHARE = 0.95

# Dates and date-times as tables write them: ISO 8601 (2007-11-11, 2013-04-01T20:15:04Z,
# 2016-09-02 13:40:36), year/month/day, and day.month.year or month/day/year.
_TIME = r"(?:[ T]\d{1,2}:\d{2}(?::\d{2}(?:\.\d+)?)?(?:Z|[+-]\d{2}:?\d{2})?)?"
_DATE = re.compile(r"(?:\d{4}-\d{1,2}-\d{1,2}|\d{4}/\d{1,2}/\d{1,2}|\d{1,2}[/.]\d{1,2}[/.]\d{4})"
                   + _TIME)

#: Fewer non-missing values than this and a column is never called id-like or free text.
MIN_ROWS_FOR_ID_OR_TEXT = 20

#: A text column whose share of number-like values is at least this, and whose distinct
#: numbers outnumber its distinct words, is "numbers with a few stray words" (an error asking
#: for a fix); otherwise a text column (common practice, no source).
MIXED_NUMERIC_SHARE = 0.5

_ID_NAME = re.compile(r"(^|[_\W])(id|key|uuid|guid|index|row|record|no)$", re.IGNORECASE)

_PLAIN = r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?|[+-]?(inf|infinity)"
_US = r"[+-]?\d{1,3}(,\d{3})+(\.\d*)?"  # 1,234 / 1,234,567.5
_EU_DEC = r"[+-]?\d+,\d+"  # 3,5 / 1234,5
_EU_FULL = r"[+-]?\d{1,3}(\.\d{3})+(,\d*)?"  # 1.234 / 1.234.567,5
_INT = r"[+-]?\d+"


@dataclass(frozen=True)
class Where:
    """Where a table came from, for messages: ``row(i)`` names row ``i`` the user's way."""

    source: str = "table"
    text_file: bool = False

    def row(self, index: int) -> str:
        if self.text_file:
            return f"line {int(index) + 2}"  # line 1 is the header
        return f"row {int(index)} (0-based)"


def as_text(series: pd.Series) -> pd.Series:
    """Values as strings with missing values kept missing; integral floats lose their '.0'."""
    if ptypes.is_float_dtype(series.dtype):
        values = series.to_numpy(dtype=np.float64, na_value=np.nan)
        finite = values[np.isfinite(values)]
        if finite.size and np.all(finite == np.round(finite)) and np.abs(finite).max() < 2**53:
            series = series.astype("Int64")
    if ptypes.is_bool_dtype(series.dtype) or ptypes.is_numeric_dtype(series.dtype):
        out = series.astype("str")
        return out.where(series.notna(), None)
    if ptypes.is_string_dtype(series.dtype) and not ptypes.is_object_dtype(series.dtype):
        return series
    mask = series.notna()
    return series.astype("str").where(mask, None)


def _first_row(mask: np.ndarray) -> int:
    return int(np.flatnonzero(mask)[0])


def _parse_number_text(
    text: pd.Series, column: str, where: Where, forced: bool
) -> tuple[pd.Series | None, str | None]:
    """Try to read a text column as numbers, including thousands separators and decimal
    commas. Returns (numbers, note) when it is numbers, (None, None) when it is text.

    Raises DataError for a column of numbers with a few words mixed in, for a mix of number
    styles and for values such as ``1,234`` that could mean 1234 or 1.234.
    """
    present = text.notna().to_numpy()
    if not present.any():
        return None, None
    stripped = text.str.strip()
    uniques = pd.Series(pd.unique(stripped[present]), dtype="str")
    plain = uniques.str.fullmatch(_PLAIN, case=False).to_numpy()
    us = uniques.str.fullmatch(_US).to_numpy()
    eu_dec = uniques.str.fullmatch(_EU_DEC).to_numpy()
    eu_full = uniques.str.fullmatch(_EU_FULL).to_numpy()
    integer = uniques.str.fullmatch(_INT).to_numpy()
    number_like = plain | us | eu_dec | eu_full

    if not number_like.all():
        bad_values = set(uniques[~number_like])
        bad_rows = stripped.isin(bad_values).to_numpy() & present
        numeric_share = 1.0 - bad_rows.sum() / present.sum()
        # Codes such as "0" / "L" / "X" are categories: call a column "numbers with stray
        # words" only when its numbers are also more varied than its words.
        varied = int(number_like.sum()) > int((~number_like).sum())
        if forced or (numeric_share >= MIXED_NUMERIC_SHARE and varied):
            row = _first_row(bad_rows)
            value = stripped.iloc[row]
            why = "is declared numeric" if forced else (
                f"holds numbers in {numeric_share:.0%} of its filled cells")
            raise DataError(
                f"{where.source}: column {column!r} {why} but {where.row(row)} has {value!r} "
                f"({int(bad_rows.sum())} such cells); write a number there, leave the cell "
                f"empty if it is missing, or pass --kind {column}=categorical"
            )
        return None, None

    us_ok = bool(np.all(plain | us))
    eu_ok = bool(np.all(eu_dec | eu_full | integer))
    us_values = eu_values = None
    if us_ok:
        us_values = pd.to_numeric(uniques.str.replace(",", "", regex=False), errors="coerce")
    if eu_ok:
        eu_values = pd.to_numeric(
            uniques.str.replace(".", "", regex=False).str.replace(",", ".", regex=False),
            errors="coerce",
        )
    if us_ok and eu_ok and not np.array_equal(us_values.to_numpy(), eu_values.to_numpy(),
                                               equal_nan=True):
        example = uniques[(us | eu_full) & ~integer].iloc[0]
        raise DataError(
            f"{where.source}: column {column!r} has numbers like {example!r} that could use "
            "thousands separators or decimal commas; write plain numbers (1234.5) in the file, "
            f"or pass --kind {column}=categorical to keep them as text"
        )
    if not (us_ok or eu_ok):
        us_example = uniques[us & ~eu_dec].iloc[0] if (us & ~eu_dec).any() else uniques[us].iloc[0]
        eu_example = uniques[(eu_dec | eu_full) & ~us & ~plain]
        eu_example = eu_example.iloc[0] if len(eu_example) else uniques[~(plain | us)].iloc[0]
        raise DataError(
            f"{where.source}: column {column!r} mixes number styles ({us_example!r} and "
            f"{eu_example!r}); write every number the same way, plain numbers (1234.5) are best"
        )
    values = us_values if us_ok else eu_values
    lookup = pd.Series(values.to_numpy(dtype=np.float64), index=uniques.to_numpy())
    numbers = pd.Series(
        stripped.map(lookup).to_numpy(dtype=np.float64, na_value=np.nan), index=text.index
    )
    if us_ok and (us & ~plain).any():
        ex = uniques[us & ~plain].iloc[0]
        note = (f"column {column!r}: numbers written with ',' thousands separators were read "
                f"as numbers (e.g. {ex!r} -> {lookup[ex]:g})")
    elif eu_ok and ((eu_dec | eu_full) & ~integer).any():
        ex = uniques[(eu_dec | eu_full) & ~integer].iloc[0]
        note = (f"column {column!r}: numbers written with decimal commas were read as numbers "
                f"(e.g. {ex!r} -> {lookup[ex]:g})")
    else:
        note = f"column {column!r}: numbers stored as text were read as numbers"
    return numbers, note


def prepare_columns(
    frame: pd.DataFrame,
    *,
    label_column: str,
    id_column: str | None = None,
    overrides: Mapping[str, str] | None = None,
    where: Where | None = None,
) -> tuple[pd.DataFrame, list[str]]:
    """Check every feature column and turn numbers written as text into numbers.

    Returns the cleaned feature columns (label and id removed) and notes of what changed.

    Raises
    ------
    DataError
        All-missing column, infinite value, numbers mixed with words, ambiguous or mixed
        number styles, a column declared numeric that is not.
    """
    overrides = dict(overrides or {})
    where = where or Where()
    notes: list[str] = []
    columns: dict[str, pd.Series] = {}
    for column in frame.columns:
        if column in (label_column, id_column):
            continue
        kind = overrides.get(column)
        series = frame[column]
        if kind in ("drop", "text"):
            continue
        if series.isna().all():
            raise DataError(
                f"{where.source}: column {column!r} is empty in every row; delete it or pass "
                f"--kind {column}=drop"
            )
        if ptypes.is_bool_dtype(series.dtype) and kind != "numeric":
            columns[column] = series
            continue
        if not ptypes.is_numeric_dtype(series.dtype) or ptypes.is_bool_dtype(series.dtype):
            text = as_text(series)
            # Blank cells ("  ") mean missing, like empty ones.
            text = text.where(text.str.strip().str.len() > 0, None)
            if kind != "categorical":
                numbers, note = _parse_number_text(text, column, where, forced=kind == "numeric")
                if numbers is not None:
                    series = numbers
                    if note:
                        notes.append(note)
                else:
                    series = text
            else:
                series = text
        elif kind == "categorical":
            series = as_text(series)
        if ptypes.is_numeric_dtype(series.dtype) and not ptypes.is_bool_dtype(series.dtype):
            values = series.to_numpy(dtype=np.float64, na_value=np.nan)
            infinite = np.isinf(values)
            if infinite.any():
                row = _first_row(infinite)
                raise DataError(
                    f"{where.source}: column {column!r} has an infinite value ({values[row]}) "
                    f"at {where.row(row)} ({int(infinite.sum())} such cells); replace it with a "
                    "finite number or leave the cell empty"
                )
        columns[column] = series
    out = pd.DataFrame(columns, index=frame.index)
    return out, notes


def looks_like_dates(text: pd.Series) -> bool:
    """True when at least :data:`DATETIME_SHARE` of the distinct non-missing values of a text
    column are written as dates or date-times and pandas reads them as such."""
    values = pd.Series(text.dropna().astype(str).str.strip().unique())
    values = values[values.str.len() > 0]
    if not len(values):
        return False
    match = values.str.fullmatch(_DATE)
    if float(match.mean()) < DATETIME_SHARE:
        return False
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        parsed = pd.to_datetime(values[match], errors="coerce", format="mixed", utc=True)
    return float(parsed.notna().sum()) >= DATETIME_SHARE * len(values)


def _looks_like_id_numbers(series: pd.Series, name: str) -> bool:
    if not ptypes.is_integer_dtype(series.dtype):
        return False
    n = len(series)
    if n < MIN_ROWS_FOR_ID_OR_TEXT or series.isna().any():
        return False
    if series.nunique() != n:
        return False
    span = int(series.max()) - int(series.min()) + 1
    return span == n or bool(_ID_NAME.search(name))


def infer_column_kinds(
    frame: pd.DataFrame,
    *,
    label_column: str | None = None,
    id_column: str | None = None,
    overrides: Mapping[str, str] | None = None,
) -> dict[str, str]:
    """Kind of every column: numeric, categorical, constant, id-like, text (or label, id,
    drop, and user overrides).

    Rules (common practice, no source): one distinct value (missing counts as a value) ->
    constant; date or time values (a datetime column, or text written as dates, see
    :func:`looks_like_dates`) -> datetime; integers unique per row that form a 1..n-like run
    or sit in an id-named column -> id-like; strings unique per row -> id-like, unless most
    hold spaces -> text; strings
    with mostly distinct values that mostly hold spaces -> text; other strings and booleans ->
    categorical; other numbers -> numeric.
    """
    overrides = dict(overrides or {})
    kinds: dict[str, str] = {}
    for column in frame.columns:
        if column == label_column:
            kinds[column] = "label"
            continue
        if column == id_column:
            kinds[column] = "id"
            continue
        if column in overrides:
            check_kinds({column: overrides[column]}, lambda c, k: f"column kind {c}={k!r}")
            kinds[column] = overrides[column]
            continue
        series = frame[column]
        n_present = int(series.notna().sum())
        if n_present == 0:
            kinds[column] = "constant"
            continue
        if ptypes.is_numeric_dtype(series.dtype) and not ptypes.is_bool_dtype(series.dtype):
            has_missing = n_present < len(series)
            if not has_missing and series.min() == series.max():
                kinds[column] = "constant"
            elif _looks_like_id_numbers(series, str(column)):
                kinds[column] = "id-like"
            else:
                kinds[column] = "numeric"
            continue
        n_unique = int(series.nunique(dropna=False))
        if n_unique <= 1:
            kinds[column] = "constant"
            continue
        if ptypes.is_bool_dtype(series.dtype):
            kinds[column] = "categorical"
            continue
        if ptypes.is_datetime64_any_dtype(series.dtype):
            kinds[column] = "datetime"
            continue
        text = as_text(series).dropna()
        if looks_like_dates(text):
            kinds[column] = "datetime"
            continue
        distinct_share = text.nunique() / max(n_present, 1)
        spaced_share = float(text.str.contains(r"\s", regex=True).mean())
        if n_present >= MIN_ROWS_FOR_ID_OR_TEXT and distinct_share >= 0.5 and spaced_share >= 0.5:
            kinds[column] = "text"
        elif n_present >= MIN_ROWS_FOR_ID_OR_TEXT and distinct_share >= 0.95 and (
            text.nunique() == n_present or text.nunique() > 100
        ):
            kinds[column] = "id-like"
        else:
            kinds[column] = "categorical"
    return kinds
