"""Reading tables (CSV, TSV, Parquet, .xlsx; text tables compressed with gzip, bz2, xz or
zstd by extension) and kind-override files, with one-line errors.

Input files are only ever opened for reading. The label and id columns are read as text with
only empty cells missing: ``None``, ``NA``, ``null`` or ``NaN`` there are values (class
labels, ids), not pandas' missing markers.
"""

from __future__ import annotations

import bz2
import codecs
import csv
import gzip
import hashlib
import io
import itertools
import logging
import lzma
import os
import re
import zlib
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any

import numpy as np
import pandas as pd

from .._errors import DataError

__all__ = ["KIND_OVERRIDES", "MISSING_TEXTS", "check_kinds", "file_sha256", "is_text_table",
           "read_kind_overrides", "read_table", "read_table_chunks"]

log = logging.getLogger(__name__)

#: Kinds a user may force on a column (``--kind COL=KIND`` or a TOML ``[kinds]`` table).
KIND_OVERRIDES = ("numeric", "categorical", "drop", "text")


def check_kinds(kinds: Mapping[Any, Any], label: Callable[[Any, Any], str], *,
                error: type[Exception] = DataError) -> dict[str, str]:
    """``kinds`` (column -> kind) as a plain dict, or one ``error`` line for the first kind a
    user may not force: ``label(column, kind)`` (e.g. ``"--kind a='numbers'"``), then "is not
    a kind" and the kinds allowed. The one check of column kind overrides: the TOML reader,
    the loader, the kind inference and the study spec use it."""
    out: dict[str, str] = {}
    for column, kind in kinds.items():
        if not isinstance(kind, str) or kind not in KIND_OVERRIDES:
            raise error(f"{label(column, kind)} is not a kind; allowed: "
                        f"{', '.join(KIND_OVERRIDES)}")
        out[str(column)] = kind
    return out

_PARQUET_SUFFIXES = {".parquet", ".pq", ".parq"}
_EXCEL_SUFFIXES = {".xlsx", ".xlsm"}
_JSON_SUFFIXES = {".json", ".jsonl", ".ndjson"}
#: File-name endings of compressed text tables -> pandas' compression names.
_COMPRESSIONS = {".gz": "gzip", ".gzip": "gzip", ".bz2": "bz2", ".xz": "xz", ".zst": "zstd",
                 ".zstd": "zstd"}
#: First bytes of files that are not text tables -> what they are and what to do.
_MAGIC = (
    (b"PK\x03\x04", "a ZIP archive (an .xlsx workbook is one)",
     "if it is a workbook, name it .xlsx; otherwise unpack it"),
    (b"\x1f\x8b", "gzip-compressed", "name it with a .gz ending (e.g. table.csv.gz)"),
    (b"\x28\xb5\x2f\xfd", "zstd-compressed", "name it with a .zst ending (e.g. table.csv.zst)"),
    (b"\xfd7zXZ\x00", "xz-compressed", "name it with a .xz ending (e.g. table.csv.xz)"),
    (b"PAR1", "a Parquet file", "name it with a .parquet ending"),
    (b"SQLite format 3\x00", "an SQLite database", "export the table to CSV or Parquet"),
    (b"\xd0\xcf\x11\xe0", "an old Excel (.xls) or other OLE document",
     "save it as .xlsx or CSV"),
    (b"\x89PNG\r\n\x1a\n", "a PNG image", "give the table file, not a picture of it"),
    (b"\xff\xd8\xff", "a JPEG image", "give the table file, not a picture of it"),
    (b"GIF8", "a GIF image", "give the table file, not a picture of it"),
    (b"%PDF-", "a PDF document", "export the table to CSV or Parquet"),
    (b"\x7fELF", "a program (ELF executable)", "give the table file"),
)
#: The start of a JSON document (an object with a key, or an array of values): no CSV header
#: starts like this.
_JSON_START = re.compile(r'\A\s*(\{\s*("|\})|\[\s*(\{|\[|"|-?\d|\]))')
#: Cell texts pandas reads as missing by default; used for feature columns only.
try:
    from pandas._libs.parsers import STR_NA_VALUES as _PANDAS_NA
except ImportError:  # pragma: no cover - the list pandas documents for read_csv
    _PANDAS_NA = {"", "#N/A", "#N/A N/A", "#NA", "-1.#IND", "-1.#QNAN", "-NaN", "-nan",
                  "1.#IND", "1.#QNAN", "<NA>", "N/A", "NA", "NULL", "NaN", "None", "n/a",
                  "nan", "null"}
MISSING_TEXTS = frozenset(_PANDAS_NA)
_DELIMITER_CANDIDATES = (",", ";", "\t", "|")
_SNIFF_BYTES = 256 * 1024
_DELIMITER_NAMES = {",": "','", ";": "';'", "\t": "'\\t' (tab)", "|": "'|'"}


def _delim_name(delimiter: str) -> str:
    return _DELIMITER_NAMES.get(delimiter, repr(delimiter))


def _delim_flag(delimiter: str) -> str:
    return "--delimiter '\\t'" if delimiter == "\t" else f"--delimiter '{delimiter}'"


def file_sha256(path: str | os.PathLike[str], chunk_bytes: int = 1 << 20) -> str:
    """SHA-256 hex digest of a file's bytes, read in chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:  # noqa: PTH123
        for chunk in iter(lambda: handle.read(chunk_bytes), b""):
            digest.update(chunk)
    return digest.hexdigest()


def _check_file(path: Path) -> None:
    if not path.exists():
        raise DataError(f"{path}: file not found (current folder {Path.cwd()}); check the path")
    if path.is_dir():
        raise DataError(f"{path}: is a folder, not a table; give the path of a .csv, .tsv or "
                        ".parquet file")
    if path.stat().st_size == 0:
        raise DataError(f"{path}: file is empty (0 bytes); export the table again with a header "
                        "row and data rows")


def _normalise_encoding(path: Path, encoding: str | None) -> str:
    name = encoding or "utf-8"
    try:
        codec = codecs.lookup(name)
    except LookupError:
        raise DataError(f"{path}: unknown text encoding {name!r}; pass a Python codec name such "
                        "as --encoding utf-8, latin-1 or cp1252") from None
    # A byte-order mark at the start of a UTF-8 file is not part of the first column's name.
    return "utf-8-sig" if codec.name == "utf-8" else codec.name


def _decode_error(path: Path, encoding: str, exc: UnicodeDecodeError,
                  position_known: bool = True) -> DataError:
    bad = exc.object[exc.start:exc.start + 1].hex() if exc.object else "??"
    label = "utf-8" if encoding == "utf-8-sig" else encoding
    at = f" at byte {exc.start}" if position_known else ""
    return DataError(
        f"{path}: cannot be decoded as {label} (byte 0x{bad}{at}); "
        "re-save the file as UTF-8 or pass the right --encoding (e.g. latin-1 or cp1252)"
    )


def _sniff_delimiter(sample: str) -> str | None:
    """The candidate delimiter that splits the sample's lines into the same number (>1) of
    fields, preferring more fields; ``None`` if no candidate splits the header."""
    lines = sample.splitlines()
    if len(sample) >= _SNIFF_BYTES and len(lines) > 1:
        lines = lines[:-1]  # the last line of a truncated sample may be cut short
    lines = [line for line in lines if line.strip()][:200]
    if not lines:
        return None
    best: tuple[int, int, str] | None = None
    for delim in _DELIMITER_CANDIDATES:
        try:
            rows = list(csv.reader(lines, delimiter=delim))
        except csv.Error:
            continue
        counts = [len(r) for r in rows]
        if counts[0] < 2:
            continue
        consistent = sum(c == counts[0] for c in counts)
        score = (consistent, counts[0], delim)
        if best is None or score[:2] > best[:2]:
            best = score
    return None if best is None else best[2]


def _compression_errors() -> tuple[type[BaseException], ...]:
    errors: list[type[BaseException]] = [OSError, EOFError, zlib.error, lzma.LZMAError]
    try:
        import zstandard

        errors.append(zstandard.ZstdError)
    except ImportError:
        pass
    return tuple(errors)


def _open_bytes(path: Path, compression: str | None) -> IO[bytes]:
    """The file's (decompressed) bytes as a binary stream."""
    if compression is None:
        return open(path, "rb")  # noqa: PTH123, SIM115
    if compression == "gzip":
        return gzip.open(path, "rb")
    if compression == "bz2":
        return bz2.open(path, "rb")
    if compression == "xz":
        return lzma.open(path, "rb")
    try:
        import zstandard
    except ImportError:
        raise DataError(f"{path}: reading zstd-compressed tables needs the optional package "
                        "zstandard; install it with pip install 'semisup[zstd]' (or "
                        "pip install zstandard), or decompress the file first") from None
    return zstandard.open(path, "rb")


def _compression_error(path: Path, compression: str, exc: BaseException) -> DataError:
    return DataError(
        f"{path}: cannot be decompressed as {compression} ({type(exc).__name__}: "
        f"{str(exc).strip().splitlines()[0] if str(exc).strip() else 'damaged data'}); "
        f"check that the file is complete, or rename it without the "
        f"{path.suffix} ending if it is not compressed"
    )


def _check_magic(path: Path, raw: bytes, compression: str | None,
                 encoding_given: bool = False, encoding: str = "") -> None:
    """Refuse binary files named like text tables, with what they look like."""
    for magic, what, fix in _MAGIC:
        if raw.startswith(magic):
            inside = " after decompression" if compression else ""
            raise DataError(f"{path}: looks like {what} by its first bytes{inside}, not a "
                            f"text table; {fix}")
    for bom, name in ((b"\xff\xfe", "utf-16"), (b"\xfe\xff", "utf-16")):
        if raw.startswith(bom) and not encoding_given:
            raise DataError(f"{path}: starts with a UTF-16 byte-order mark; pass --encoding "
                            f"{name} or re-save the file as UTF-8")
    head = raw[:4096]
    if b"\x00" in head and not any(w in encoding for w in ("16", "32")):
        # text in utf-8, latin-1 or cp1252 has no zero bytes; another encoding would be named
        raise DataError(f"{path}: holds zero bytes at its start, so it is a binary file (an "
                        "image, archive or program), not a text table; give the table's CSV, "
                        "TSV, Parquet or .xlsx file")


def _iter_records(path: Path, compression: str | None, enc: str,
                  delimiter: str) -> Iterator[tuple[int, int]]:
    """(line number where the record ends, field count) of every non-blank record."""
    with _open_bytes(path, compression) as raw, io.TextIOWrapper(
        raw, encoding=enc, newline="", errors="replace"
    ) as text:
        reader = csv.reader(text, delimiter=delimiter)
        for row in reader:
            if not row or (len(row) == 1 and not row[0].strip()):
                continue  # pandas skips blank lines
            yield reader.line_num, len(row)


#: Bytes per block of the quote-free field count (bounds its memory to ~10x this).
_COUNT_BLOCK = 1 << 22


def _fast_field_counts(path: Path, compression: str | None, enc: str,
                       delimiter: str) -> np.ndarray | None:
    """(line number, field count) rows of every non-blank line, counted with numpy, for a file
    without any quote character in a single-byte-safe encoding; None when that does not
    hold (the caller falls back to the csv module)."""
    if codecs.lookup(enc).name not in ("utf-8", "utf-8-sig", "iso8859-1", "cp1252", "ascii"):
        return None
    delim, quote = ord(delimiter), ord('"')
    out: list[np.ndarray] = []
    lines_before = 0
    with _open_bytes(path, compression) as handle:
        rest = b""
        while True:
            block = handle.read(_COUNT_BLOCK)
            data = rest + block
            if not block:
                if data and not data.endswith(b"\n"):
                    data += b"\n"
                rest = b""
            else:
                cut = data.rfind(b"\n") + 1
                data, rest = data[:cut], data[cut:]
            if data:
                arr = np.frombuffer(data, dtype=np.uint8)
                if (arr == quote).any():
                    return None
                ends = np.flatnonzero(arr == 10)
                starts = np.concatenate(([0], ends[:-1] + 1))
                counts = np.add.reduceat(arr == delim, starts, dtype=np.int64) + 1
                length = ends - starts - (arr[np.maximum(ends - 1, 0)] == 13)
                if ((counts == 1) & (length > 0)).any():
                    return None  # a one-field line: maybe white space pandas skips
                keep = length > 0
                numbers = np.arange(lines_before + 1, lines_before + 1 + len(ends))
                out.append(np.stack([numbers[keep], counts[keep]], axis=1))
                lines_before += len(ends)
            if not block:
                break
    return np.concatenate(out) if out else np.zeros((0, 2), dtype=np.int64)


def _record_lengths(path: Path, layout: _TextLayout) -> np.ndarray:
    """(line number, field count) of every data record (the header's record dropped)."""
    table = _fast_field_counts(path, layout.compression, layout.enc, layout.delimiter)
    if table is None:
        table = np.asarray(list(_iter_records(path, layout.compression, layout.enc,
                                              layout.delimiter)),
                           dtype=np.int64).reshape(-1, 2)
    return table[1:]  # the first non-blank line is the header


def _check_row_lengths(path: Path, frame: pd.DataFrame, layout: _TextLayout, *,
                       first_row: int = 0,
                       records: dict[str, np.ndarray] | None = None) -> None:
    """Refuse rows shorter than the header (pandas pads them, losing their last cells -- the
    label, often). Only rows whose last cell is missing can be short, so a table without
    such cells is not scanned again.

    Without ``records`` the frame is the whole table; a chunk passes its first row's position
    and a dict that keeps the file's field counts between chunks.
    """
    if frame.shape[1] < 2 or not frame.iloc[:, -1].isna().any():
        return
    cache = {} if records is None else records
    if "lengths" not in cache:
        cache["lengths"] = _record_lengths(path, layout)
    lengths = cache["lengths"]
    if (records is None and len(lengths) != len(frame)) \
            or len(lengths) < first_row + len(frame):
        log.debug("%s: %d records by field count, %d rows by pandas; row lengths not "
                  "checked", path, len(lengths), first_row + len(frame))
        return
    part = lengths[first_row:first_row + len(frame)]
    n_header = len(layout.header)
    short = np.flatnonzero(part[:, 1] < n_header)
    if short.size:
        raise DataError(
            f"{path}: line {int(part[short[0], 0])} has {int(part[short[0], 1])} field(s) but "
            f"the header has {n_header} ({int(short.size)} short row(s) in all); its last "
            "cells, the label among them, would be lost, so add the missing fields (empty "
            "ones are fine: a,b,) or quote values that contain the delimiter"
        )


@dataclass(frozen=True)
class _TextLayout:
    """What the checks of a text table found: its encoding, delimiter and header, and the
    ``pandas.read_csv`` arguments that read it (the whole file or chunk by chunk)."""

    enc: str
    delimiter: str
    header: list[str]
    compression: str | None
    read_args: dict[str, Any] = field(default_factory=dict)


def _text_layout(path: Path, delimiter: str | None, encoding: str | None,
                 text_columns: Sequence[str], compression: str | None = None) -> _TextLayout:
    """Check the first bytes of a text table (magic numbers, JSON, blank file, delimiter,
    duplicate header names) and return how to read it."""
    enc = _normalise_encoding(path, encoding)
    errors = _compression_errors()
    try:
        with _open_bytes(path, compression) as handle:
            raw = handle.read(_SNIFF_BYTES)
    except DataError:
        raise
    except errors as exc:
        if compression is None:
            raise DataError(f"{path}: cannot be read ({exc}); check the file's permissions")\
                from None
        raise _compression_error(path, compression, exc) from None
    if not raw:
        raise DataError(f"{path}: holds no data after decompression; export the table again")
    _check_magic(path, raw, compression, encoding_given=encoding is not None, encoding=enc)
    try:
        sample = raw.decode(enc)
    except UnicodeDecodeError as exc:
        if exc.end < len(raw) - 4:  # not just a multi-byte character cut by the sample edge
            raise _decode_error(path, enc, exc) from None
        sample = raw[:exc.start].decode(enc)
    if not sample.strip():
        raise DataError(f"{path}: file holds only blank space; export the table again with a "
                        "header row and data rows")
    inner_suffix = Path(path.stem).suffix.lower() if compression else path.suffix.lower()
    stripped_sample = sample.lstrip()
    if (inner_suffix not in (".csv", ".tsv", ".txt") and stripped_sample[:1] in ("{", "[")) \
            or _JSON_START.match(sample):
        raise DataError(f"{path}: looks like JSON, not a delimited text table; convert it to "
                        "CSV or Parquet first (e.g. pandas.read_json(...).to_csv(...))")

    if delimiter is None:
        if inner_suffix == ".tsv":
            delimiter = "\t"
        else:
            delimiter = _sniff_delimiter(sample) or ","
            log.debug("%s: sniffed delimiter %s", path, _delim_name(delimiter))
    elif delimiter in ("\\t", "tab", "TAB"):
        delimiter = "\t"
    if len(delimiter) != 1:
        raise DataError(f"{path}: delimiter {delimiter!r} must be a single character; pass e.g. "
                        "--delimiter ';'")
    if delimiter in ('"', "\n", "\r"):
        raise DataError(f"{path}: delimiter {delimiter!r} cannot separate fields; pass e.g. "
                        "--delimiter ';'")

    first_line = next((line for line in sample.splitlines() if line.strip()), "")
    try:  # the header as pandas sees it: the first non-blank record (quoted line breaks too)
        header = next(row for row in csv.reader(io.StringIO(sample), delimiter=delimiter)
                      if row and not (len(row) == 1 and not row[0].strip()))
    except (csv.Error, StopIteration):
        header = [first_line]
    if len(header) == 1:
        others = [d for d in _DELIMITER_CANDIDATES if d != delimiter and d in first_line]
        if others:
            raise DataError(
                f"{path}: the header splits into one column with delimiter "
                f"{_delim_name(delimiter)} but contains {_delim_name(others[0])}; "
                f"wrong delimiter, pass {_delim_flag(others[0])}"
            )
    seen: dict[str, int] = {}
    for position, name in enumerate(header, start=1):
        key = name.strip()
        if key in seen:
            raise DataError(
                f"{path}: columns {seen[key]} and {position} are both named {key!r}; rename one "
                "so every column name is unique"
            )
        seen[key] = position

    # The label and id columns keep every text as written (only an empty cell is missing);
    # feature columns use pandas' usual missing markers (NA, null, ...).
    wanted = {c for c in text_columns if c}
    text_raw = [name for name in header if name.strip() in wanted]
    na_values = {name: ([""] if name in text_raw else sorted(MISSING_TEXTS)) for name in header}
    return _TextLayout(enc=enc, delimiter=delimiter, header=header, compression=compression,
                       read_args={"sep": delimiter, "encoding": enc, "compression": compression,
                                  "dtype": {c: str for c in text_raw}, "keep_default_na": False,
                                  "na_values": na_values, "skipinitialspace": False,
                                  "low_memory": False})


@contextmanager
def _text_read_errors(path: Path, layout: _TextLayout) -> Iterator[None]:
    """Turn pandas' and the decompressors' exceptions while reading into one-line errors."""
    errors = _compression_errors()
    try:
        yield
    except UnicodeDecodeError as exc:  # past the sniffed sample: pandas' offset is per chunk
        raise _decode_error(path, layout.enc, exc, position_known=False) from None
    except pd.errors.EmptyDataError:
        raise DataError(f"{path}: no columns found; export the table again with a header row")\
            from None
    except pd.errors.ParserError as exc:
        detail = str(exc).strip().splitlines()[-1]
        raise DataError(
            f"{path}: rows do not split into the same number of fields with delimiter "
            f"{_delim_name(layout.delimiter)} ({detail}); quote values that contain the "
            "delimiter or pass the right --delimiter"
        ) from None
    except errors as exc:
        if layout.compression is None:
            raise
        raise _compression_error(path, layout.compression, exc) from None


def _check_index(path: Path, frame: pd.DataFrame, layout: _TextLayout,
                 first_row: int = 0) -> None:
    if not frame.index.equals(pd.RangeIndex(first_row, first_row + len(frame))):
        # pandas takes the first column(s) as the index when every row is longer than the
        # header: the cells would shift under the wrong names.
        n_fields = len(layout.header) + frame.index.nlevels
        raise DataError(
            f"{path}: the data rows have {n_fields} fields but the header names only "
            f"{len(layout.header)}; add the missing column name(s) to the header, or remove "
            "the delimiter that ends every row"
        )
    if first_row == 0 and len(frame):
        # pandas does the same when only the first data row is longer, and its index can
        # then look like row positions (first cells 0, 1, ...): count that row's fields.
        records = itertools.islice(_iter_records(path, layout.compression, layout.enc,
                                                 layout.delimiter), 2)
        line, n_fields = list(records)[-1]
        if n_fields > len(layout.header):
            raise DataError(
                f"{path}: line {line} has {n_fields} fields but the header names only "
                f"{len(layout.header)}; quote values that contain the delimiter, add the "
                "missing column name(s) to the header, or pass the right --delimiter"
            )


def _read_text(path: Path, delimiter: str | None, encoding: str | None,
               text_columns: Sequence[str], compression: str | None = None) -> pd.DataFrame:
    layout = _text_layout(path, delimiter, encoding, text_columns, compression)
    with _text_read_errors(path, layout):
        frame = pd.read_csv(path, **layout.read_args)
    _check_index(path, frame, layout)
    _check_row_lengths(path, frame, layout)
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def _nested_column(schema) -> tuple[str, str] | None:
    import pyarrow as pa

    for item in schema:
        kind = item.type
        if pa.types.is_dictionary(kind):
            kind = kind.value_type
        if pa.types.is_nested(kind) or pa.types.is_binary(kind) or \
                pa.types.is_large_binary(kind) or pa.types.is_fixed_size_binary(kind):
            return item.name, str(item.type)
    return None


def _check_parquet_schema(path: Path) -> None:
    """Refuse an unreadable Parquet file, duplicate column names and nested columns."""
    try:
        import pyarrow.parquet as pq

        schema = pq.read_schema(path)
        names = schema.names
    except Exception as exc:  # noqa: BLE001  (pyarrow raises several types for a bad file)
        raise DataError(f"{path}: not a readable Parquet file ({type(exc).__name__}); check the "
                        "file, or give a .csv/.tsv file instead") from None
    seen: dict[str, int] = {}
    for position, name in enumerate(names, start=1):
        if name in seen:
            raise DataError(f"{path}: columns {seen[name]} and {position} are both named "
                            f"{name!r}; rename one so every column name is unique")
        seen[name] = position
    nested = _nested_column(schema)
    if nested is not None:
        raise DataError(
            f"{path}: column {nested[0]!r} holds nested or binary values ({nested[1]}), which "
            "cannot be features; flatten it into plain columns (numbers or text) or leave it "
            "out of the file"
        )


def _read_parquet(path: Path) -> pd.DataFrame:
    _check_parquet_schema(path)
    import pyarrow.parquet as pq

    try:
        # self_destruct frees each Arrow column once converted: peak memory ~1 copy, not 2.
        table = pq.read_table(path)
        frame = table.to_pandas(self_destruct=True, split_blocks=True)
        del table
    except Exception as exc:  # noqa: BLE001
        raise DataError(f"{path}: Parquet file cannot be read ({type(exc).__name__}: {exc}); "
                        "write it again with pandas or pyarrow") from None
    frame.columns = [str(c) for c in frame.columns]
    return frame


def _read_excel(path: Path, text_columns: Sequence[str]) -> pd.DataFrame:
    """First sheet of an .xlsx workbook; the first row is the header."""
    try:
        import openpyxl  # noqa: F401
    except ImportError:
        raise DataError(f"{path}: reading .xlsx workbooks needs the optional package openpyxl; "
                        "install it with pip install 'semisup[excel]' (or pip install "
                        "openpyxl), or save the sheet as CSV") from None
    try:
        raw = pd.read_excel(path, sheet_name=0, header=None, engine="openpyxl",
                            keep_default_na=False, na_values=[""], dtype=object)
    except Exception as exc:  # noqa: BLE001  (openpyxl / zipfile raise several types)
        raise DataError(f"{path}: not a readable .xlsx workbook ({type(exc).__name__}); "
                        "save it again from the spreadsheet, or as CSV") from None
    if raw.shape[0] == 0:
        raise DataError(f"{path}: the first sheet is empty; put the table (header row first) "
                        "on the first sheet")
    header = raw.iloc[0].tolist()
    names: list[str] = []
    seen: dict[str, int] = {}
    for position, name in enumerate(header, start=1):
        if name is None or (isinstance(name, float) and name != name):
            raise DataError(f"{path}: column {position} of the first sheet has no name in the "
                            "header row; give every column a name")
        key = str(name).strip()
        if key in seen:
            raise DataError(f"{path}: columns {seen[key]} and {position} are both named {key!r}; "
                            "rename one so every column name is unique")
        seen[key] = position
        names.append(key)
    frame = raw.iloc[1:].reset_index(drop=True)
    frame.columns = names
    wanted = {c for c in text_columns if c}
    for column in names:
        if column in wanted:
            continue
        series = frame[column]
        # Feature cells such as "NA" mean missing, as in a CSV file.
        frame[column] = series.where(~series.isin(MISSING_TEXTS), None).infer_objects()
    return frame


def _table_format(path: Path) -> tuple[str, str | None]:
    """("text" | "parquet" | "excel", compression) from the file name; DataError for a
    format that is not a table."""
    suffix = path.suffix.lower()
    compression = _COMPRESSIONS.get(suffix)
    inner = Path(path.stem).suffix.lower() if compression else suffix
    if inner in _PARQUET_SUFFIXES or inner in _EXCEL_SUFFIXES:
        if compression:
            raise DataError(f"{path}: a compressed {inner} file is not read (the format "
                            f"compresses itself); decompress it and give the {inner} file")
        return ("parquet" if inner in _PARQUET_SUFFIXES else "excel"), None
    if inner == ".xls":
        raise DataError(f"{path}: old .xls workbooks are not read; save the sheet as .xlsx or "
                        "CSV")
    if inner in _JSON_SUFFIXES:
        raise DataError(f"{path}: JSON is not a table format semisup reads; convert it to CSV "
                        "or Parquet first (e.g. pandas.read_json(...).to_csv(...))")
    return "text", compression


def is_text_table(path: str | os.PathLike[str]) -> bool:
    """True when ``path`` is read as delimited text (messages then name lines, not rows)."""
    try:
        return _table_format(Path(path))[0] == "text"
    except DataError:
        return True


def read_table(
    path: str | os.PathLike[str],
    *,
    delimiter: str | None = None,
    encoding: str | None = None,
    text_columns: Sequence[str] = (),
) -> pd.DataFrame:
    """Read a CSV, TSV, Parquet or .xlsx table into a DataFrame.

    Parameters
    ----------
    path : path-like
        ``.parquet`` / ``.pq`` files are read as Parquet, ``.xlsx`` as a workbook (first
        sheet; needs openpyxl), everything else as delimited text. A text table may be
        compressed: ``.gz``, ``.bz2``, ``.xz``, ``.zst`` (needs zstandard) after its name.
    delimiter : str, optional
        Field separator of a text file; sniffed from the first lines when omitted (``.tsv``
        means tab). A one-column header that contains another common separator is reported
        as a wrong delimiter.
    encoding : str, optional
        Text encoding (default UTF-8, a byte-order mark is skipped).
    text_columns : sequence of str
        Columns kept as text exactly as written (label and id columns: ``007`` stays ``007``,
        ``NA`` and ``None`` stay values); only an empty cell is missing there.

    Raises
    ------
    DataError
        Missing or empty file, undecodable bytes, wrong delimiter, ragged or short rows,
        duplicate column names, unreadable Parquet, nested Parquet columns, a binary file
        named like a text table, JSON, a damaged compressed file.
    """
    path = Path(path)
    _check_file(path)
    kind, compression = _table_format(path)
    if kind == "parquet":
        frame = _read_parquet(path)
    elif kind == "excel":
        frame = _read_excel(path, text_columns)
    else:
        frame = _read_text(path, delimiter, encoding, text_columns, compression)
    log.debug("%s: read %d rows x %d columns", path, frame.shape[0], frame.shape[1])
    return frame


def read_table_chunks(
    path: str | os.PathLike[str],
    *,
    chunk_rows: int,
    delimiter: str | None = None,
    encoding: str | None = None,
    text_columns: Sequence[str] = (),
) -> Iterator[pd.DataFrame]:
    """Read a table as :func:`read_table` does, ``chunk_rows`` rows at a time.

    The same formats, checks and one-line errors as :func:`read_table` (a check that needs
    the whole file, such as short rows, runs when a chunk needs it); the same cells are
    missing. Memory is bounded by the chunk (a Parquet file: by its row groups; a workbook is
    read whole, then handed out in chunks). Each chunk keeps the table's row positions as its
    index start.
    """
    path = Path(path)
    _check_file(path)
    kind, compression = _table_format(path)
    if kind == "excel":
        frame = _read_excel(path, text_columns)
        for first in range(0, max(len(frame), 1), chunk_rows):
            yield frame.iloc[first:first + chunk_rows]
        return
    if kind == "parquet":
        _check_parquet_schema(path)
        import pyarrow.parquet as pq

        try:
            batches = pq.ParquetFile(path).iter_batches(batch_size=chunk_rows)
            for batch in batches:
                frame = batch.to_pandas()
                frame.columns = [str(c) for c in frame.columns]
                yield frame
        except Exception as exc:  # noqa: BLE001  (pyarrow raises several types)
            raise DataError(f"{path}: Parquet file cannot be read ({type(exc).__name__}: "
                            f"{exc}); write it again with pandas or pyarrow") from None
        return
    layout = _text_layout(path, delimiter, encoding, text_columns, compression)
    records: dict[str, np.ndarray] = {}
    first = 0
    with _text_read_errors(path, layout):
        for frame in pd.read_csv(path, chunksize=chunk_rows, **layout.read_args):
            _check_index(path, frame, layout, first)
            _check_row_lengths(path, frame, layout, first_row=first, records=records)
            frame.columns = [str(c).strip() for c in frame.columns]
            first += len(frame)
            yield frame


def read_kind_overrides(path: str | os.PathLike[str]) -> dict[str, str]:
    """Read column-kind overrides from the ``[kinds]`` table of a TOML file.

    ``[kinds]`` maps column names to one of numeric, categorical, drop, text::

        [kinds]
        zip_code = "categorical"
        comment = "text"
    """
    try:
        import tomllib
    except ModuleNotFoundError:  # Python 3.10
        import tomli as tomllib  # type: ignore[no-redef]

    path = Path(path)
    _check_file(path)
    try:
        with open(path, "rb") as handle:  # noqa: PTH123
            doc = tomllib.load(handle)
    except tomllib.TOMLDecodeError as exc:
        raise DataError(f"{path}: not valid TOML ({exc}); fix the syntax, e.g. "
                        "[kinds] then lines like  col = \"categorical\"") from None
    except UnicodeDecodeError:
        raise DataError(f"{path}: TOML files must be UTF-8; re-save it as UTF-8") from None
    kinds = doc.get("kinds")
    if kinds is None:
        raise DataError(f"{path}: no [kinds] table; add one with lines like  col = \"numeric\"")
    if not isinstance(kinds, dict):
        raise DataError(f"{path}: 'kinds' must be a table ([kinds]) of column = kind lines")
    return check_kinds(kinds, lambda column, kind: f"{path}: [kinds] {column} = {kind!r}")

