"""Checks that a study folder still describes what the study read and wrote.

- **The table.** study.json records the table by absolute path (``data.path``) and SHA-256
  (``data.sha256``). :func:`study_table` finds it there, whatever the current folder, and
  says plainly when it is gone or changed; ``add-labels`` and ``fit`` refuse a different
  table (:func:`study_table` with ``strict=True``), ``plan`` lists the rows without their data.
- **The exports.** The study records the SHA-256 of the ``cells.csv`` and ``curves.csv`` it
  wrote (study.json ``exports``). :func:`check_exports` compares them before ``plan``,
  ``report`` or ``fit`` read them: a hand-edited file is one line (StoreError, exit 2) saying
  how to rewrite it, never a crash and never a silent plan. Folders of an earlier release
  (no digests) get the structural checks only.

``plan``, ``report``, ``fit`` and ``add-labels`` call these at their entry.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from .._errors import DataError, StoreError

__all__ = ["EXPORTS_KEY", "TableCheck", "check_exports", "export_digests", "recorded_table",
           "study_json", "study_table"]

log = logging.getLogger(__name__)

#: study.json key: file name -> SHA-256 of the exports the study wrote.
EXPORTS_KEY = "exports"
#: Exports whose digest the study records and readers check.
CHECKED_EXPORTS = ("cells.csv", "curves.csv")


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def export_digests(texts: Mapping[str, str]) -> dict[str, str]:
    """``{file name: SHA-256}`` of export texts as they are written (UTF-8)."""
    return {name: _sha(text.encode("utf-8")) for name, text in texts.items()}


def study_json(study_dir: str | os.PathLike[str]) -> dict[str, Any]:
    """study.json's content, {} when absent or damaged (the readers give their own error)."""
    path = Path(study_dir) / "study.json"
    if not path.is_file():
        return {}
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (ValueError, OSError):
        return {}  # the readers give their own one-line error for a damaged study.json
    return data if isinstance(data, dict) else {}


def check_exports(study_dir: str | os.PathLike[str], *, command: str,
                  error: type[Exception] = StoreError) -> None:
    """Refuse a ``cells.csv`` or ``curves.csv`` that differs from what the study wrote.

    Parameters
    ----------
    command : the command about to read them (for the message): "plan", "report", "fit".
    error : the error class to raise (one line).
    """
    folder = Path(study_dir)
    if not folder.is_dir():
        return  # the command's own check names the missing folder
    info = study_json(folder)
    recorded = info.get(EXPORTS_KEY)
    fix = ("run 'semisup study' on the folder again to rewrite it from the study's store "
           "(finished cells are kept, nothing is recomputed)")
    if not isinstance(recorded, Mapping):
        _legacy_cells_check(folder, command, error)
        return
    for name in CHECKED_EXPORTS:
        digest = recorded.get(name)
        if not isinstance(digest, str):
            continue
        path = folder / name
        try:
            actual = _sha(path.read_bytes())
        except FileNotFoundError:
            raise error(f"{path} is missing although the study wrote it; {fix}") from None
        except OSError as exc:
            raise error(f"{path} cannot be read ({exc.strerror or exc}); {fix}") from None
        if actual != digest:
            raise error(f"{path} was changed after the study wrote it (its SHA-256 differs from "
                        f"the one in study.json), so '{command}' would read edited results; "
                        f"{fix}")


def _legacy_cells_check(folder: Path, command: str, error: type[Exception]) -> None:
    """An older study (no digests): budgets must be whole numbers and the finished cells as
    many as study.json counted."""
    import pandas as pd

    path = folder / "cells.csv"
    if not path.is_file():
        return
    try:
        cells = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (ValueError, OSError, UnicodeDecodeError):
        return  # the readers' own one-line error
    if "n_labels" in cells.columns:
        n = pd.to_numeric(cells["n_labels"].str.strip(), errors="coerce")
        bad = n.notna() & (n % 1 != 0)
        if bad.any():
            raise error(f"{path} column 'n_labels' holds {cells['n_labels'][bad].iloc[0]!r}, not "
                        "a whole number of labels (the file was edited); run 'semisup study' on "
                        "the folder again to rewrite it")
    counts = study_json(folder).get("status_counts")
    if isinstance(counts, Mapping) and "status" in cells.columns:
        expected = sum(int(v) for v in counts.values() if isinstance(v, int))
        if expected and expected != len(cells):
            raise error(f"{path} has {len(cells)} cells but study.json records {expected} (the "
                        f"file was edited); run 'semisup study' on the folder again to "
                        "rewrite it")


class TableCheck:
    """Where the study's table is and whether it is the one the study read."""

    def __init__(self, path: Path, recorded: str | None, sha256: str | None,
                 actual: str | None):
        self.path, self.recorded, self.sha256, self.actual = path, recorded, sha256, actual

    @property
    def changed(self) -> bool:
        return bool(self.sha256 and self.actual and self.sha256 != self.actual)

    def message(self, study_dir: Path) -> str:
        return (f"the study's table {self.path} changed since the study read it (SHA-256 "
                f"{self.sha256[:12]}... recorded in {study_dir / 'study.json'}, now "
                f"{(self.actual or '')[:12]}...)")


def recorded_table(study: Mapping, study_dir: str | os.PathLike[str]) -> tuple[Path | None, str]:
    """The table's path as the study recorded it and how it was recorded: its absolute path
    (``data.path``), or for an older study the path as given to it (relative ones are
    relative to where the study ran, which is unknown: the current folder is tried)."""
    data = study.get("data") if isinstance(study.get("data"), Mapping) else {}
    spec = study.get("spec") if isinstance(study.get("spec"), Mapping) else {}
    if data.get("path"):
        return Path(str(data["path"])), "recorded"
    given = spec.get("data") or data.get("source")
    if not given:
        return None, "none"
    return Path(str(given)), "given"


def study_table(study_dir: str | os.PathLike[str], study: Mapping | None = None, *,
                data: str | os.PathLike[str] | None = None, strict: bool = True,
                option: str = "--data") -> TableCheck:
    """Find the study's table and compare its SHA-256 with study.json's.

    Parameters
    ----------
    study : study.json's content (read from ``study_dir`` when None).
    data : a path the user gave for the table (``fit --data``); it must be the same table.
    strict : raise DataError when the table is missing or changed (``fit``, ``add-labels``);
        otherwise return the check and let the caller say so.
    """
    from ..data import file_sha256

    folder = Path(study_dir)
    study = study_json(folder) if study is None else study
    recorded = study.get("data") if isinstance(study.get("data"), Mapping) else {}
    sha = recorded.get("sha256") if isinstance(recorded.get("sha256"), str) else None
    path, how = recorded_table(study, folder)
    if data is not None:
        path, how = Path(data), "option"
    if path is None:
        raise DataError(f"{folder / 'study.json'} does not name the study's table; run "
                        "'semisup study' again")
    where = {"recorded": f" (recorded in {folder / 'study.json'})",
             "given": f" (as given to the study, {folder / 'study.json'}; resolved from "
                      f"the current folder {Path.cwd()})",
             "option": f" (given as {option})"}[how]
    if not path.is_file():
        if not strict:
            return TableCheck(path, how, sha, None)
        if how == "option":
            hint = ""
        elif option:
            hint = f"; move it back, or pass {option} with its new path"
        else:
            hint = "; move it back to that path"
        raise DataError(f"the study's table {path}{where} is not found{hint}")
    actual = file_sha256(path)
    check = TableCheck(path.absolute(), how, sha, actual)
    if strict and check.changed:
        if how == "option":
            raise DataError(f"{option} {data} is not the study's table: its SHA-256 "
                            f"{actual[:12]}... differs from the {sha[:12]}... the study read "
                            f"({folder / 'study.json'}); give the table the study read, or run "
                            "a new study on this one")
        if how == "given":  # an older study.json: the path may be relative to another folder
            raise DataError(f"{path}{where} is not the table the study read (its SHA-256 "
                            f"{actual[:12]}... differs from the recorded {sha[:12]}...); run "
                            "this command from the folder the study ran in, or give the "
                            "study's table with its full path")
        raise DataError(f"{check.message(folder)}; restore the table the study read, or run "
                        "a new study on the changed table")
    return check
