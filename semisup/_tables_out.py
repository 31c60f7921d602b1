"""The one writer of tables a person may open in a spreadsheet: the annotator sheet
(``label_next.csv``), predictions (``semisup predict``), pseudo-labels (``semisup fit
--pseudo-labels``) and any other exported table of user values.

Text cells and column names that a spreadsheet would run as a formula get a leading ``'``
(:func:`semisup._escape.neutralise_cell`, the OWASP "CSV Injection" guidance): in every text
column and in every header, and in the class part of a header built from a class name
(``proba_<class>``). Numbers are written as numbers. A machine pipeline that needs the raw
values asks for them: ``raw=True`` (``--raw-cells`` on the command line) or a ``.parquet``
output, which is typed and never opened as a spreadsheet, so it is always raw.

Output is atomic (:mod:`semisup._atomic`); ``.tsv`` writes tab-separated text, ``.parquet``
/ ``.pq`` Parquet, anything else CSV.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import pandas as pd

from ._atomic import atomic_path
from ._escape import FORMULA_PREFIXES, neutralise_cell

__all__ = ["ChunkedTableWriter", "neutralise_table", "table_format", "write_table"]

# A first character that may need a quote: the formula prefixes, and "'" (an already quoted
# value gets one more quote so that restore_cell inverts it exactly).
_MAYBE = "^[" + "".join("\\" + c if c in "-\\]^" else c for c in (*FORMULA_PREFIXES, "'")) + "]"


def table_format(path: str | os.PathLike[str]) -> str:
    """``"parquet"``, ``"tsv"`` or ``"csv"`` by the file name's suffix."""
    suffix = Path(path).suffix.lower()
    return "parquet" if suffix in (".parquet", ".pq") else "tsv" if suffix == ".tsv" else "csv"


def _neutral_header(name: Any, prefixes: tuple[str, ...]) -> str:
    text = str(name)
    for prefix in prefixes:
        if text.startswith(prefix) and len(text) > len(prefix):
            return prefix + str(neutralise_cell(text[len(prefix):]))
    return str(neutralise_cell(text))


def neutralise_table(frame: pd.DataFrame, *, header_prefixes: tuple[str, ...] = ()
                     ) -> pd.DataFrame:
    """A copy of ``frame`` with every text cell and column name neutralised; a column named
    ``<prefix><value>`` for a prefix in ``header_prefixes`` keeps the prefix and has the value
    part neutralised (``proba_=X`` -> ``proba_'=X``)."""
    from pandas.api import types as ptypes

    out = frame.copy()
    for i in range(frame.shape[1]):
        series = out.iloc[:, i]
        if ptypes.is_object_dtype(series.dtype) or ptypes.is_string_dtype(series.dtype):
            text = series.where(series.map(lambda v: isinstance(v, str)), None)
            hit = text.str.contains(_MAYBE, regex=True, na=False)
            if hit.any():
                fixed = series.astype(object).copy()
                fixed[hit] = series[hit].map(neutralise_cell)
                out.isetitem(i, fixed)
        elif isinstance(series.dtype, pd.CategoricalDtype):
            out.isetitem(i, series.astype(object).map(neutralise_cell))
    out.columns = [_neutral_header(c, header_prefixes) for c in frame.columns]
    return out


def write_table(frame: pd.DataFrame, path: str | os.PathLike[str], *, raw: bool = False,
                neutralised: bool = False, header_prefixes: tuple[str, ...] = (),
                line_end: str = "\r\n") -> Path:
    """Write ``frame`` to ``path`` atomically, neutralised for spreadsheets unless ``raw`` or
    Parquet.

    Parameters
    ----------
    raw : bool
        Write text cells and names exactly as they are (for machine pipelines).
    neutralised : bool
        ``frame`` already went through :func:`neutralise_table` (or
        ``semisup._escape.neutralise_frame``); it is written as it is.
    line_end : str
        Line end of text output: CRLF (RFC 4180) by default, so the csv writer quotes a cell
        that holds a lone CR and every spreadsheet reads the rows back whole.
    """
    fmt = table_format(path)
    if fmt == "parquet":
        with atomic_path(path) as tmp:
            frame.to_parquet(tmp, index=False)
        return Path(path)
    if not (raw or neutralised):
        frame = neutralise_table(frame, header_prefixes=header_prefixes)
    with atomic_path(path) as tmp:
        frame.to_csv(tmp, index=False, sep="\t" if fmt == "tsv" else ",",
                     lineterminator=line_end, encoding="utf-8")
    return Path(path)


class ChunkedTableWriter:
    """Append DataFrame chunks of one schema to an open binary handle as CSV, TSV or Parquet
    (pyarrow's writers: its CSV writer is ~10x faster than pandas' ``to_csv`` and writes
    floats that read back exactly). Text chunks are neutralised unless ``raw``."""

    def __init__(self, handle: Any, fmt: str, *, raw: bool = False,
                 header_prefixes: tuple[str, ...] = ()):
        self.handle, self.fmt = handle, fmt
        self.raw = raw or fmt == "parquet"
        self.header_prefixes = header_prefixes
        self._writer: Any = None
        self._schema: Any = None

    def write(self, frame: pd.DataFrame) -> None:
        import pyarrow as pa

        if not self.raw:
            frame = neutralise_table(frame, header_prefixes=self.header_prefixes)
        table = pa.Table.from_pandas(frame, preserve_index=False)
        if self._writer is None:
            if self.fmt == "parquet":
                import pyarrow.parquet as pq

                self._writer = pq.ParquetWriter(self.handle, table.schema)
            else:
                import pyarrow.csv as pcsv

                options = pcsv.WriteOptions(delimiter="\t" if self.fmt == "tsv" else ",",
                                            quoting_style="needed")
                self._writer = pcsv.CSVWriter(self.handle, table.schema,
                                              write_options=options)
            self._schema = table.schema
        self._writer.write_table(table.cast(self._schema))

    def close(self) -> None:
        if self._writer is not None:
            self._writer.close()
            self._writer = None
