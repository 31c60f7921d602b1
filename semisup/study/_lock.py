"""One study at a time per study folder: a lock file held for the whole run.

The lock is ``filelock.FileLock`` (an OS file lock: ``fcntl.flock`` on POSIX, ``msvcrt`` on
Windows), so it is released when the process ends, even by ``kill -9``; a stale lock file
left on disk does not block the next study.
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator
from pathlib import Path

from .._errors import StoreError
from ._layout import LOCK_FILE

__all__ = ["study_lock"]


@contextlib.contextmanager
def study_lock(out_dir: str | os.PathLike[str], *, timeout: float = 0.0) -> Iterator[Path]:
    """Hold the study folder's lock; StoreError when another study holds it.

    Parameters
    ----------
    out_dir : path
        Study folder; created if missing.
    timeout : float
        Seconds to wait for a running study to finish (0: refuse at once).
    """
    from filelock import FileLock, Timeout

    out = Path(out_dir)
    lock_path = out / LOCK_FILE
    try:
        out.mkdir(parents=True, exist_ok=True)
        lock = FileLock(str(lock_path), timeout=timeout)
        lock.acquire()
    except Timeout:
        raise StoreError(
            f"another study is running in {out} (it holds {lock_path}); wait for it to finish, "
            "or give this one another --out folder"
        ) from None
    except OSError as exc:
        raise StoreError(
            f"cannot write in the study folder {out} ({exc.strerror or exc}); choose another "
            "--out folder or make it writable"
        ) from None
    try:
        yield lock_path
    finally:
        lock.release()
