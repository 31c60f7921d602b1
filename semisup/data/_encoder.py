"""TableEncoder: a table of mixed columns -> a float32 matrix plus the block layout."""

from __future__ import annotations

import logging
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils.validation import check_is_fitted

from .._errors import DataError
from ._columns import as_text, infer_column_kinds
from ._dataset import FeatureBlock

__all__ = ["MAX_CATEGORICAL_LEVELS", "OTHER_LEVEL", "MISSING_LEVEL", "TableEncoder",
           "robust_scale_params"]

log = logging.getLogger(__name__)

#: Level that collects rare levels, levels beyond the cap, and levels first seen at transform.
OTHER_LEVEL = "(other)"
#: Level of a missing categorical value (only when the fitted column had missing values).
MISSING_LEVEL = "(missing)"
#: A categorical column with more distinct values than this is refused (it is not categorical).
MAX_CATEGORICAL_LEVELS = 1_000_000


def robust_scale_params(values: np.ndarray) -> tuple[float, float, bool]:
    """Median, scale and has-missing of one numeric column (NaN = missing).

    The median imputes missing values; the scale is the interquartile range of the imputed
    column, as scikit-learn's ``SimpleImputer(strategy="median")`` followed by
    ``RobustScaler()`` computes it. A zero IQR (a column that is mostly one value) falls back
    (or one a million times smaller than the farthest value from the median) falls back to the
    standard deviation, then to 1, so rare values do not explode (common practice, no source).
    """
    values = np.asarray(values, dtype=np.float64)
    missing = np.isnan(values)
    has_missing = bool(missing.any())
    if missing.all():
        return 0.0, 1.0, True
    if has_missing:
        median = float(np.nanmedian(values))
        q25, q75 = np.percentile(np.where(missing, median, values), [25.0, 75.0])
    else:  # one partition for all three (the 50th percentile is the median)
        q25, median, q75 = (float(q) for q in np.percentile(values, [25.0, 50.0, 75.0]))
    scale = float(q75 - q25)
    filled = np.where(missing, median, values) if has_missing else values
    # A spread that is tiny next to the farthest value (a column that is mostly one value)
    # would blow that value up past float32; the standard deviation keeps every scaled value
    # within about sqrt(n_samples) (common practice, no source).
    farthest = float(np.max(np.abs(filled - median)))
    if not np.isfinite(scale) or scale <= 0.0 or scale < farthest * 1e-6:
        scale = float(np.std(filled))
    if not np.isfinite(scale) or scale <= 0.0:
        scale = 1.0
    return median, scale, has_missing


class TableEncoder(TransformerMixin, BaseEstimator):
    """Encode a DataFrame of numeric and categorical columns as a float32 matrix.

    Numeric columns: median imputation, a 0/1 missing indicator (only for columns that had
    missing values at fit), robust scaling ``(x - median) / IQR``. Categorical columns:
    one-hot, levels seen fewer than ``min_level_count`` times or beyond the ``max_levels``
    most frequent pooled into ``"(other)"``, missing values into ``"(missing)"``. Constant,
    id-like, text and dropped columns produce no output (recorded in ``notes_``).

    Parameters
    ----------
    kinds : dict of str to str, optional
        Kind of each column (numeric, categorical, constant, id-like, text, drop, label, id);
        columns not listed are inferred with :func:`infer_column_kinds` at fit time.
    min_level_count : int, default=5
        Levels seen fewer times than this at fit are pooled into ``"(other)"``.
    max_levels : int, default=30
        Most one-hot columns per categorical column (kept levels, plus missing and other).

    Attributes
    ----------
    kinds_ : dict of str to str
        Kind used for every input column.
    blocks_ : tuple of FeatureBlock
        Output layout: ``numeric`` / ``missing`` / ``categorical`` blocks covering the output
        columns in order.
    numeric_params_ : dict of str to (median, scale, has_missing)
    categories_ : dict of str to list of str
        Output levels of each categorical column, in output order.
    feature_names_in_ : ndarray of str
    n_features_in_ : int
    notes_ : list of str
        Dropped columns and pooled levels.
    """

    def __init__(self, kinds: Mapping[str, str] | None = None, min_level_count: int = 5,
                 max_levels: int = 30):
        self.kinds = kinds
        self.min_level_count = min_level_count
        self.max_levels = max_levels

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        tags.input_tags.categorical = True
        tags.input_tags.string = True
        tags.transformer_tags.preserves_dtype = ["float32"]  # output is always float32
        return tags

    # -- helpers -------------------------------------------------------------------------
    @staticmethod
    def _as_frame(X) -> pd.DataFrame:
        if isinstance(X, pd.DataFrame):
            frame = X
        elif isinstance(X, pd.Series):
            frame = X.to_frame()
        else:
            if hasattr(X, "toarray") or hasattr(X, "tocsr"):
                raise TypeError("TableEncoder does not accept sparse input; pass a dense "
                                "DataFrame or array")
            array = np.asarray(X)
            if array.ndim == 1:
                raise ValueError("TableEncoder expects a 2-D table (n_samples, n_columns); got "
                                 "a 1-D array. Reshape your data with .reshape(-1, 1)")
            if array.ndim != 2:
                raise ValueError(f"TableEncoder expects a 2-D table, got {array.ndim} "
                                 "dimensions")
            frame = pd.DataFrame(array, columns=[f"x{i}" for i in range(array.shape[1])])
        if any(np.issubdtype(np.dtype(d), np.complexfloating) for d in frame.dtypes
               if isinstance(d, np.dtype)):
            raise ValueError("Complex data not supported by TableEncoder")
        if frame.shape[1] == 0:
            raise ValueError(f"0 feature(s) (shape=({frame.shape[0]}, 0)) while a minimum of 1 "
                             "is required by TableEncoder")
        return frame

    def _check_params(self) -> None:
        if int(self.min_level_count) < 1:
            raise ValueError(f"min_level_count={self.min_level_count!r} must be >= 1")
        if int(self.max_levels) < 2:
            raise ValueError(f"max_levels={self.max_levels!r} must be >= 2")

    # -- fit -----------------------------------------------------------------------------
    def fit(self, X, y=None) -> TableEncoder:
        """Learn kinds, medians, scales and levels from a DataFrame."""
        self._check_params()
        frame = self._as_frame(X)
        if frame.shape[0] < 2:
            raise ValueError(f"TableEncoder needs at least 2 rows to fit; got n_samples = "
                             f"{frame.shape[0]}")
        given = dict(self.kinds or {})
        missing_given = [c for c in frame.columns if c not in given]
        inferred = infer_column_kinds(frame[missing_given]) if missing_given else {}
        kinds = {c: given.get(c, inferred.get(c)) for c in frame.columns}

        numeric_params: dict[str, tuple[float, float, bool]] = {}
        categories: dict[str, list[str]] = {}
        blocks: list[FeatureBlock] = []
        names: list[str] = []
        notes: list[str] = []
        for column, kind in kinds.items():
            series = frame[column]
            if kind == "numeric":
                values = self._numeric_values(series, column)
                if np.isinf(values).any():
                    raise DataError(f"column {column!r} has an infinite value; replace it with "
                                    "a finite number or leave the cell empty")
                median, scale, has_missing = robust_scale_params(values)
                numeric_params[column] = (median, scale, has_missing)
                blocks.append(FeatureBlock("numeric", len(names), len(names) + 1, column))
                names.append(column)
                if has_missing:
                    blocks.append(FeatureBlock("missing", len(names), len(names) + 1, column))
                    names.append(f"{column}__missing")
            elif kind == "categorical":
                levels, note = self._fit_levels(series, column)
                categories[column] = levels
                if note:
                    notes.append(note)
                blocks.append(FeatureBlock("categorical", len(names), len(names) + len(levels),
                                           column))
                names.extend(f"{column}={level}" for level in levels)
            elif kind in ("label", "id"):
                continue
            else:
                why = {"constant": "has a single value", "id-like": "looks like an id (one "
                       "distinct value per row)", "text": "is free text", "drop": "is dropped "
                       "as asked", "datetime": "holds dates or times (kind datetime)"
                       }.get(kind, f"is {kind}")
                hint = (f" (to use it, pass --kind {column}=categorical)"
                        if kind in ("id-like", "text") else
                        " (to use it, add the parts that matter, such as year, month or "
                        "weekday, as numeric columns of the table)" if kind == "datetime"
                        else "")
                notes.append(f"column {column!r} {why}; not used as a feature{hint}")
        if not names:
            raise DataError("no feature columns are left after dropping constant, id-like, text "
                            "and dropped columns; keep at least one numeric or categorical column "
                            "(see --kind)")
        self.kinds_ = kinds
        self.numeric_params_ = numeric_params
        self.categories_ = categories
        self.blocks_ = tuple(blocks)
        self.feature_names_out_ = np.asarray(names, dtype=object)
        self.feature_names_in_ = np.asarray([str(c) for c in frame.columns], dtype=object)
        self.n_features_in_ = frame.shape[1]
        self.notes_ = notes
        return self

    @staticmethod
    def _numeric_values(series: pd.Series, column: str) -> np.ndarray:
        try:
            return series.to_numpy(dtype=np.float64, na_value=np.nan)
        except (TypeError, ValueError):
            pass
        numbers = pd.to_numeric(series, errors="coerce")
        bad = numbers.isna().to_numpy() & series.notna().to_numpy()
        if bad.any():
            row = int(np.flatnonzero(bad)[0])
            raise DataError(f"column {column!r} is numeric but row {row} (0-based) holds "
                            f"{series.iloc[row]!r}; fix the value or declare the column "
                            "categorical") from None
        return numbers.to_numpy(dtype=np.float64, na_value=np.nan)

    def _fit_levels(self, series: pd.Series, column: str) -> tuple[list[str], str | None]:
        text = as_text(series)
        counts = text.value_counts(dropna=True)
        if len(counts) > MAX_CATEGORICAL_LEVELS:
            raise DataError(
                f"column {column!r} has {len(counts):,} distinct values, more than "
                f"{MAX_CATEGORICAL_LEVELS:,}, too many for a categorical column; pass "
                f"--kind {column}=drop (or text) or group its values first"
            )
        # Most frequent first, ties by level name so the order is the same on every run.
        pairs = zip(counts.index.astype(str), counts.to_numpy(), strict=True)
        order = sorted(pairs, key=lambda t: (-t[1], t[0]))
        has_missing = bool(text.isna().any())
        room = int(self.max_levels) - 1 - int(has_missing)  # one column for "(other)"
        kept = [level for level, count in order if count >= int(self.min_level_count)][:room]
        kept_set = set(kept)
        pooled = [(level, count) for level, count in order if level not in kept_set]
        levels = sorted(kept) + ([MISSING_LEVEL] if has_missing else []) + [OTHER_LEVEL]
        note = None
        if pooled:
            n_rows = int(sum(count for _, count in pooled))
            note = (f"column {column!r}: {len(pooled)} rare or surplus levels ({n_rows} rows) "
                    f"pooled into {OTHER_LEVEL!r}")
        return levels, note

    # -- transform -----------------------------------------------------------------------
    def transform(self, X) -> np.ndarray:
        """Encode a DataFrame with the fitted columns; returns float32 ``(n_rows, n_out)``."""
        check_is_fitted(self, "blocks_")
        frame = self._as_frame(X)
        if not isinstance(X, (pd.DataFrame, pd.Series)) and frame.shape[1] != self.n_features_in_:
            raise ValueError(f"X has {frame.shape[1]} features, but TableEncoder is expecting "
                             f"{self.n_features_in_} features as input")
        absent = [c for c in self.feature_names_in_ if c not in frame.columns]
        if absent:
            raise DataError(f"table lacks column {absent[0]!r} that the encoder was fitted on; "
                            "give the same columns as at fit")
        n_rows = frame.shape[0]
        out = np.zeros((n_rows, len(self.feature_names_out_)), dtype=np.float32)
        for block in self.blocks_:
            column = block.column
            if block.kind == "numeric":
                median, scale, has_missing = self.numeric_params_[column]
                values = self._numeric_values(frame[column], column)
                if np.isinf(values).any():
                    raise DataError(f"column {column!r} has an infinite value; replace it with "
                                    "a finite number or leave the cell empty")
                missing = np.isnan(values)
                scaled = (values - median) / scale
                scaled[missing] = 0.0  # the median, scaled
                if np.abs(scaled).max(initial=0.0) > np.finfo(np.float32).max:
                    raise DataError(f"column {column!r} has values too large to encode as "
                                    "32-bit floats after scaling; rescale the column (e.g. "
                                    "other units)")
                out[:, block.start] = scaled
                if has_missing:
                    out[:, block.start + 1] = missing
            elif block.kind == "categorical":
                levels = self.categories_[column]
                text = as_text(frame[column])
                index = pd.Index(levels, dtype=object)
                codes = index.get_indexer(text.astype(object)).astype(np.int64)
                other = levels.index(OTHER_LEVEL)
                fill = np.where(
                    text.isna().to_numpy() & (MISSING_LEVEL in levels),
                    levels.index(MISSING_LEVEL) if MISSING_LEVEL in levels else other,
                    other,
                )
                codes = np.where(codes < 0, fill, codes)
                out[np.arange(n_rows), block.start + codes] = 1.0
        return out

    # -- saved state ---------------------------------------------------------------------
    def to_state(self) -> dict[str, Any]:
        """The fitted encoder as plain JSON values (no code); :meth:`from_state` reads it.

        Model folders store it in ``manifest.json`` under ``encoder``: keep the keys stable
        and let :meth:`from_state` read every layout written before.
        """
        check_is_fitted(self, "blocks_")
        return {
            "params": {"kinds": dict(self.kinds or {}),
                       "min_level_count": int(self.min_level_count),
                       "max_levels": int(self.max_levels)},
            "kinds": {str(k): str(v) for k, v in self.kinds_.items()},
            "numeric": {c: [float(m), float(s), bool(h)]
                        for c, (m, s, h) in self.numeric_params_.items()},
            "categories": {c: [str(v) for v in levels] for c, levels in self.categories_.items()},
            "blocks": [[b.kind, int(b.start), int(b.stop), str(b.column)] for b in self.blocks_],
            "feature_names_in": [str(c) for c in self.feature_names_in_],
            "feature_names_out": [str(c) for c in self.feature_names_out_],
            "notes": [str(n) for n in self.notes_],
        }

    @classmethod
    def from_state(cls, state: Mapping[str, Any]) -> TableEncoder:
        """A fitted encoder rebuilt from :meth:`to_state` (no code is loaded).

        Raises ``KeyError`` / ``TypeError`` / ``ValueError`` on a damaged state; callers that
        read it from a file turn those into their file's error.
        """
        enc = cls(**state["params"])
        enc.kinds_ = dict(state["kinds"])
        enc.numeric_params_ = {c: (float(m), float(s), bool(h))
                               for c, (m, s, h) in state["numeric"].items()}
        enc.categories_ = {c: list(v) for c, v in state["categories"].items()}
        enc.blocks_ = tuple(FeatureBlock(k, int(a), int(b), c) for k, a, b, c in state["blocks"])
        enc.feature_names_in_ = np.asarray(state["feature_names_in"], dtype=object)
        enc.feature_names_out_ = np.asarray(state["feature_names_out"], dtype=object)
        enc.n_features_in_ = len(state["feature_names_in"])
        enc.notes_ = list(state["notes"])
        return enc

    def get_feature_names_out(self, input_features=None) -> np.ndarray:
        """Names of the output columns: ``col``, ``col__missing``, ``col=level``."""
        check_is_fitted(self, "blocks_")
        return self.feature_names_out_.copy()
