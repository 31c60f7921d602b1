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

__all__ = ["encode_labels", "label_variants", "numeric_variants", "sort_class_names"]

_INTEGER = re.compile(r"[+-]?\d+")
_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")

#: A label column whose labeled values are all numbers and that has at least this many
#: distinct values gets a "looks continuous" hint (common practice, no source).
CONTINUOUS_MIN_CLASSES = 100
#: Label texts pandas would read as missing; kept as classes, with a warning.
_MISSING_LIKE = frozenset({"#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan",
                           "1.#IND", "1.#QNAN", "<NA>", "N/A", "NA", "NULL", "NaN", "None",
                           "n/a", "nan", "null"})


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


def numeric_variants(class_names: Sequence[str]) -> list[list[str]]:
    """Groups of class names that are the same number written differently ("1", "1.0")."""
    groups: dict[float, list[str]] = {}
    for name in class_names:
        text = name.strip()
        if _NUMBER.fullmatch(text):
            groups.setdefault(float(text), []).append(name)
    return [sorted(g) for g in groups.values() if len(g) > 1]


def encode_labels(
    labels: pd.Series,
    *,
    column: str,
    unlabeled_markers: Sequence[str] = (),
    where: Where | None = None,
) -> tuple[np.ndarray, list[str], list[str]]:
    """Turn a label column into ``(y, class_names, notes)``.

    Missing values (empty cells in a file) and blank cells mean unlabeled, and so does any value in
    ``unlabeled_markers`` (compared after stripping white space). Values are otherwise kept
    exactly as written.

    Texts such as ``NA``, ``None``, ``null`` or ``NaN`` are class labels here (warned about,
    since pandas would have read them as missing); pass them in ``unlabeled_markers`` when
    they mean unlabeled.

    Raises DataError when no row is labeled or only one class is; warns (DataWarning) about a
    class with a single labeled row, labels that differ only in case or white space, labels
    that are one number written two ways (``1`` and ``1.0``: kept as two classes) and a
    numeric label with so many values that it looks continuous.
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
            f"empty{extra}); label some rows, or check --label-column and --unlabeled-marker"
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
    missing_like = [n for n in class_names if n.strip() in _MISSING_LIKE]
    if missing_like:
        shown = ", ".join(f"{n!r} ({counts[position[n]]} rows)" for n in missing_like[:5])
        flags = " ".join(f"--unlabeled-marker {n.strip()!r}" for n in missing_like[:5])
        warnings.warn(
            f"{where.source}: label column {column!r}: values {shown} are kept as classes; if "
            f"they mean 'not labeled', pass {flags}",
            DataWarning,
            stacklevel=2,
        )
    numeric = all(_NUMBER.fullmatch(n.strip()) for n in class_names)
    if numeric and len(class_names) >= CONTINUOUS_MIN_CLASSES:
        warnings.warn(
            f"{where.source}: label column {column!r} has {len(class_names)} distinct numeric "
            "values and looks continuous (a quantity to predict, not classes); semisup "
            "classifies, so bin the values into a few classes or check --label-column",
            DataWarning,
            stacklevel=2,
        )
    singles = [class_names[i] for i in np.flatnonzero(counts == 1)]
    if singles:
        shown = ", ".join(repr(s) for s in singles[:5]) + (" ..." if len(singles) > 5 else "")
        warnings.warn(
            f"{where.source}: label column {column!r}: {len(singles)} class(es) have a single "
            f"labeled row ({shown}); such a class is trained on but cannot be evaluated (the "
            "study scores a class only with two labels or more), so label more rows of them or "
            "merge them into another class",
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
    for group in numeric_variants(class_names):
        shown = " and ".join(f"{g!r} ({counts[position[g]]} rows)" for g in group)
        warnings.warn(
            f"{where.source}: label column {column!r}: values {shown} are the same number "
            "written two ways and are kept as separate classes; write them one way in the file "
            "if they are the same class",
            DataWarning,
            stacklevel=2,
        )
    return y, class_names, notes
