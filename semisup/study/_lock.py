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
def study_lock(out_dir: str | os.PathLike[str], *, timeout: float = 0.0,
               command: str = "study") -> Iterator[Path]:
    """Hold the study folder's lock; StoreError when another command holds it.

    ``study``, ``add-labels`` and ``fit`` take the same lock, so none of them reads the
    folder while another writes it, and two ``add-labels`` never merge at once.

    Parameters
    ----------
    out_dir : path
        Study folder; created if missing (only ``study`` creates one: the other commands
        check it exists first).
    timeout : float
        Seconds to wait for a running study to finish (0: refuse at once).
    command : str
        The command taking the lock, for the message ("study", "add-labels", "fit").
    """
    from filelock import FileLock, Timeout

    out = Path(out_dir)
    lock_path = out / LOCK_FILE
    try:
        out.mkdir(parents=True, exist_ok=True)
        lock = FileLock(str(lock_path), timeout=timeout)
        lock.acquire()
    except Timeout:
        if command == "study":
            raise StoreError(
                f"another study is running in {out} (or an add-labels or fit; it holds "
                f"{lock_path}); wait for it to finish, or give this one another --out folder"
            ) from None
        raise StoreError(
            f"{command}: a study, add-labels or fit is running in {out} (it holds {lock_path}); "
            f"wait for it to finish, then run {command} again"
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
