"""The encoded table every later stage works on."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np

__all__ = ["Dataset", "FeatureBlock", "UNLABELED"]

#: Target value of a row without a label (scikit-learn's semi-supervised convention).
UNLABELED = -1

BlockKind = Literal["numeric", "missing", "categorical"]


@dataclass(frozen=True)
class FeatureBlock:
    """A run of encoded columns that came from one source column and share a likelihood.

    ``numeric``: one robust-scaled column (Gaussian likelihood);
    ``missing``: one 0/1 missing indicator (Bernoulli);
    ``categorical``: a one-hot block, exactly one 1 per row (categorical likelihood).
    Encoded columns ``start:stop`` of ``Dataset.X`` belong to the block.
    """

    kind: BlockKind
    start: int
    stop: int
    column: str

    @property
    def width(self) -> int:
        return self.stop - self.start


@dataclass
class Dataset:
    """A table read, validated and encoded.

    Attributes
    ----------
    X : ndarray of shape (n_samples, n_features), float32
        Encoded features (numeric: median-imputed and robust-scaled; categorical: one-hot).
    y : ndarray of shape (n_samples,), int64
        Class index into ``class_names``; ``-1`` for unlabeled rows.
    row_ids : ndarray of shape (n_samples,), object
        The id column's values as strings, or the 0-based row number when no id column.
    feature_names : list of str
        Name of each encoded column.
    class_names : list of str
        Label values, sorted; ``y`` indexes into this list.
    blocks : tuple of FeatureBlock
        How encoded columns map to source columns and likelihoods; covers ``X`` in order.
    encoder : TableEncoder
        The fitted scikit-learn transformer that produced ``X`` (reuse it on new rows).
    column_kinds : dict of str to str
        Kind of every source column (numeric, categorical, constant, id-like, text, label, id).
    notes : list of str
        What was done to the table on the way (dropped columns, pooled levels, ...).
    source : Path or None
        File the table came from.
    sha256 : str or None
        SHA-256 of the source file's bytes.
    """

    X: np.ndarray
    y: np.ndarray
    row_ids: np.ndarray
    feature_names: list[str]
    class_names: list[str]
    blocks: tuple[FeatureBlock, ...]
    encoder: Any = None
    column_kinds: dict[str, str] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    source: Path | None = None
    sha256: str | None = None
    label_column: str | None = None

    @property
    def n_rows(self) -> int:
        return int(self.X.shape[0])

    @property
    def n_classes(self) -> int:
        return len(self.class_names)

    @property
    def labeled_mask(self) -> np.ndarray:
        """Boolean mask of rows with a label."""
        return self.y != UNLABELED
