"""Label column -> class names and y (int64, -1 = unlabeled), with checks."""

from __future__ import annotations

import re
import warnings
from collections.abc import Sequence

import numpy as np
import pandas as pd

from .._errors import DataError, DataWarning
from ._columns import Where, as_text
from ._dataset import UNLABELED

__all__ = ["encode_labels", "label_variants", "sort_class_names"]

_INTEGER = re.compile(r"[+-]?\d+")


def sort_class_names(names: Sequence[str]) -> list[str]:
    """Sorted label strings; all-integer labels sort by value ("2" before "10")."""
    names = list(names)
    if names and all(_INTEGER.fullmatch(n) for n in names):
        return sorted(names, key=lambda n: (int(n), n))
    return sorted(names)


def label_variants(class_names: Sequence[str]) -> list[list[str]]:
    """Groups of class names that differ only in letter case or white space."""
    groups: dict[str, list[str]] = {}
    for name in class_names:
        key = " ".join(name.split()).casefold()
        groups.setdefault(key, []).append(name)
    return [sorted(g) for g in groups.values() if len(g) > 1]


def encode_labels(
    labels: pd.Series,
    *,
    column: str,
    unlabeled_markers: Sequence[str] = (),
    where: Where | None = None,
) -> tuple[np.ndarray, list[str], list[str]]:
    """Turn a label column into ``(y, class_names, notes)``.

    Empty cells, NA and blank cells mean unlabeled, and so does any value in
    ``unlabeled_markers`` (compared after stripping white space). Values are otherwise kept
    exactly as written.

    Raises DataError when no row is labeled or only one class is; warns (DataWarning) about a
    class with a single labeled row and labels that differ only in case or white space.
    """
    where = where or Where()
    text = as_text(labels)
    present = text.notna().to_numpy().copy()
    notes: list[str] = []
    stripped = text.str.strip()
    blank = present & (stripped.str.len() == 0).fillna(False).to_numpy()
    present &= ~blank
    markers = {m.strip() for m in unlabeled_markers}
    if markers:
        marked = present & stripped.isin(markers).to_numpy()
        if marked.any():
            notes.append(f"label column {column!r}: {int(marked.sum())} rows marked unlabeled "
                         f"with {sorted(markers)}")
        present &= ~marked
    n_rows = len(text)
    if not present.any():
        extra = f", or markers {sorted(markers)}" if markers else ""
        raise DataError(
            f"{where.source}: label column {column!r} has no labeled rows (all {n_rows} cells are "
            f"empty, NA{extra}); label some rows, or check --label-column and --unlabeled-marker"
        )
    values = text[present]
    codes, uniques = pd.factorize(values, sort=False)
    class_names = sort_class_names([str(u) for u in uniques])
    if len(class_names) < 2:
        raise DataError(
            f"{where.source}: label column {column!r} has only one class ({class_names[0]!r}) "
            f"among its {int(present.sum())} labeled rows; a classifier needs at least two "
            "classes, so label some rows of another class"
        )
    position = {name: i for i, name in enumerate(class_names)}
    remap = np.asarray([position[str(u)] for u in uniques], dtype=np.int64)
    y = np.full(n_rows, UNLABELED, dtype=np.int64)
    y[present] = remap[codes]

    counts = np.bincount(y[present], minlength=len(class_names))
    singles = [class_names[i] for i in np.flatnonzero(counts == 1)]
    if singles:
        shown = ", ".join(repr(s) for s in singles[:5]) + (" ..." if len(singles) > 5 else "")
        warnings.warn(
            f"{where.source}: label column {column!r}: {len(singles)} class(es) have a single "
            f"labeled row ({shown}); a stratified holdout needs at least 2 per class, so label "
            "more rows of them or merge them into another class",
            DataWarning,
            stacklevel=2,
        )
    for group in label_variants(class_names):
        shown = " and ".join(f"{g!r} ({counts[position[g]]} rows)" for g in group)
        warnings.warn(
            f"{where.source}: label column {column!r}: values {shown} differ only in letter case "
            "or white space; if they are the same class, fix the spelling in the file",
            DataWarning,
            stacklevel=2,
        )
    return y, class_names, notes
