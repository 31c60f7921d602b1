"""Escaping of user-supplied text written into outputs: spreadsheet cells and Markdown.

Pure functions, no I/O. Column names, class labels, row ids and cell values come from the
user's table and are written into ``label_next.csv`` (opened in spreadsheets) and the data
card (rendered as Markdown, often to HTML). Two rules keep them inert there:

- :func:`neutralise_cell`: a cell that a spreadsheet would read as a formula (it starts with
  ``=``, ``+``, ``-``, ``@``, a tab or a carriage return) gets a leading single quote, as the
  OWASP "CSV Injection" guidance advises; plain numbers such as ``-3.5`` are left alone,
  since a spreadsheet reads them as numbers, never as formulas.
- :func:`markdown_text`: HTML special characters become entities and Markdown punctuation is
  backslash-escaped (CommonMark allows a backslash before any ASCII punctuation), so no
  backtick, ``|``, ``*`` or tag can end a code span, split a table cell or start live HTML.
  Control characters (line breaks in a quoted CSV header, say) are shown as ``\\uXXXX``.
"""

from __future__ import annotations

import re
from typing import Any

__all__ = ["FORMULA_PREFIXES", "markdown_text", "neutralise_cell", "neutralise_frame",
           "restore_cell"]

#: First characters that make a spreadsheet treat a cell as a formula (OWASP CSV Injection).
FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")

_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")
# Markdown punctuation that changes meaning in the middle of a line: escapes, code spans,
# emphasis, links and images ('[' opens both), table cells, strike-through. '#', '+', '-',
# '.' only matter at the start of a line, where escaped text is never put; '<' and '>' become
# entities.
_MD_SPECIAL = re.compile(r"([\\`*_\[\]|~])")
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029]")
_HTML = {"&": "&amp;", "<": "&lt;", ">": "&gt;", '"': "&quot;"}


def _needs_quote(value: str) -> bool:
    if not value:
        return False
    if value[0] in FORMULA_PREFIXES:
        return not _PLAIN_NUMBER.fullmatch(value)
    # a value that already looks neutralised gets one more quote, so restore_cell inverts
    return value[0] == "'" and _needs_quote(value[1:])


def neutralise_cell(value: Any) -> Any:
    """``value`` with a leading ``'`` if a spreadsheet would run it as a formula.

    Non-strings (numbers, None, NaN) are returned unchanged; so are strings that are plain
    numbers (``-3``, ``+1.5e3``). :func:`restore_cell` gives the original back.
    """
    if isinstance(value, str) and _needs_quote(value):
        return "'" + value
    return value


def restore_cell(value: Any) -> Any:
    """The value :func:`neutralise_cell` was given (for ids read back from a returned sheet)."""
    if isinstance(value, str) and value[:1] == "'" and _needs_quote(value[1:]):
        return value[1:]
    return value


def neutralise_frame(frame: Any) -> Any:
    """A copy of a pandas DataFrame with every text cell and column name neutralised."""
    from pandas.api import types as ptypes

    out = frame.copy()
    for column in out.columns:
        series = out[column]
        if ptypes.is_object_dtype(series.dtype) or ptypes.is_string_dtype(series.dtype):
            out[column] = series.map(neutralise_cell).astype(object)
    out.columns = [neutralise_cell(str(c)) for c in out.columns]
    return out


def markdown_text(value: Any) -> str:
    """``str(value)`` made safe as literal text inside a Markdown line or table cell."""
    text = str(value)
    text = _CONTROL.sub(lambda m: f"\\u{ord(m.group(0)):04x}", text)
    text = "".join(_HTML.get(ch, ch) for ch in text)
    # '&' of the entities above is not Markdown punctuation, so entities survive this step.
    return _MD_SPECIAL.sub(r"\\\1", text)
