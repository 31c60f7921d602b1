"""Data cards: a Markdown profile of a table (and a JSON twin) for the people who use it."""

from __future__ import annotations

import json
import logging
import os
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from pandas.api import types as ptypes

from .._atomic import atomic_write_text
from .._errors import DataWarning
from .._escape import markdown_text
from .._seeding import derive_rng
from ._dataset import UNLABELED
from ._load import load_source
from ._shift import labeled_pool_shift, shift_seed, shift_warning
from ._source import TableSource

__all__ = ["DataCard", "USER_FIELDS", "card_of", "find_leakage", "make_card", "write_card"]

log = logging.getLogger(__name__)

#: Fields only the data owner can fill; ``write_card`` keeps values already filled in the
#: JSON twin of an earlier card.
USER_FIELDS = ("provenance", "license", "collection_dates", "known_biases")

#: Cross-validated balanced accuracy of a single-column predictor at or above which the
#: column is flagged as a suspected label leak (common practice, no source).
LEAKAGE_THRESHOLD = 0.98
#: Labeled rows used by the leakage check at most (a seeded subsample beyond that).
LEAKAGE_MAX_ROWS = 20_000
#: Numeric columns are first screened all at once by a "majority label per quantile bin"
#: rule; only columns scoring at least ``threshold - LEAKAGE_SCREEN_MARGIN`` get the exact
#: one-column tree (common practice, no source: a tree with a few leaves loses at most the
#: rows of the bins its thresholds cut, about 1/``LEAKAGE_SCREEN_BINS`` each).
LEAKAGE_SCREEN_MARGIN = 0.15
LEAKAGE_SCREEN_BINS = 128
#: Numeric columns per block in the screen (bounds its memory: rows x block x 8 bytes).
_SCREEN_BLOCK = 256
#: Largest/smallest labeled class count at or above which the card notes an imbalance
#: (common practice, no source).
IMBALANCE_RATIO = 3.0
#: The study's default number of cross-fit folds (``StudySpec.folds``): a class with fewer
#: labels is evaluated in fewer repeats, a class of one label never.
DEFAULT_FOLDS = 5


def imbalance_ratio(counts) -> float:
    """Largest / smallest labeled class count (an empty class counts as one row)."""
    counts = np.asarray(list(counts), dtype=np.int64)
    return float(counts.max() / max(int(counts.min()), 1))


def is_imbalanced(ratio: float) -> bool:
    """Whether the card calls a class-count ratio imbalanced (and advises balanced accuracy)."""
    return ratio >= IMBALANCE_RATIO


#: Float columns longer than this get no distinct-value count in the card.
DISTINCT_MAX_FLOAT_ROWS = 100_000

CAUTION = (
    "Caution: a model trained on few labels can be badly wrong, and a data card does not "
    "make a table fit for a purpose. Decisions about people, health or safety need review by "
    "qualified people and must follow local rules."
)


@dataclass
class DataCard:
    """Profile of one table; ``to_markdown()`` for people, ``to_dict()`` for machines."""

    source: str
    sha256: str
    size_bytes: int
    n_rows: int
    n_columns: int
    n_encoded_features: int
    label_column: str
    id_column: str | None
    columns: list[dict[str, Any]]
    kinds: dict[str, list[str]]
    n_labeled: int
    labeled_fraction: float
    class_counts: dict[str, int]
    imbalance_ratio: float
    imbalance_note: str
    duplicate_rows: int
    duplicate_feature_rows_conflicting_labels: int
    duplicate_ids: int
    leakage: list[dict[str, Any]]
    leakage_note: str
    notes: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    #: classifier two-sample test of the labeled rows against the unlabeled ones
    #: (:func:`semisup.data.labeled_pool_shift`)
    labeled_vs_pool: dict[str, Any] = field(default_factory=dict)
    #: ``single_label``: classes with one label (trained on, never evaluated);
    #: ``fewer_than_folds``: classes with 2 .. DEFAULT_FOLDS - 1 labels (evaluated in as many
    #: of the default cross-fit repeats as they have labels)
    rare_classes: dict[str, dict[str, int]] = field(default_factory=dict)
    user_fields: dict[str, str | None] = field(
        default_factory=lambda: dict.fromkeys(USER_FIELDS)
    )
    caution: str = CAUTION

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict of every field."""
        return json.loads(json.dumps(asdict(self), default=_json_default))

    def leakage_warning(self) -> str | None:
        """One warning line naming the columns suspected of leaking the label, or None."""
        if not self.leakage:
            return None
        shown = ", ".join(f"{item['column']!r} ({item['balanced_accuracy']:.3f})"
                          for item in self.leakage[:5])
        more = f" and {len(self.leakage) - 5} more" if len(self.leakage) > 5 else ""
        return (f"suspected label leak: column(s) {shown}{more} alone predict the label "
                "(cross-validated balanced accuracy in brackets; see data_card.md), so high "
                "scores may come from them; check they are known before the label is, or drop "
                "them with --kind COL=drop")

    def to_markdown(self) -> str:
        """The card as Markdown; every name, label and note from the table is escaped
        (:func:`semisup._escape.markdown_text`), so none can start live HTML or break a
        table."""
        m = markdown_text
        name = Path(self.source).name
        id_text = m(self.id_column) if self.id_column else "none (row number)"
        lines = [f"# Data card: {m(name)}", "", f"> {self.caution}", ""]
        lines += [
            "## Source", "",
            "| item | value |", "|---|---|",
            f"| file | {m(self.source)} |",
            f"| SHA-256 | `{self.sha256}` |",
            f"| size | {self.size_bytes:,} bytes |",
            f"| rows | {self.n_rows:,} |",
            f"| columns | {self.n_columns:,} |",
            f"| label column | {m(self.label_column)} |",
            f"| id column | {id_text} |",
            f"| encoded features | {self.n_encoded_features:,} |",
            "",
            "## Columns by kind", "",
        ]
        for kind, names in self.kinds.items():
            shown = ", ".join(m(n) for n in names[:20])
            more = f", ... ({len(names)} in all)" if len(names) > 20 else ""
            lines.append(f"- **{m(kind)}** ({len(names)}): {shown}{more}")
        lines += ["", "## Missing values", ""]
        with_missing = [c for c in self.columns if c["missing"] > 0]
        if len(self.columns) <= 40:
            listed = self.columns
        else:
            listed = with_missing
        if listed:
            lines += ["| column | kind | missing | share | distinct values |",
                      "|---|---|---:|---:|---:|"]
            for c in listed:
                distinct = "" if c["distinct"] is None else f"{c['distinct']:,}"
                lines.append(f"| {m(c['name'])} | {m(c['kind'])} | {c['missing']:,} | "
                             f"{c['missing_fraction']:.1%} | {distinct} |")
        untouched = len(self.columns) - len(with_missing)
        if len(self.columns) > 40 or not listed:
            lines.append("")
            lines.append(f"{untouched} of {len(self.columns)} columns have no missing values.")
        if any(c["distinct"] is None for c in self.columns):
            lines.append(f"Distinct values are not counted for float columns over "
                         f"{DISTINCT_MAX_FLOAT_ROWS:,} rows.")
        lines += [
            "", "## Labels", "",
            f"- labeled rows: {self.n_labeled:,} of {self.n_rows:,} "
            f"({self.labeled_fraction:.1%}); unlabeled: {self.n_rows - self.n_labeled:,}",
            f"- classes: {len(self.class_counts)}; largest / smallest labeled class: "
            f"{self.imbalance_ratio:.2f}",
            f"- {m(self.imbalance_note)}",
            "",
            "| class | labeled rows | share of labeled |", "|---|---:|---:|",
        ]
        for label, count in self.class_counts.items():
            lines.append(f"| {m(label)} | {count:,} | {count / max(self.n_labeled, 1):.1%} |")
        single = (self.rare_classes or {}).get("single_label") or {}
        few = (self.rare_classes or {}).get("fewer_than_folds") or {}
        if single or few:
            lines.append("")
        if single:
            lines.append(f"- never evaluated (one label each: trained on in every repeat, but "
                         f"no metric says anything about them): "
                         f"{', '.join(m(c) for c in single)}")
        if few:
            lines.append(f"- fewer labels than the {DEFAULT_FOLDS} default cross-fit folds "
                         f"(evaluated only in as many repeats as they have labels): "
                         f"{', '.join(f'{m(c)} ({n})' for c, n in few.items())}")
        lines += ["", "## Labeled rows against the unlabeled pool", ""]
        lines += _shift_lines(self.labeled_vs_pool, m)
        lines += [
            "", "## Duplicates", "",
            f"- rows that repeat an earlier row (all columns except the id): "
            f"{self.duplicate_rows:,}",
            f"- labeled rows whose features repeat another labeled row with a different label: "
            f"{self.duplicate_feature_rows_conflicting_labels:,}",
            f"- repeated ids: {self.duplicate_ids:,}",
            "", "## Suspected leakage", "", m(self.leakage_note), "",
        ]
        if self.leakage:
            lines += ["| column | cross-validated balanced accuracy | check |", "|---|---:|---|"]
            for item in self.leakage:
                lines.append(f"| {m(item['column'])} | {item['balanced_accuracy']:.3f} | "
                             f"{m(item['check'])} |")
            lines.append("")
        lines += ["## Notes", ""]
        lines += [f"- {m(n)}" for n in self.notes] or ["- none"]
        lines += ["", "## Warnings", ""]
        lines += [f"- {m(w)}" for w in self.warnings] or ["- none"]
        lines += [
            "", "## To fill in by the data owner", "",
            "Edit the `user_fields` of the JSON twin (or these lines); values filled in the "
            "JSON twin are kept when the card is written again.", "",
        ]
        titles = {"provenance": "Provenance", "license": "License",
                  "collection_dates": "Collection dates", "known_biases": "Known biases"}
        for key in USER_FIELDS:
            value = self.user_fields.get(key)
            lines.append(f"- **{titles[key]}**: {m(value) if value else '_(fill in)_'}")
        lines.append("")
        return "\n".join(lines)


def _shift_lines(shift: dict[str, Any], m) -> list[str]:
    if not shift:
        return ["Not checked."]
    if not shift.get("checked"):
        return [f"Not checked: {m(shift.get('reason', ''))}."]
    verdict = ("The labeled rows are clearly unlike the pool: estimates measured on them may "
               "not hold for the rows still to be labeled." if shift["clearly_different"] else
               "No clear difference: the labeled rows look like a fair sample of the pool "
               "(the check cannot prove it).")
    lines = [
        f"- AUC {shift['auc']:.3f} (95% interval {shift['low']:.3f} to {shift['high']:.3f}; "
        f"0.5 = alike, 1 = fully separable), {shift['n_labeled']:,} labeled against "
        f"{shift['n_unlabeled_used']:,} unlabeled rows",
        f"- {verdict}",
        f"- how: {m(shift['method'])}",
    ]
    if shift.get("columns"):
        lines += ["", "| column | AUC lost when permuted |", "|---|---:|"]
        lines += [f"| {m(c['column'])} | {c['auc_drop']:.4f} |" for c in shift["columns"]]
    return lines


def _rare_classes(class_counts: Mapping[str, int]) -> dict[str, dict[str, int]]:
    return {
        "single_label": {c: n for c, n in class_counts.items() if n == 1},
        "fewer_than_folds": {c: n for c, n in class_counts.items() if 2 <= n < DEFAULT_FOLDS},
    }


def _json_default(value: Any) -> Any:
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"cannot write {type(value).__name__} to JSON")


def _value_map_predict(codes: np.ndarray, y: np.ndarray, folds: np.ndarray,
                       n_folds: int) -> np.ndarray:
    """Cross-validated 'majority label of this value' predictions (codes >= 0)."""
    predicted = np.empty_like(y)
    n_codes = int(codes.max()) + 1
    n_classes = int(y.max()) + 1
    for fold in range(n_folds):
        train = folds != fold
        table = np.zeros((n_codes, n_classes), dtype=np.int64)
        np.add.at(table, (codes[train], y[train]), 1)
        seen = table.sum(axis=1) > 0
        majority = np.bincount(y[train], minlength=n_classes).argmax()
        per_value = np.where(seen, table.argmax(axis=1), majority)
        predicted[~train] = per_value[codes[~train]]
    return predicted


def _balanced_accuracy_columns(y: np.ndarray, predicted: np.ndarray) -> np.ndarray:
    """Balanced accuracy of each column of ``predicted`` (n_rows, n_cols) against ``y``:
    the mean over the classes present in ``y`` of their recall (scikit-learn's definition)."""
    recalls = []
    for c in np.unique(y):
        rows = y == c
        recalls.append((predicted[rows] == c).mean(axis=0))
    return np.mean(recalls, axis=0)


def _screen_numeric(x: np.ndarray, y: np.ndarray, folds: np.ndarray, n_folds: int,
                    n_classes: int) -> np.ndarray:
    """Cross-validated balanced accuracy of "majority label of this quantile bin" for every
    column of ``x`` at once (NaN is the lowest value, as in the exact check)."""
    from scipy.stats import rankdata

    n, p = x.shape
    n_bins = int(min(LEAKAGE_SCREEN_BINS, max(2, n // 8)))
    x = np.where(np.isnan(x), -np.inf, x)
    ranks = rankdata(x, method="min", axis=0) - 1  # ties share a bin, as a tree cannot cut them
    codes = (ranks * n_bins // n).astype(np.int64)  # (n, p) in 0 .. n_bins-1
    flat = codes + np.arange(p, dtype=np.int64) * n_bins
    predicted = np.empty((n, p), dtype=np.int64)
    for fold in range(n_folds):
        train = folds != fold
        counts = np.bincount((flat[train] * n_classes + y[train, None]).ravel(),
                             minlength=p * n_bins * n_classes).reshape(p * n_bins, n_classes)
        majority = np.bincount(y[train], minlength=n_classes).argmax()
        per_bin = np.where(counts.sum(axis=1) > 0, counts.argmax(axis=1), majority)
        predicted[~train] = per_bin[flat[~train]]
    return _balanced_accuracy_columns(y, predicted)


def find_leakage(
    features: pd.DataFrame,
    kinds: Mapping[str, str],
    y: np.ndarray,
    *,
    seed: int = 0,
    threshold: float = LEAKAGE_THRESHOLD,
    max_rows: int = LEAKAGE_MAX_ROWS,
) -> tuple[list[dict[str, Any]], str]:
    """Feature columns that alone predict the label on the labeled rows almost perfectly.

    Each numeric column gets a small decision tree on that column only (missing values as
    their own value); each categorical column a "majority label of this value" rule. Both are
    scored by 3-fold cross-validated balanced accuracy; a score >= ``threshold`` flags the
    column (common practice, no source). Numeric columns are screened first, all at once, by
    a quantile-bin version of the majority rule, so only near-leaks pay for a tree: a
    10,000-column table takes seconds, not minutes.
    """
    from sklearn.metrics import balanced_accuracy_score
    from sklearn.tree import DecisionTreeClassifier

    labeled = np.flatnonzero(y != UNLABELED)
    n_classes = int(y[labeled].max()) + 1 if labeled.size else 0
    if labeled.size < 12 or n_classes < 2:
        return [], "Not checked: fewer than 12 labeled rows."
    rng = derive_rng(seed, "data-card", "leakage")
    if labeled.size > max_rows:
        labeled = np.sort(rng.choice(labeled, size=max_rows, replace=False))
    y_lab = y[labeled]
    n_folds = 3
    folds = rng.permutation(np.arange(labeled.size) % n_folds)
    rows = features.iloc[labeled]
    numeric = [c for c in features.columns if kinds.get(c) == "numeric"]
    candidates: set = set()
    for start in range(0, len(numeric), _SCREEN_BLOCK):
        block = numeric[start:start + _SCREEN_BLOCK]
        x = rows[block].to_numpy(dtype=np.float64, na_value=np.nan)
        screen = _screen_numeric(x, y_lab, folds, n_folds, n_classes)
        candidates.update(c for c, v in zip(block, screen, strict=True)
                          if v >= threshold - LEAKAGE_SCREEN_MARGIN)
    found: list[dict[str, Any]] = []
    for column in features.columns:
        kind = kinds.get(column)
        if kind == "numeric":
            if column not in candidates:
                continue
            x = rows[column].to_numpy(dtype=np.float64, na_value=np.nan)
            finite = x[~np.isnan(x)]
            low = float(finite.min()) - 1.0 if finite.size else 0.0
            x = np.where(np.isnan(x), low, x).reshape(-1, 1)
            predicted = np.empty_like(y_lab)
            for fold in range(n_folds):
                train = folds != fold
                tree = DecisionTreeClassifier(max_leaf_nodes=max(2 * n_classes, 4),
                                              random_state=0)
                tree.fit(x[train], y_lab[train])
                predicted[~train] = tree.predict(x[~train])
            check = "one-column decision tree"
        elif kind == "categorical":
            codes, _ = pd.factorize(rows[column], use_na_sentinel=False)
            predicted = _value_map_predict(np.asarray(codes), y_lab, folds, n_folds)
            check = "majority label per value"
        else:
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            score = float(balanced_accuracy_score(y_lab, predicted))
        if score >= threshold:
            found.append({"column": str(column), "balanced_accuracy": round(score, 4),
                          "check": check})
    n_used = labeled.size
    if found:
        names = ", ".join(repr(f["column"]) for f in found)
        note = (f"Suspected: {names} alone predict(s) the label with cross-validated balanced "
                f"accuracy >= {threshold} on {n_used:,} labeled rows. Check that these columns "
                "are known before the label is and are not derived from it; drop them with "
                "--kind COL=drop if they leak.")
    else:
        note = (f"No single column predicts the label with cross-validated balanced accuracy "
                f">= {threshold} on {n_used:,} labeled rows (numeric: one-column decision tree; "
                "categorical: majority label per value; 3 folds).")
    return found, note


def _column_profiles(frame: pd.DataFrame, column_kinds: Mapping[str, str]) -> list[dict]:
    n_rows = max(frame.shape[0], 1)
    missing = frame.isna().sum()
    profiles = []
    for column in frame.columns:
        series = frame[column]
        # Counting distinct floats in a big column costs seconds and says little.
        if ptypes.is_float_dtype(series.dtype) and len(series) > DISTINCT_MAX_FLOAT_ROWS:
            distinct = None
        else:
            distinct = int(series.nunique(dropna=True))
        profiles.append({
            "name": str(column),
            "kind": column_kinds.get(column, "?"),
            "dtype": str(series.dtype),
            "missing": int(missing[column]),
            "missing_fraction": round(float(missing[column]) / n_rows, 6),
            "distinct": distinct,
        })
    return profiles


def make_card(
    path: str | os.PathLike[str],
    *,
    label_column: str,
    id_column: str | None = None,
    unlabeled_markers: Sequence[str] = (),
    kinds: Mapping[str, str] | None = None,
    delimiter: str | None = None,
    encoding: str | None = None,
) -> DataCard:
    """Profile a table; same arguments as :func:`load_dataset` (``TableSource.card()`` is the
    same for a :class:`TableSource`).

    Warnings raised while loading (DataWarning) are recorded in the card and raised again.
    """
    return card_of(TableSource(
        path, label_column=label_column, id_column=id_column,
        unlabeled_markers=unlabeled_markers, kinds=kinds or {}, delimiter=delimiter,
        encoding=encoding,
    ))


def card_of(source: TableSource) -> DataCard:
    """The data card of ``source``'s table (see :func:`make_card`)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DataWarning)
        loaded = load_source(source)
    data_warnings = []
    for item in caught:
        if issubclass(item.category, DataWarning):
            data_warnings.append(str(item.message))
        warnings.warn_explicit(item.message, item.category, item.filename, item.lineno)
    dataset, frame = loaded.dataset, loaded.frame
    column_kinds = dataset.column_kinds

    kinds_by: dict[str, list[str]] = {}
    for column, kind in column_kinds.items():
        kinds_by.setdefault(kind, []).append(column)

    y = dataset.y
    labeled = y != UNLABELED
    n_labeled = int(labeled.sum())
    counts = np.bincount(y[labeled], minlength=dataset.n_classes)
    class_counts = {name: int(c) for name, c in zip(dataset.class_names, counts, strict=True)}
    ratio = imbalance_ratio(counts)
    if is_imbalanced(ratio):
        small = dataset.class_names[int(counts.argmin())]
        imbalance_note = (f"Imbalanced: the largest labeled class has {ratio:.1f}x the rows of "
                          f"the smallest ({small!r}); read balanced accuracy or macro-F1, not "
                          "only accuracy, and check the small classes get enough labels.")
    else:
        imbalance_note = (f"Roughly balanced: largest / smallest labeled class = {ratio:.2f} "
                          f"(the card calls a ratio of {IMBALANCE_RATIO:g} or more imbalanced).")

    without_id = frame.drop(columns=[loaded.id_column]) if loaded.id_column else frame
    row_hash = pd.util.hash_pandas_object(without_id, index=False)
    duplicate_rows = int(row_hash.duplicated().sum())
    feature_hash = pd.util.hash_pandas_object(loaded.features, index=False).to_numpy()
    pairs = pd.DataFrame({"h": feature_hash[labeled], "y": y[labeled]})
    conflicting = pairs.groupby("h", sort=False)["y"].transform("nunique").to_numpy() > 1
    leakage, leakage_note = find_leakage(loaded.features, column_kinds, y)
    shift = labeled_pool_shift(dataset.X, labeled, blocks=dataset.blocks, seed=shift_seed())
    rare = _rare_classes(class_counts)
    card_warnings = list(data_warnings)
    if shift_warning(shift):
        card_warnings.append(shift_warning(shift))
    if rare["single_label"]:
        card_warnings.append(
            f"{len(rare['single_label'])} class(es) have a single label "
            f"({', '.join(repr(c) for c in list(rare['single_label'])[:5])}): the study trains "
            "on them but cannot evaluate them; label a second row of each")

    path = source.path
    card = DataCard(
        source=str(path),
        sha256=str(dataset.sha256),
        size_bytes=int(path.stat().st_size),
        n_rows=int(frame.shape[0]),
        n_columns=int(frame.shape[1]),
        n_encoded_features=int(dataset.X.shape[1]),
        label_column=source.label_column,
        id_column=source.id_column,
        columns=_column_profiles(frame, column_kinds),
        kinds=kinds_by,
        n_labeled=n_labeled,
        labeled_fraction=round(n_labeled / max(dataset.n_rows, 1), 6),
        class_counts=class_counts,
        imbalance_ratio=round(ratio, 4),
        imbalance_note=imbalance_note,
        duplicate_rows=duplicate_rows,
        duplicate_feature_rows_conflicting_labels=int(conflicting.sum()),
        duplicate_ids=0,  # load refuses repeated ids with an error
        leakage=leakage,
        leakage_note=leakage_note,
        notes=list(dataset.notes),
        warnings=card_warnings,
        labeled_vs_pool=shift,
        rare_classes=rare,
    )
    return card


def write_card(card: DataCard, md_path: str | os.PathLike[str]) -> tuple[Path, Path]:
    """Write the card as Markdown at ``md_path`` and as JSON beside it (``.json``), atomically.

    User fields already filled in an existing JSON twin are kept when the new card leaves
    them empty.
    """
    md_path = Path(md_path)
    if md_path.suffix.lower() != ".md":
        md_path = md_path.with_name(md_path.name + ".md")
    json_path = md_path.with_suffix(".json")
    if json_path.exists():
        try:
            previous = json.loads(json_path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            previous = {}
            log.warning("%s exists but is not a readable card; its fields are not kept",
                        json_path)
        old_fields = previous.get("user_fields") if isinstance(previous, dict) else None
        if isinstance(old_fields, dict):
            for key in USER_FIELDS:
                if not card.user_fields.get(key) and old_fields.get(key):
                    card.user_fields[key] = str(old_fields[key])
    atomic_write_text(json_path, json.dumps(card.to_dict(), indent=2, ensure_ascii=False) + "\n")
    atomic_write_text(md_path, card.to_markdown())
    return md_path, json_path
