"""Labeling rounds: the study's own labeled set, grown by labels that come back.

The user's table is never modified. Labels returned by annotators (``semisup add-labels``)
are merged into :data:`ADDED_LABELS_FILE` in the study folder (columns ``row_id``,
``label``, ``round``: each ``add-labels`` run that adds rows is the next round), written
atomically; the study design reads it as an overlay on the table's labels
(:func:`read_added_labels`, :func:`apply_added_labels`). The rows of a round are training
rows only (DEVELOPERS.md "The study protocol", growing studies).

A sheet the plan writes names the study it belongs to in :data:`SHEET_STUDY_COLUMN`:
:func:`study_id` (a digest of the table's content, its label column and its id column), so a
sheet returned to the wrong study folder is refused.
"""

from __future__ import annotations

import hashlib
import logging
import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .._errors import DataError
from .._escape import restore_cell
from .._paths import check_output
from .._tables_out import write_table
from ._folder import StudyRecord, read_study_record
from ._integrity import study_table
from ._lock import study_lock

__all__ = ["ADDED_LABELS_FILE", "SHEET_STUDY_COLUMN", "AddResult", "AddedLabels",
           "add_labels", "apply_added_labels", "read_added_labels", "study_id",
           "write_added_labels"]

log = logging.getLogger(__name__)

#: The study's own added labels (row_id, label), beside the user's table.
ADDED_LABELS_FILE = "labels_added.csv"
#: Column of label_next.csv naming the study the sheet was made for.
SHEET_STUDY_COLUMN = "semisup_study"


def study_id(study: Mapping | StudyRecord) -> str | None:
    """A short id of the study a sheet belongs to, from study.json (None if unknown).

    Built from the table's sha256 and the label and id columns: unchanged by added labels
    (the table is never modified), different for another table or another label column.
    """
    record = study if isinstance(study, StudyRecord) else StudyRecord.from_dict(study)
    digest, spec = record.data.sha256, record.spec
    if not digest:
        return None
    key = "\0".join([str(digest), str(spec.get("label_column")), str(spec.get("id_column"))])
    return hashlib.sha256(key.encode("utf-8")).hexdigest()[:16]


@dataclass(frozen=True)
class AddedLabels:
    """Labels added to a study: ``row_ids`` and ``labels`` (strings) and the labeling round
    of each (1, 2, ...; all 1 when not given), in file order."""

    row_ids: tuple[str, ...]
    labels: tuple[str, ...]
    rounds: tuple[int, ...] = ()

    def __post_init__(self) -> None:
        if not self.rounds:
            object.__setattr__(self, "rounds", (1,) * len(self.row_ids))

    def __len__(self) -> int:
        return len(self.row_ids)

    @property
    def last_round(self) -> int:
        return max(self.rounds, default=0)

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"row_id": list(self.row_ids), "label": list(self.labels),
                             "round": [str(r) for r in self.rounds]}, dtype=object)


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
    rounds: tuple[int, ...] = ()
    if "round" in frame.columns:
        text = frame["round"].str.strip()
        if not text.str.fullmatch(r"[1-9][0-9]*").all():
            bad = frame["round"][~text.str.fullmatch(r"[1-9][0-9]*")].iloc[0]
            raise DataError(f"{path}: column 'round' holds {bad!r}, not a round number (1, 2, "
                            "...); remove it or restore the file from a backup")
        rounds = tuple(int(v) for v in text)
    # the file is written through the spreadsheet-safe writer: take its quotes off again
    return AddedLabels(tuple(frame["row_id"].map(restore_cell)),
                       tuple(frame["label"].map(restore_cell)), rounds)


def write_added_labels(out_dir: str | os.PathLike[str], added: AddedLabels) -> Path:
    """Write ``added`` as the study's added labels, atomically, through the one writer of
    tables a person may open (formula-like ids and labels get a leading quote, which
    :func:`read_added_labels` takes off)."""
    path = Path(out_dir) / ADDED_LABELS_FILE
    return write_table(added.to_frame(), path)


def apply_added_labels(ds, added: AddedLabels, *, where: str = ADDED_LABELS_FILE):
    """``ds`` (a Dataset) with the added labels set on its rows (a new Dataset).

    Classes not in ``ds.class_names`` join them, sorted the way the data layer sorts them.
    A row id that is not in the table, or a label contradicting the table's, is a DataError.
    """
    if not len(added):
        return ds
    from dataclasses import replace

    from ..data import sort_class_names

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


@dataclass(frozen=True)
class AddResult:
    """What ``add_labels`` did: rows added, rows already known, the file written."""

    n_added: int
    n_known: int
    n_blank: int
    path: Path
    new_classes: tuple[str, ...] = ()

    def summary(self) -> str:
        text = (f"added {self.n_added} label(s) to {self.path}; {self.n_known} row(s) already "
                f"carried the same label, {self.n_blank} row(s) of the sheet were left blank")
        if self.new_classes:
            text += f"; new class(es): {', '.join(self.new_classes)}"
        return text + ". Run 'semisup study' on the folder again to use them."


def _read_study(path: Path) -> StudyRecord:
    if not path.is_file():
        raise DataError(f"{path.parent} is not a study folder ({path.name} is missing); run "
                        "'semisup study' first, or give the study's --out folder")
    return read_study_record(path, DataError)


def _column(frame: pd.DataFrame, name: str, where: str, what: str) -> str:
    from .._escape import neutralise_cell

    for candidate in (name, neutralise_cell(name)):
        if candidate in frame.columns:
            return candidate
    raise DataError(f"{where} has no column {name!r} ({what}); return the sheet that "
                    "'semisup plan' wrote, with that column kept")


def _returned_labels(study: StudyRecord, returned: Path) -> tuple[list[str], list[str], int]:
    """``(row ids, labels, blank rows)`` of a returned sheet, quotes taken off, checked."""
    from .._escape import restore_cell
    from ..data import read_table

    label_column = str(study.spec.get("label_column") or "label")
    where = str(returned)
    frame = read_table(returned, text_columns=("row_id", label_column, SHEET_STUDY_COLUMN))
    frame.columns = [str(c) for c in frame.columns]
    id_col = _column(frame, "row_id", where, "the row ids")
    lab_col = _column(frame, label_column, where, "the labels to fill in")
    if SHEET_STUDY_COLUMN in frame.columns:
        mine = study_id(study)
        theirs = {str(v).strip() for v in frame[SHEET_STUDY_COLUMN].dropna()} - {""}
        other = sorted(theirs - {mine}) if mine else []
        if other:
            raise DataError(f"{where}: column {SHEET_STUDY_COLUMN!r} says the sheet was made for "
                            f"study {other[0]!r}, not this one ({mine!r}); return it to the "
                            "study folder whose plan wrote it")
    ids = [restore_cell(str(v)) if pd.notna(v) else "" for v in frame[id_col]]
    labels = [restore_cell(str(v)).strip() if pd.notna(v) else "" for v in frame[lab_col]]
    if any(i == "" for i in ids):
        row = ids.index("") + 2
        raise DataError(f"{where}: column {id_col!r} is empty at line {row}; every row of the "
                        "sheet needs its row id")
    seen: dict[str, int] = {}
    for i, rid in enumerate(ids):
        if rid in seen:
            raise DataError(f"{where}: row id {rid!r} appears twice (lines {seen[rid] + 2} and "
                            f"{i + 2}); keep one line per row")
        seen[rid] = i
    filled = [(r, lab) for r, lab in zip(ids, labels, strict=True) if lab]
    if not filled:
        raise DataError(f"{where}: column {lab_col!r} holds no label; fill in the labels "
                        "before returning the sheet")
    return [r for r, _ in filled], [lab for _, lab in filled], len(ids) - len(filled)


def add_labels(study_dir: str | os.PathLike[str], returned: str | os.PathLike[str], *,
               allow_new_classes: bool = False) -> AddResult:
    """Merge the labels of a returned sheet into the study's own labeled set.

    Every check runs before anything is written; a bad sheet is a one-line DataError and
    leaves the study folder as it was. The user's table is never modified.

    Parameters
    ----------
    study_dir : the study folder (its study.json names the table and the label column).
    returned : the sheet (CSV, TSV, Parquet or .xlsx) with ``row_id`` and the label column.
    allow_new_classes : accept labels of classes the study has never seen.
    """
    out = Path(study_dir)
    study = _read_study(out / "study.json")
    # one add-labels at a time, and none while a study or a fit reads the folder
    with study_lock(out, command="add-labels"):
        return _add_labels(out, study, Path(returned), allow_new_classes)


def _add_labels(out: Path, study: StudyRecord, returned: Path,
                allow_new_classes: bool) -> AddResult:
    from ..data import TableSource

    spec = study.spec
    if not spec.get("data") or not spec.get("label_column"):
        raise DataError(f"{out / 'study.json'} does not name the study's table and label "
                        "column; run 'semisup study' again")
    # the study's own table (by its recorded absolute path and SHA-256), never a same-named
    # file of the current folder
    table = study_table(out, strict=True, option="").path
    check_output(out / ADDED_LABELS_FILE, option="add-labels: the study's labels file",
                 inputs={"the returned sheet": returned, "the study's table": table})
    ids, labels, n_blank = _returned_labels(study, returned)
    ds = TableSource.of(spec, path=table).load()
    before = read_added_labels(out)
    current = apply_added_labels(ds, before)
    table_ids = pd.Index(np.asarray(current.row_ids).astype(str))
    pos = table_ids.get_indexer(ids)
    if (pos < 0).any():
        bad = [ids[i] for i in np.flatnonzero(pos < 0)]
        raise DataError(f"{returned}: row id {bad[0]!r} is not in the study's table "
                        f"{table} ({len(bad)} unknown id(s)); return only rows of "
                        "label_next.csv")
    names = list(current.class_names)
    new = sorted({lab for lab in labels if lab not in names})
    if new and not allow_new_classes:
        raise DataError(f"{returned}: label {new[0]!r} is not a class of the study (classes: "
                        f"{', '.join(names)}); correct it, or pass --allow-new-class if it "
                        "really is a new class")
    added_ids, added_labels = list(before.row_ids), list(before.labels)
    added_rounds = list(before.rounds)
    this_round = before.last_round + 1
    n_known = 0
    for rid, label, p in zip(ids, labels, pos, strict=True):
        old = int(current.y[p])
        if old >= 0:
            if names[old] != label:
                raise DataError(f"{returned}: row {rid!r} is labeled {label!r} here but "
                                f"{names[old]!r} already (in the table or an earlier return); "
                                "correct the sheet")
            n_known += 1
            continue
        added_ids.append(rid)
        added_labels.append(label)
        added_rounds.append(this_round)
    path = write_added_labels(out, AddedLabels(tuple(added_ids), tuple(added_labels),
                                               tuple(added_rounds)))
    log.info("added %d labels to %s", len(added_ids) - len(before), path)
    return AddResult(n_added=len(added_ids) - len(before), n_known=n_known, n_blank=n_blank,
                     path=path, new_classes=tuple(new))
