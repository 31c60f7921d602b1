"""Progress of long work: a bar on a terminal, periodic lines everywhere else.

A person at a terminal gets tqdm's bar (as before). When stderr is a file, a pipe or a job
log, a bar would be a wall of carriage returns; instead :class:`Progress` writes one line
every tenth of the work or every 30 seconds, whichever comes first, and one at the end:
``cells 120/360, 2m10s, about 3m left``. With ``heartbeat``, a background thread also writes
the current line when nothing finished for ``every_seconds`` (one long cell or epoch), so a
log never stays silent longer than that. Work that runs in other processes reports through
the coordinator's :class:`Progress` (``update`` from the thread that collects results).
"""

from __future__ import annotations

import logging
import sys
import threading
import time
from collections.abc import Callable
from typing import IO, Any

__all__ = ["Progress", "format_duration"]

log = logging.getLogger("semisup")


def format_duration(seconds: float) -> str:
    """``42s``, ``2m10s``, ``1h05m`` (whole seconds, rounded)."""
    s = int(round(max(0.0, float(seconds))))
    if s < 60:
        return f"{s}s"
    if s < 3600:
        return f"{s // 60}m{s % 60:02d}s"
    return f"{s // 3600}h{(s % 3600) // 60:02d}m"


def _about(seconds: float) -> str:
    """A coarse remaining time: ``under 10s``, ``about 40s``, ``about 3m``, ``about 1h20m``."""
    s = max(0.0, float(seconds))
    if s < 10:
        return "under 10s"
    if s < 60:
        return f"about {int(round(s / 10.0) * 10)}s"
    if s < 3600:
        return f"about {int(round(s / 60.0))}m"
    return f"about {int(s // 3600)}h{int(round((s % 3600) / 60.0)):02d}m"


class Progress:
    """Count finished items of ``total``; show them as a bar or as periodic lines.

    Parameters
    ----------
    total : int
        Items to finish.
    what : str
        What is counted, first word of every line (``cells``, ``VAE epochs``).
    enabled : bool, optional
        Show anything at all; default: when the ``semisup`` logger shows info messages.
    stream : file, optional
        Where to write (default ``sys.stderr``); a terminal gets a bar, anything else lines.
    every_fraction, every_seconds : float
        A line after this share of the work or this many seconds since the last line.
    clock : callable
        Seconds, monotonic (injected by tests).
    heartbeat : float, optional
        Check every this many seconds (a daemon thread) whether ``every_seconds`` passed
        without a line, and write one then (not on a terminal: the bar shows the time).
    at_most : bool
        The total is an upper bound (epochs with early stopping): the time left is shown as
        ``at most ...``.
    """

    def __init__(self, total: int, what: str, *, enabled: bool | None = None,
                 stream: IO[str] | None = None, every_fraction: float = 0.1,
                 every_seconds: float = 30.0,
                 clock: Callable[[], float] = time.monotonic,
                 heartbeat: float | None = None, at_most: bool = False) -> None:
        self.total = max(0, int(total))
        self.what = what
        self.done = 0
        self.failed = 0
        self._stream = stream if stream is not None else sys.stderr
        if enabled is None:
            enabled = log.getEffectiveLevel() <= logging.INFO
        self._enabled = bool(enabled) and self.total > 0
        self._clock = clock
        self._start = clock()
        self._last_time = self._start
        self._last_done = 0
        self._step = max(1, int(round(every_fraction * self.total)))
        self._every_seconds = float(every_seconds)
        self._bar: Any = None
        self._at_most = bool(at_most)
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self.lines: int = 0
        if self._enabled and bool(getattr(self._stream, "isatty", lambda: False)()):
            self._bar = _bar(self.total, what, self._stream)
        if self._enabled and self._bar is None and heartbeat:
            self._thread = threading.Thread(target=self._beat, args=(float(heartbeat),),
                                            name="semisup-progress", daemon=True)
            self._thread.start()

    def _beat(self, every: float) -> None:
        while not self._stop.wait(every):
            self.tick()

    def tick(self) -> None:
        """Write the current line if ``every_seconds`` passed since the last one."""
        if not self._enabled or self._bar is not None:
            return
        with self._lock:
            now = self._clock()
            if now - self._last_time >= self._every_seconds and self.done < self.total:
                self._line(now)

    def update(self, n: int = 1, *, failed: bool = False) -> None:
        """``n`` more items finished (``failed``: they failed)."""
        self.done += int(n)
        if failed:
            self.failed += int(n)
        if not self._enabled:
            return
        if self._bar is not None:
            self._bar.update(n)
            self._bar.set_postfix(failed=self.failed)
            return
        with self._lock:
            now = self._clock()
            if (self.done >= self.total or self.done - self._last_done >= self._step
                    or now - self._last_time >= self._every_seconds):
                self._line(now)

    def line(self) -> str:
        """The current progress line (without the newline)."""
        return self._text(self._clock())

    def _text(self, now: float) -> str:
        elapsed = now - self._start
        text = f"{self.what} {self.done}/{self.total}, {format_duration(elapsed)}"
        if 0 < self.done < self.total:
            left = _about(elapsed / self.done * (self.total - self.done))
            if self._at_most:
                left = "under 10s" if left == "under 10s" else left.replace("about", "at most")
            text += f", {left} left"
        if self.failed:
            text += f", {self.failed} failed"
        return text

    def _line(self, now: float) -> None:
        self._stream.write(self._text(now) + "\n")
        self._stream.flush()
        self.lines += 1
        self._last_time, self._last_done = now, self.done

    def close(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
            self._thread = None
        if self._bar is not None:
            self._bar.close()
            self._bar = None

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _bar(total: int, what: str, stream: IO[str]):
    try:
        from tqdm.auto import tqdm
    except ImportError:  # pragma: no cover
        return None
    unit = what.split()[-1].rstrip("s") or "item"
    return tqdm(total=total, desc=what, unit=unit, leave=False, mininterval=1.0, file=stream)
