"""Feature matrices shared by a study's processes instead of copied to each.

The coordinator (or the worker that fits an unsupervised stage) writes each matrix once as
a ``.npy`` file under ``cache/shared/`` of the study folder; every process opens it
memory-mapped and read-only, so the operating system holds one copy in its page cache
whatever the number of workers, and pages it can drop again under memory pressure. A
worker is sent the file's path, never the matrix.
"""

from __future__ import annotations

import mmap
import os
import shutil
from pathlib import Path

import numpy as np

from .._atomic import atomic_path

__all__ = ["SHARED_FOLDER", "open_shared", "remove_shared", "shared_folder", "shared_paths",
           "write_shared"]

#: Under the study folder; inside ``cache`` so the output-folder rules (never an input file,
#: removed by a restart) cover it.
SHARED_FOLDER = Path("cache") / "shared"


def shared_folder(out_dir: str | os.PathLike[str]) -> Path:
    return Path(out_dir) / SHARED_FOLDER


def write_shared(folder: str | os.PathLike[str], name: str, array: np.ndarray) -> np.ndarray:
    """Write ``array`` to ``folder/name.npy`` (atomically) and return it memory-mapped."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name.replace('@', '_')}.npy"
    with atomic_path(path) as tmp:
        np.save(tmp, np.ascontiguousarray(array))
    return open_shared(path)


def open_shared(path: str | os.PathLike[str]) -> np.ndarray:
    """The array of ``path`` (a ``.npy`` file), memory-mapped read-only."""
    return np.load(path, mmap_mode="r")


def shared_paths(features: dict[str, np.ndarray]) -> dict[str, str] | None:
    """``{key: file}`` when every array of ``features`` is a whole memory-mapped ``.npy``
    file (as :func:`write_shared` returns it); None otherwise (send the arrays)."""
    paths = {}
    for key, array in features.items():
        name = getattr(array, "filename", None)
        if not isinstance(array, np.memmap) or name is None or \
                not isinstance(array.base, mmap.mmap):  # a slice's base is its parent
            return None
        paths[key] = str(name)
    return paths


def remove_shared(out_dir: str | os.PathLike[str]) -> None:
    """Delete the shared files of a study (open mappings stay valid until closed)."""
    shutil.rmtree(shared_folder(out_dir), ignore_errors=True)
