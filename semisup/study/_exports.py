"""Study folder exports, all written atomically: cells.csv/.parquet, curves.csv, study.json,
candidates.npz, the data card."""

from __future__ import annotations

import io
import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._atomic import atomic_path, atomic_write_bytes, atomic_write_text
from ._integrity import EXPORTS_KEY, export_digests
from ._metrics import summarize_curves

__all__ = [
    "FIXED_CELL_COLUMNS", "cells_frame", "write_candidates", "write_candidates_arrays",
    "write_data_card", "write_exports",
]

#: cells.csv columns fixed by DEVELOPERS.md (extras follow them).
FIXED_CELL_COLUMNS = (
    "method", "n_labels", "repeat", "strategy", "status", "accuracy", "balanced_accuracy",
    "macro_f1", "log_loss", "seconds", "error",
)
_EXTRA_COLUMNS = (
    "n_eval", "fold", "accuracy_low", "accuracy_high", "per_class_recall", "seed", "params",
    "tuning_note", "n_unlabeled_used", "tune_seconds", "fit_seconds",
)


def cells_frame(stored: pd.DataFrame, class_names: list[str]) -> pd.DataFrame:
    """The store's cells as the cells.csv table (class names in per-class recall, no clocks)."""
    frame = stored.copy()

    def recall(text: Any) -> Any:
        if not isinstance(text, str):
            return None
        raw = sorted(json.loads(text).items(), key=lambda kv: int(kv[0]))
        return json.dumps({class_names[int(k)]: v for k, v in raw})

    def note(text: Any) -> Any:
        return json.loads(text).get("note") if isinstance(text, str) else None

    frame["per_class_recall"] = frame["per_class_recall"].map(recall)
    frame["tuning_note"] = frame["tuning"].map(note)
    cols = list(FIXED_CELL_COLUMNS) + list(_EXTRA_COLUMNS)
    frame = frame[cols]
    frame = frame.sort_values(["method", "strategy", "n_labels", "repeat"], kind="stable")
    return frame.reset_index(drop=True)


def _csv_text(frame: pd.DataFrame) -> str:
    buf = io.StringIO()
    frame.to_csv(buf, index=False, float_format="%.10g", lineterminator="\n")
    return buf.getvalue()


def write_exports(
    out_dir: Path,
    cells: pd.DataFrame,
    metrics: tuple[str, ...],
    info: dict[str, Any],
) -> dict[str, Path]:
    """Write cells.csv, cells.parquet, curves.csv and study.json; return their paths."""
    out_dir = Path(out_dir)
    paths = {
        "cells_csv": out_dir / "cells.csv",
        "cells_parquet": out_dir / "cells.parquet",
        "curves_csv": out_dir / "curves.csv",
        "study_json": out_dir / "study.json",
    }
    cells_text = _csv_text(cells)
    atomic_write_text(paths["cells_csv"], cells_text)
    with atomic_path(paths["cells_parquet"]) as tmp:
        cells.to_parquet(tmp, index=False)
    curves = summarize_curves(cells, metrics, evaluation=info.get("evaluation"))
    curves_text = _csv_text(curves)
    atomic_write_text(paths["curves_csv"], curves_text)
    # plan, report and fit check these before reading the files (study/_integrity.py)
    info[EXPORTS_KEY] = export_digests({"cells.csv": cells_text, "curves.csv": curves_text})
    atomic_write_text(paths["study_json"],
                      json.dumps(info, indent=2, sort_keys=False, default=_json_default) + "\n")
    return paths


def write_candidates(path: Path, row_ids, representation, proba, *, method, n_labels,
                     class_names, representation_kind) -> Path:
    """candidates.npz: unlabeled row ids, their representation, the best method's proba."""
    return write_candidates_arrays(path, {
        "row_ids": np.asarray(row_ids, dtype=str),
        "representation": np.asarray(representation, dtype=np.float32),
        "proba": np.asarray(proba, dtype=np.float32),
        "class_names": np.asarray(class_names, dtype=str),
        "method": np.asarray(method or ""),
        "n_labels": np.asarray(n_labels, dtype=np.int64),
        "representation_kind": np.asarray(representation_kind),
    })


def write_candidates_arrays(path: Path, arrays: dict[str, np.ndarray]) -> Path:
    """candidates.npz from named arrays, written atomically."""
    buf = io.BytesIO()
    np.savez_compressed(buf, **arrays)
    return atomic_write_bytes(path, buf.getvalue())


def write_data_card(out: Path, spec: Any, injected: bool, info: dict) -> Any:
    """data_card.md / .json beside the exports (not when the dataset was given directly);
    returns the DataCard, or None when none was written."""
    if injected or not Path(spec.data).is_file():
        info.setdefault("notes", []).append("data card not written (dataset given directly)")
        return None
    try:
        from ..data import TableSource, write_card
    except ImportError:
        info.setdefault("notes", []).append("data card not written (semisup.data.make_card "
                                            "unavailable)")
        return None
    card = TableSource.of(spec).card()
    write_card(card, Path(out) / "data_card.md")
    return card


def _json_default(obj: Any) -> Any:
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.floating,)):
        return float(obj)
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    return str(obj)
