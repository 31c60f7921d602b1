"""predict_file: score a CSV / TSV / Parquet table chunk by chunk with a fitted model.

Memory stays bounded by ``chunk_rows``: rows are read, checked, encoded, scored and written
one chunk at a time into a temporary file that is renamed onto ``out`` only when every chunk
succeeded (an error leaves no partial output). The input file is only read, and ``out``
may be neither an input nor inside a model folder (:func:`semisup._paths.check_output`).
Text output goes through the one spreadsheet-safe writer (:mod:`semisup._tables_out`):
formula-like ids and class names get a leading ``'`` unless ``raw_cells`` (or Parquet).
"""

from __future__ import annotations

import logging
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .._atomic import atomic_path
from .._errors import ConfigError, DataError
from .._paths import check_output
from .._tables_out import ChunkedTableWriter, table_format
from ..data import as_text, is_text_table, read_table_chunks
from ._model import FittedModel
from ._prepare import InputCounts, check_columns

__all__ = ["DEFAULT_CHUNK_ROWS", "PredictSummary", "predict_file"]

log = logging.getLogger(__name__)

DEFAULT_CHUNK_ROWS = 100_000
_SAME_AS_MODEL = object()


@dataclass
class PredictSummary:
    """What :func:`predict_file` did."""

    out: Path
    n_rows: int
    n_flagged: int
    predicted: dict[str, int]
    mean_top_probability: float
    inputs: InputCounts
    ignored_columns: list[str] = field(default_factory=list)
    seconds: float = 0.0

    def to_dict(self) -> dict[str, Any]:
        return {"out": str(self.out), "n_rows": self.n_rows, "n_flagged": self.n_flagged,
                "predicted": self.predicted, "mean_top_probability": self.mean_top_probability,
                "inputs": self.inputs.to_dict(), "ignored_columns": self.ignored_columns,
                "seconds": self.seconds}

    def summary(self) -> str:
        lines = [f"predicted {self.n_rows} rows in {self.seconds:.1f} s -> {self.out}"]
        if self.n_rows:
            share = ", ".join(f"{k} {v}" for k, v in sorted(self.predicted.items(),
                                                            key=lambda kv: -kv[1])[:8])
            lines.append(f"classes: {share}; mean top probability "
                         f"{self.mean_top_probability:.3f}")
            lines.append(f"{self.n_flagged} rows ({self.n_flagged / self.n_rows:.1%}) flagged as "
                         "unlike the training data (out_of_distribution)")
        for column, n in sorted(self.inputs.missing.items()):
            lines.append(f"column {column!r}: {n} missing cells filled as in training")
        for column, n in sorted(self.inputs.unseen.items()):
            ex = ", ".join(repr(v) for v in self.inputs.unseen_examples.get(column, []))
            lines.append(f"column {column!r}: {n} cells with values training never kept (e.g. "
                         f"{ex}) encoded as '(other)'")
        if self.ignored_columns:
            lines.append(f"ignored columns the model does not use: "
                         f"{', '.join(map(repr, self.ignored_columns[:8]))}")
        return "\n".join(lines)


def _ids(frame: pd.DataFrame, id_column: str | None, first_row: int, source: str,
         text_file: bool) -> np.ndarray:
    if id_column is None:
        return np.arange(first_row, first_row + len(frame)).astype(str).astype(object)
    ids = as_text(frame[id_column])
    missing = ids.isna().to_numpy()
    if missing.any():
        row = first_row + int(np.flatnonzero(missing)[0])
        where = f"line {row + 2}" if text_file else f"row {row} (0-based)"
        raise DataError(f"{source}: id column {id_column!r} is empty at {where}; give every row "
                        "an id or pass --id-column '' to number the rows")
    return ids.to_numpy(dtype=object)


def predict_file(
    model: FittedModel,
    data: str | os.PathLike[str],
    out: str | os.PathLike[str],
    *,
    id_column: Any = _SAME_AS_MODEL,
    delimiter: str | None = None,
    encoding: str | None = None,
    chunk_rows: int = DEFAULT_CHUNK_ROWS,
    raw_cells: bool = False,
) -> PredictSummary:
    """Score every row of ``data`` and write the prediction table to ``out``.

    Output columns: ``row_id``, ``predicted``, ``proba_<class>`` per class, ``top_probability``,
    ``density_score`` and ``out_of_distribution``. ``out`` ending in ``.parquet`` writes
    Parquet, ``.tsv`` tab-separated text, anything else CSV.

    Parameters
    ----------
    id_column : str or None, optional
        Column of row ids; default: the training table's id column (row numbers when it had
        none); ``None`` or ``""`` numbers the rows from 0.
    chunk_rows : int
        Rows read and scored at a time (memory is bounded by this).
    raw_cells : bool
        Write ids and class names exactly as they are in CSV / TSV output; by default a cell
        or header a spreadsheet would run as a formula gets a leading ``'`` (Parquet output
        is always raw).

    Raises
    ------
    DataError
        A missing feature or id column, a changed column kind, empty or duplicate ids, an
        unreadable table.
    """
    t0 = time.perf_counter()
    data, out = Path(data), Path(out)
    if isinstance(chunk_rows, bool) or not isinstance(chunk_rows, int) or chunk_rows < 1:
        raise ConfigError(f"--chunk-rows {chunk_rows!r} is not allowed; give a whole number "
                          ">= 1, e.g. 100000")
    check_output(out, option="--out", inputs={"the input table": data,
                                              "the model folder": getattr(model, "path", None)})
    if id_column is _SAME_AS_MODEL:
        id_column = model.manifest.get("id_column")
        required = id_column is not None
    else:
        id_column = id_column or None
        required = id_column is not None
    fmt = table_format(out)
    source = str(data)
    text_file = is_text_table(data)
    counts = InputCounts()
    predicted = np.zeros(len(model.classes), dtype=np.int64)
    n_rows = n_flagged = 0
    top_sum = 0.0
    seen_ids: set = set()
    ignored: list[str] = []
    checked = False
    text_columns = (id_column,) if id_column else ()
    with atomic_path(out) as tmp:
        with open(tmp, "wb") as handle:  # noqa: PTH123
            writer = ChunkedTableWriter(handle, fmt, raw=raw_cells, header_prefixes=("proba_",))
            try:
                for frame in read_table_chunks(data, chunk_rows=chunk_rows,
                                               delimiter=delimiter, encoding=encoding,
                                               text_columns=text_columns):
                    if not checked:
                        checked = True
                        check_columns(frame.columns, model.schema, source=source,
                                      id_column=id_column, id_required=required)
                        used = set(model.schema) | set(model.encoder.feature_names_in_)
                        ignored = [c for c in frame.columns if c not in used
                                   and c not in (id_column, model.manifest.get("label_column"))]
                    if not len(frame):
                        continue
                    ids = _ids(frame, id_column, n_rows, source, text_file)
                    if id_column is not None:
                        _check_unique(ids, seen_ids, id_column, source)
                    X = model.encode(frame, counts, source=source, text_file=text_file,
                                     first_row=n_rows)
                    result = model.output_frame(ids, X)
                    writer.write(result)
                    top = np.argmax(result.iloc[:, 2:2 + len(model.classes)].to_numpy(), axis=1)
                    predicted += np.bincount(top, minlength=len(model.classes))
                    n_flagged += int(result["out_of_distribution"].sum())
                    top_sum += float(result["top_probability"].sum())
                    n_rows += len(frame)
                    log.info("predicted %d rows", n_rows)
            finally:
                writer.close()
        if n_rows == 0:
            raise DataError(f"{source}: the table has a header but no data rows; give rows to "
                            "predict")
    return PredictSummary(
        out=out, n_rows=n_rows, n_flagged=n_flagged,
        predicted={c: int(n) for c, n in zip(model.classes, predicted, strict=True)},
        mean_top_probability=top_sum / n_rows, inputs=counts, ignored_columns=ignored,
        seconds=time.perf_counter() - t0,
    )


def _check_unique(ids: np.ndarray, seen: set, id_column: str, source: str) -> None:
    """Refuse an id repeated in this chunk or seen in an earlier one; ``seen`` grows."""
    values = ids.tolist()
    chunk = set(values)
    if len(chunk) != len(values) or not chunk.isdisjoint(seen):
        here: set = set()
        for value in values:
            if value in here or value in seen:
                raise DataError(f"{source}: id column {id_column!r} has duplicate id {value!r}; "
                                "make ids unique or pass --id-column '' to number the rows")
            here.add(value)
    seen |= chunk
