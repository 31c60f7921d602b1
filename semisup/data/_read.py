"""Reading tables (CSV, TSV, Parquet) and kind-override files, with one-line errors.

Input files are only ever opened for reading.
"""

from __future__ import annotations

import codecs
import csv
import hashlib
import logging
import os
from collections.abc import Sequence
from pathlib import Path

import pandas as pd

from .._errors import DataError

__all__ = ["KIND_OVERRIDES", "file_sha256", "read_kind_overrides", "read_table"]

log = logging.getLogger(__name__)

#: Kinds a user may force on a column (``--kind COL=KIND`` or a TOML ``[kinds]`` table).
KIND_OVERRIDES = ("numeric", "categorical", "drop", "text")

_PARQUET_SUFFIXES = {".parquet", ".pq", ".parq"}
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


def _read_text(path: Path, delimiter: str | None, encoding: str | None,
               text_columns: Sequence[str]) -> pd.DataFrame:
    enc = _normalise_encoding(path, encoding)
    with open(path, "rb") as handle:  # noqa: PTH123
        raw = handle.read(_SNIFF_BYTES)
    try:
        sample = raw.decode(enc)
    except UnicodeDecodeError as exc:
        if exc.end < len(raw) - 4:  # not just a multi-byte character cut by the sample edge
            raise _decode_error(path, enc, exc) from None
        sample = raw[:exc.start].decode(enc)
    if not sample.strip():
        raise DataError(f"{path}: file holds only blank space; export the table again with a "
                        "header row and data rows")

    if delimiter is None:
        if path.suffix.lower() == ".tsv":
            delimiter = "\t"
        else:
            delimiter = _sniff_delimiter(sample) or ","
            log.debug("%s: sniffed delimiter %s", path, _delim_name(delimiter))
    elif delimiter in ("\\t", "tab", "TAB"):
        delimiter = "\t"
    if len(delimiter) != 1:
        raise DataError(f"{path}: delimiter {delimiter!r} must be a single character; pass e.g. "
                        "--delimiter ';'")

    first_line = next((line for line in sample.splitlines() if line.strip()), "")
    header = next(csv.reader([first_line], delimiter=delimiter))
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

    try:
        frame = pd.read_csv(
            path,
            sep=delimiter,
            encoding=enc,
            dtype={c: str for c in text_columns if c},
            skipinitialspace=False,
            low_memory=False,
        )
    except UnicodeDecodeError as exc:  # past the sniffed sample: pandas' offset is per chunk
        raise _decode_error(path, enc, exc, position_known=False) from None
    except pd.errors.EmptyDataError:
        raise DataError(f"{path}: no columns found; export the table again with a header row")\
            from None
    except pd.errors.ParserError as exc:
        detail = str(exc).strip().splitlines()[-1]
        raise DataError(
            f"{path}: rows do not split into the same number of fields with delimiter "
            f"{_delim_name(delimiter)} ({detail}); quote values that contain the delimiter or "
            "pass the right --delimiter"
        ) from None
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def _read_parquet(path: Path) -> pd.DataFrame:
    try:
        import pyarrow.parquet as pq

        names = pq.read_schema(path).names
    except Exception as exc:  # noqa: BLE001  (pyarrow raises several types for a bad file)
        raise DataError(f"{path}: not a readable Parquet file ({type(exc).__name__}); check the "
                        "file, or give a .csv/.tsv file instead") from None
    seen: dict[str, int] = {}
    for position, name in enumerate(names, start=1):
        if name in seen:
            raise DataError(f"{path}: columns {seen[name]} and {position} are both named "
                            f"{name!r}; rename one so every column name is unique")
        seen[name] = position
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


def read_table(
    path: str | os.PathLike[str],
    *,
    delimiter: str | None = None,
    encoding: str | None = None,
    text_columns: Sequence[str] = (),
) -> pd.DataFrame:
    """Read a CSV, TSV or Parquet table into a DataFrame.

    Parameters
    ----------
    path : path-like
        ``.parquet`` / ``.pq`` files are read as Parquet; everything else as delimited text.
    delimiter : str, optional
        Field separator of a text file; sniffed from the first lines when omitted (``.tsv``
        means tab). A one-column header that contains another common separator is reported
        as a wrong delimiter.
    encoding : str, optional
        Text encoding (default UTF-8, a byte-order mark is skipped).
    text_columns : sequence of str
        Columns kept as text exactly as written (label and id columns: ``007`` stays ``007``).

    Raises
    ------
    DataError
        Missing or empty file, undecodable bytes, wrong delimiter, ragged rows, duplicate
        column names, unreadable Parquet.
    """
    path = Path(path)
    _check_file(path)
    if path.suffix.lower() in _PARQUET_SUFFIXES:
        frame = _read_parquet(path)
    else:
        frame = _read_text(path, delimiter, encoding, text_columns)
    log.debug("%s: read %d rows x %d columns", path, frame.shape[0], frame.shape[1])
    return frame


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
    out: dict[str, str] = {}
    for column, kind in kinds.items():
        if not isinstance(kind, str) or kind not in KIND_OVERRIDES:
            raise DataError(f"{path}: [kinds] {column} = {kind!r} is not a kind; use one of "
                            f"{', '.join(KIND_OVERRIDES)}")
        out[str(column)] = kind
    return out

