"""The study's SQLite store: one row per finished cell, committed the moment it finishes.

Each row carries its cell's content key (:func:`semisup.study._cell.cell_key`): a later run
of a grown study keeps the rows whose key it computes again, and runs the others.
"""

from __future__ import annotations

import json
import sqlite3
import time
from pathlib import Path
from typing import Any

import pandas as pd

from .._errors import StoreError

__all__ = ["CELL_COLUMNS", "Store"]

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS cells (
    method TEXT NOT NULL,
    n_labels INTEGER NOT NULL,
    repeat INTEGER NOT NULL,
    strategy TEXT NOT NULL,
    seed INTEGER NOT NULL,
    status TEXT NOT NULL,
    accuracy REAL, accuracy_low REAL, accuracy_high REAL,
    balanced_accuracy REAL, macro_f1 REAL, log_loss REAL,
    per_class_recall TEXT,
    params TEXT,
    tuning TEXT,
    n_unlabeled_used INTEGER,
    n_eval INTEGER, fold INTEGER,
    seconds REAL, tune_seconds REAL, fit_seconds REAL,
    error TEXT,
    finished_at REAL NOT NULL,
    attempts INTEGER NOT NULL DEFAULT 1,
    cell_key TEXT,
    PRIMARY KEY (method, n_labels, repeat, strategy)
);
"""

#: Columns of the cells table, in order.
CELL_COLUMNS = (
    "method", "n_labels", "repeat", "strategy", "seed", "status", "accuracy", "accuracy_low",
    "accuracy_high", "balanced_accuracy", "macro_f1", "log_loss", "per_class_recall", "params",
    "tuning", "n_unlabeled_used", "n_eval", "fold", "seconds", "tune_seconds", "fit_seconds",
    "error", "finished_at", "attempts", "cell_key",
)


class Store:
    """Create-or-resume access to ``study.sqlite``.

    Parameters
    ----------
    path : Path
        The SQLite file.
    fingerprint : str
        The study's settings fingerprint (what invalidates every cell); an existing store
        with another is refused.
    state : str, optional
        The study's full fingerprint (its state: settings, cells and added labels), kept in
        the meta table as ``fingerprint``.
    restart : bool
        Discard whatever the store holds and start again.
    """

    def __init__(self, path: str | Path, fingerprint: str, *, state: str | None = None,
                 restart: bool = False) -> None:
        self.path = Path(path)
        self.path.parent.mkdir(parents=True, exist_ok=True)
        if restart and self.path.exists():
            self.path.unlink()
        try:
            self._con = sqlite3.connect(self.path, timeout=30)
            self._con.executescript(_SCHEMA)
        except sqlite3.DatabaseError as exc:
            raise StoreError(
                f"{self.path} is not a usable study store ({exc}); use a new --out or --restart"
            ) from None
        old = self.get_meta("settings_fingerprint")
        if old is None and self.get_meta("fingerprint") is not None:
            raise StoreError(
                f"{self.path.parent} holds a study of an earlier semisup release (its cells "
                "carry no content keys); use a new --out or --restart to discard it"
            )
        if old is None:
            self.set_meta("settings_fingerprint", fingerprint)
            self.set_meta("created_at", repr(time.time()))
        elif old != fingerprint:
            raise StoreError(
                f"{self.path.parent} holds a study with a different spec (settings fingerprint "
                f"{old[:12]} vs {fingerprint[:12]}: the table, protocol, seed, trials or "
                "unsupervised stage changed, which changes every cell); use a new --out or "
                "--restart to discard it"
            )
        self.set_meta("fingerprint", fingerprint if state is None else state)
        self.fingerprint = fingerprint

    def close(self) -> None:
        self._con.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # -------------------------------------------------------------- meta
    def get_meta(self, key: str) -> str | None:
        row = self._con.execute("SELECT value FROM meta WHERE key = ?", (key,)).fetchone()
        return None if row is None else row[0]

    def set_meta(self, key: str, value: str) -> None:
        with self._con:
            self._con.execute(
                "INSERT INTO meta (key, value) VALUES (?, ?) "
                "ON CONFLICT(key) DO UPDATE SET value = excluded.value",
                (key, value),
            )

    # -------------------------------------------------------------- cells
    def statuses(self) -> dict[tuple[str, int, int, str], tuple[str, str | None]]:
        """``(method, n_labels, repeat, strategy) -> (status, cell key)`` of every row."""
        rows = self._con.execute(
            "SELECT method, n_labels, repeat, strategy, status, cell_key FROM cells")
        return {(m, int(b), int(r), s): (st, k) for m, b, r, s, st, k in rows}

    def put(self, result: dict[str, Any]) -> None:
        """Insert or replace one cell and commit at once."""
        row = dict(result)
        for key in ("per_class_recall", "params", "tuning"):
            if row.get(key) is not None and not isinstance(row[key], str):
                row[key] = json.dumps(row[key], sort_keys=True)
        row.setdefault("finished_at", time.time())
        key = (row["method"], row["n_labels"], row["repeat"], row["strategy"])
        prev = self._con.execute(
            "SELECT attempts FROM cells WHERE method=? AND n_labels=? AND repeat=? AND strategy=?",
            key,
        ).fetchone()
        row["attempts"] = 1 if prev is None else int(prev[0]) + 1
        cols = [c for c in CELL_COLUMNS if c in row]
        marks = ", ".join("?" for _ in cols)
        with self._con:
            self._con.execute(
                f"INSERT OR REPLACE INTO cells ({', '.join(cols)}) VALUES ({marks})",
                [row[c] for c in cols],
            )

    def cells(self, keys: set[str] | None = None) -> pd.DataFrame:
        """The stored rows; with ``keys``, only the rows whose content key is among them
        (the cells of the current design: a row of a larger or older design stays in the
        store, to be kept if that design comes back, but is not exported)."""
        frame = pd.read_sql_query(
            f"SELECT {', '.join(CELL_COLUMNS)} FROM cells "
            "ORDER BY method, strategy, n_labels, repeat",
            self._con,
        )
        if keys is not None:
            frame = frame[frame["cell_key"].isin(keys)].reset_index(drop=True)
        return frame
