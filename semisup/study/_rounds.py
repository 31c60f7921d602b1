"""Labeling rounds: the study's own labeled set, grown by labels that come back.

The user's table is never modified. Labels returned by annotators (``semisup add-labels``)
are merged into :data:`ADDED_LABELS_FILE` in the study folder (columns ``row_id``,
``label``), written atomically; the study design reads it as an overlay on the table's
labels (:func:`read_added_labels`, :func:`apply_added_labels`).

A sheet the plan writes names the study it belongs to in :data:`SHEET_STUDY_COLUMN`:
:func:`study_id` (a digest of the table's content, its label column and its id column), so a
sheet returned to the wrong study folder is refused.
"""

from __future__ import annotations

import hashlib
import io
import logging
import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .._atomic import atomic_write_text
from .._errors import DataError

__all__ = ["ADDED_LABELS_FILE", "SHEET_STUDY_COLUMN", "AddedLabels", "apply_added_labels",
           "read_added_labels", "study_id"]

log = logging.getLogger(__name__)

#: The study's own added labels (row_id, label), beside the user's table.
ADDED_LABELS_FILE = "labels_added.csv"
#: Column of label_next.csv naming the study the sheet was made for.
SHEET_STUDY_COLUMN = "semisup_study"


def study_id(study: Mapping) -> str | None:
    """A short id of the study a sheet belongs to, from study.json (None if unknown).

    Built from the table's sha256 and the label and id columns: unchanged by added labels
    (the table is never modified), different for another table or another label column.
    """
    data = study.get("data") if isinstance(study.get("data"), Mapping) else {}
    spec = study.get("spec") if isinstance(study.get("spec"), Mapping) else {}
    digest = data.get("sha256")
    if not digest:
        return None
    key = "\0".join([str(digest), str(spec.get("label_column")), str(spec.get("id_column"))])
    return hashlib.sha256(key.encode("utf-8")).hexdigest()[:16]


@dataclass(frozen=True)
class AddedLabels:
    """Labels added to a study: ``row_ids`` and ``labels`` (strings), in file order."""

    row_ids: tuple[str, ...]
    labels: tuple[str, ...]

    def __len__(self) -> int:
        return len(self.row_ids)

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"row_id": list(self.row_ids), "label": list(self.labels)},
                            dtype=object)


def read_added_labels(out_dir: str | os.PathLike[str]) -> AddedLabels:
    """The labels added to the study in ``out_dir`` (none when the file is absent)."""
    path = Path(out_dir) / ADDED_LABELS_FILE
    if not path.is_file():
        return AddedLabels((), ())
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (ValueError, OSError) as exc:
        raise DataError(f"{path} cannot be read ({exc}); remove it or restore it from "
                        "a backup") from None
    if list(frame.columns[:2]) != ["row_id", "label"]:
        raise DataError(f"{path} should have the columns row_id, label; remove it or restore "
                        "it from a backup")
    return AddedLabels(tuple(frame["row_id"]), tuple(frame["label"]))


def write_added_labels(out_dir: str | os.PathLike[str], added: AddedLabels) -> Path:
    """Write ``added`` as the study's added labels, atomically."""
    path = Path(out_dir) / ADDED_LABELS_FILE
    buf = io.StringIO()
    added.to_frame().to_csv(buf, index=False)
    atomic_write_text(path, buf.getvalue())
    return path


def apply_added_labels(ds, added: AddedLabels, *, where: str = ADDED_LABELS_FILE):
    """``ds`` (a Dataset) with the added labels set on its rows (a new Dataset).

    Classes not in ``ds.class_names`` join them, sorted the way the data layer sorts them.
    A row id that is not in the table, or a label contradicting the table's, is a DataError.
    """
    if not len(added):
        return ds
    from dataclasses import replace

    from ..data._labels import sort_class_names

    ids = pd.Index(np.asarray(ds.row_ids).astype(str))
    pos = ids.get_indexer(list(added.row_ids))
    if (pos < 0).any():
        bad = added.row_ids[int(np.flatnonzero(pos < 0)[0])]
        raise DataError(f"{where}: row id {bad!r} is not in the study's table; the table "
                        "changed since the labels were added, so start again with --restart")
    classes = list(ds.class_names)
    new = sorted(set(added.labels) - set(classes))
    names = sort_class_names(classes + new) if new else classes
    remap = np.array([names.index(c) for c in classes], dtype=np.int64)
    y = np.where(ds.y >= 0, remap[np.clip(ds.y, 0, None)] if len(remap) else ds.y, -1)
    for p, label in zip(pos, added.labels, strict=True):
        if y[p] >= 0 and names[y[p]] != label:
            raise DataError(f"{where}: row {added.row_ids[list(pos).index(p)]!r} is labeled "
                            f"{names[y[p]]!r} in the table but {label!r} here; fix one of them")
        y[p] = names.index(label)
    return replace(ds, y=y.astype(np.int64), class_names=names)
