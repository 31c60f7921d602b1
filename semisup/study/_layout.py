"""The study folder's output names, and the two checks that protect what is not ours.

Every file and folder a study, its plan and its report write in the study folder is listed
here once (:data:`OUTPUT_FILES`, :data:`OUTPUT_FOLDERS`), so that

- an input table that *is* one of those outputs (``--out`` set to its folder and the table
  named ``cells.csv``, say) is refused before anything is written
  (:func:`check_input_outside_outputs`): the study would overwrite its own input;
- ``--restart`` removes every output of the old study (:func:`remove_outputs`), so no
  plan.json, label_next.csv or report of the old study is shown with the new one.

Nothing else in the folder is touched. What the files hold is read back, typed, by
:mod:`semisup.study._folder` (study.json, curves.csv).
"""

from __future__ import annotations

import logging
import os
import shutil
from pathlib import Path

from .._errors import ConfigError, StoreError

__all__ = ["LOCK_FILE", "OUTPUT_FILES", "OUTPUT_FOLDERS", "check_input_outside_outputs",
           "check_out_folder", "output_paths", "remove_outputs"]

log = logging.getLogger(__name__)

#: The lock file of a running study (semisup/study/_lock.py); never removed by a restart.
LOCK_FILE = ".semisup-study.lock"

#: Files written in the study folder by study, plan and report.
OUTPUT_FILES = (
    "study.sqlite", "study.sqlite-journal", "study.sqlite-wal", "study.sqlite-shm",
    "cells.csv", "cells.parquet", "curves.csv", "study.json", "candidates.npz",
    "data_card.md", "data_card.json",
    "plan.json", "label_next.csv", "label_next.xlsx",
    "labels_added.csv",
    "report.html",
)
#: Folders written in the study folder (everything inside them is ours).
OUTPUT_FOLDERS = ("cache", "figures", "plans")


def output_paths(out_dir: str | os.PathLike[str]) -> list[Path]:
    """Every output path of a study in ``out_dir`` (files, then folders)."""
    out = Path(out_dir)
    return [out / name for name in OUTPUT_FILES] + [out / name for name in OUTPUT_FOLDERS]


def _same_or_inside(path: Path, target: Path, folder: bool) -> bool:
    if path == target:
        return True
    return folder and target in path.parents


def check_out_folder(out_dir: str | os.PathLike[str]) -> None:
    """StoreError when ``out_dir`` exists and is not a folder."""
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise StoreError(f"study folder {out} is a file, not a folder; give --out a folder "
                         "path (it is created if missing)")


def check_input_outside_outputs(data: str | os.PathLike[str] | None,
                                out_dir: str | os.PathLike[str]) -> None:
    """ConfigError when the input table is (or lies inside) one of the study's outputs.

    Called before anything is written: the study would otherwise overwrite the table it reads.
    """
    if not data:
        return
    table = Path(data).resolve()
    out = Path(out_dir).resolve()
    for name in OUTPUT_FILES + OUTPUT_FOLDERS:
        target = out / name
        if _same_or_inside(table, target, name in OUTPUT_FOLDERS):
            raise ConfigError(
                f"input table {data} is where the study writes its output {name!r} in {out_dir}; "
                "the study would overwrite it, so rename the table or choose another --out"
            )


def remove_outputs(out_dir: str | os.PathLike[str], *, keep: tuple[str, ...] = ()) -> list[str]:
    """Delete every output of an earlier study in ``out_dir`` (for ``--restart``), except
    the names in ``keep`` (a new labeling round keeps labels_added.csv and the cache).

    Returns the names removed. Files the study does not write are left alone.
    """
    out = Path(out_dir)
    removed: list[str] = []
    for path in output_paths(out):
        if path.name in keep:
            continue
        try:
            if path.is_dir() and not path.is_symlink():
                shutil.rmtree(path)
            elif path.exists() or path.is_symlink():
                path.unlink()
            else:
                continue
        except OSError as exc:
            raise StoreError(f"--restart cannot remove {path} ({exc.strerror or exc}); remove "
                             "it by hand or choose another --out") from None
        removed.append(path.name)
    if removed:
        log.info("restart: removed %s from %s", ", ".join(removed), out)
    return removed
