"""Atomic file output: write to a temporary name in the same folder, then rename.

A reader never sees a half-written file, and an interrupted run leaves the old file (or none).
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO

__all__ = ["atomic_path", "atomic_write_bytes", "atomic_write_text"]


def _current_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success rename it onto ``path``.

    Use it for writers that want a file name (``DataFrame.to_parquet``, ``savefig``, ...).
    The temporary file keeps the final suffix so format sniffing by extension still works.
    """
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(
        prefix=f".{target.stem}.", suffix=f".tmp{target.suffix}", dir=target.parent
    )
    os.close(fd)
    tmp = Path(tmp_name)
    # mkstemp makes the file private (0600); give it the mode a plain open() would.
    os.chmod(tmp, 0o666 & ~_current_umask())
    try:
        yield tmp
        os.replace(tmp, target)
    finally:
        if tmp.exists():
            tmp.unlink()


@contextlib.contextmanager
def _atomic_open(path: str | os.PathLike[str], mode: str, **kwargs: object) -> Iterator[IO]:
    with atomic_path(path) as tmp:
        with open(tmp, mode, **kwargs) as handle:  # noqa: PTH123
            yield handle
            handle.flush()
            os.fsync(handle.fileno())


def atomic_write_text(path: str | os.PathLike[str], text: str, encoding: str = "utf-8") -> Path:
    """Write ``text`` to ``path`` atomically and return the path."""
    with _atomic_open(path, "w", encoding=encoding, newline="") as handle:
        handle.write(text)
    return Path(path)


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically and return the path."""
    with _atomic_open(path, "wb") as handle:
        handle.write(data)
    return Path(path)
