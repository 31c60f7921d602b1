"""Plans kept by name, each with the study state it was made from.

Every ``semisup plan`` run is stored in :data:`PLANS_FOLDER` of the study folder as
``<name>.json`` (the whole plan) and ``<name>.forecast.csv`` (its forecast points; the
study's ``curves.csv`` keeps the study's measured points only), where ``name`` is the UTC time
of the plan and a short id of the study state, e.g. ``20261202T034512Z-3f9a0c2b``.
``plan.json`` is a copy of the latest plan for readers that want "the plan".

The study state (:func:`study_state`) is the study's fingerprint from ``study.json`` (spec,
table and added labels) and a SHA-256 of the finished cells (method, budget, repeat,
strategy and metrics). A plan whose state differs from the folder's current one
(:func:`plan_status`) was made from another study: readers show it as stale, never as
current.
"""

from __future__ import annotations

import hashlib
import json
import re
from collections.abc import Mapping
from datetime import datetime, timezone
from pathlib import Path

import pandas as pd

from .._errors import PlanError

__all__ = ["FORECAST_SUFFIX", "PLANS_FOLDER", "PlanStatus", "current_state", "list_plans",
           "plan_name", "plan_status", "read_forecast", "read_measured", "study_state"]

#: Folder of the study folder that keeps every plan by name.
PLANS_FOLDER = "plans"
#: Suffix of a plan's forecast points beside its JSON file.
FORECAST_SUFFIX = ".forecast.csv"

_CELL_KEYS = ("method", "strategy", "n_labels", "repeat")
_CELL_METRICS = ("accuracy", "balanced_accuracy", "macro_f1", "log_loss")
_NAME = re.compile(r"^\d{8}T\d{6}(\d{6})?Z-[0-9a-f]{8}$")


def _cells_digest(cells: pd.DataFrame) -> str:
    """SHA-256 of the finished cells' keys and metrics, independent of row order."""
    if cells is None or cells.empty:
        return hashlib.sha256(b"").hexdigest()
    ok = cells
    if "status" in cells.columns:
        ok = cells[cells["status"].astype(str).str.strip().str.lower() == "ok"]
    cols = [c for c in (*_CELL_KEYS, *_CELL_METRICS) if c in ok.columns]
    part = ok[cols].copy()
    for c in ("method", "strategy"):
        if c in part.columns:
            part[c] = part[c].fillna("random" if c == "strategy" else "").astype(str)
    for c in ("n_labels", "repeat"):
        if c in part.columns:
            part[c] = pd.to_numeric(part[c], errors="coerce").astype("Int64")
    for c in _CELL_METRICS:
        if c in part.columns:
            # 12 significant digits: the same numbers read back from CSV or Parquet agree
            part[c] = pd.to_numeric(part[c], errors="coerce").map(
                lambda v: "" if pd.isna(v) else f"{float(v):.12g}")
    part = part.sort_values([c for c in _CELL_KEYS if c in part.columns], kind="stable")
    text = part.to_csv(index=False, lineterminator="\n")
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def study_state(study: Mapping, cells: pd.DataFrame) -> dict:
    """The state of a study a plan is made from (pure).

    ``fingerprint`` is study.json's (None for a folder without one), ``cells_sha256`` the
    digest of the finished cells, ``id`` the first 8 hex digits of a digest of both.
    """
    fingerprint = study.get("fingerprint") if isinstance(study, Mapping) else None
    cells_sha = _cells_digest(cells)
    key = f"{fingerprint or ''}\0{cells_sha}".encode()
    return {"fingerprint": None if fingerprint is None else str(fingerprint),
            "cells_sha256": cells_sha, "id": hashlib.sha256(key).hexdigest()[:8]}


def current_state(study_dir: str | Path) -> dict:
    """The study state of the folder now (study.json and cells.csv as they are)."""
    from ._inputs import read_cells_file, read_json

    folder = Path(study_dir)
    study = read_json(folder / "study.json")
    cells = read_cells_file(folder) if (folder / "cells.csv").is_file() else pd.DataFrame()
    return study_state(study, cells)


def plan_name(made_at: datetime, state: Mapping) -> str:
    """``<UTC time>-<state id>``: sorts by time, names the state (microseconds keep two plans
    of the same second apart)."""
    stamp = made_at.astimezone(timezone.utc).strftime("%Y%m%dT%H%M%S%fZ")
    return f"{stamp}-{state['id']}"


class PlanStatus:
    """Whether a stored plan still describes the study folder: ``stale`` and why."""

    def __init__(self, plan: Mapping | None, state: Mapping):
        recorded = (plan or {}).get("state") if isinstance(plan, Mapping) else None
        self.name = (plan or {}).get("name") if isinstance(plan, Mapping) else None
        self.recorded = recorded if isinstance(recorded, Mapping) else None
        self.current = dict(state)
        self.reason = ""
        if not plan:
            self.stale = False
        elif self.recorded is None:
            self.stale = True
            self.reason = ("it records no study state (made by an older semisup), so it cannot "
                           "be matched to the study")
        elif self.recorded.get("fingerprint") != self.current.get("fingerprint"):
            self.stale = True
            self.reason = ("the study changed since (another spec, table or added labels: "
                           "fingerprint differs)")
        elif self.recorded.get("cells_sha256") != self.current.get("cells_sha256"):
            self.stale = True
            self.reason = "the study's finished cells changed since"
        else:
            self.stale = False

    def message(self, what: str = "plan.json") -> str:
        """One line for a stale plan ('' when current)."""
        if not self.stale:
            return ""
        named = f" ({self.name})" if self.name else ""
        return (f"{what}{named} is stale: {self.reason}; run 'semisup plan' on the folder "
                "again")


def plan_status(study_dir: str | Path, plan: Mapping | None) -> PlanStatus:
    """The status of ``plan`` against the folder's current study state."""
    return PlanStatus(plan, current_state(study_dir))


def list_plans(study_dir: str | Path) -> list[dict]:
    """Every stored plan of the folder, oldest first (damaged files are skipped)."""
    folder = Path(study_dir) / PLANS_FOLDER
    if not folder.is_dir():
        return []
    out = []
    for path in sorted(folder.glob("*.json")):
        if not _NAME.match(path.stem):
            continue
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if isinstance(data, dict):
            data.setdefault("name", path.stem)
            out.append(data)
    return out


def read_forecast(study_dir: str | Path, plan: Mapping | None) -> pd.DataFrame | None:
    """The forecast points of ``plan`` (its ``forecast_file``, read and typed as curves.csv
    is), or None when absent."""
    from ..study import read_curves

    name = (plan or {}).get("forecast_file") if isinstance(plan, Mapping) else None
    if not name:
        return None
    return read_curves(Path(study_dir) / str(name), PlanError,
                       fix="run 'semisup plan' again")


def read_measured(study_dir: str | Path) -> pd.DataFrame | None:
    """The study's measured points (``curves.csv``, written by the study only; read by the
    study folder's own reader), None when the file is absent or lacks the curve columns."""
    from ..study import read_curves

    curves = read_curves(Path(study_dir) / "curves.csv", PlanError)
    if curves is None:
        return None
    return curves[curves["measured"]].reset_index(drop=True)
