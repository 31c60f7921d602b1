"""Human text for the report: labels for the data card's keys and formatted numbers.

Pure formatting of values read from the study folder's files; no new statistic is computed.
Nothing here escapes HTML: ``_html.py`` escapes every piece where it enters the page.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence

from ..plan import DASH, money, percent
from ..plan import as_number as _number
from ._html import Table

__all__ = [
    "card_rows",
    "columns_table",
    "count",
    "imbalance_text",
    "money",
    "num",
    "pairs",
    "percent",
    "short",
    "span",
    "warning_text",
]


def num(v: object, digits: int = 3) -> str:
    """A metric or other real number with ``digits`` decimals; missing as an en dash."""
    x = _number(v)
    return DASH if x is None else f"{x:,.{digits}f}"


def count(v: object) -> str:
    """A whole number with thousands separators."""
    x = _number(v)
    return DASH if x is None else f"{round(x):,}"


def span(low: object, high: object, digits: int = 3) -> str:
    """A measured interval as "0.947\u20130.994" (an en dash, the notation of every interval
    in the report and the plan's text)."""
    if _number(low) is None and _number(high) is None:
        return DASH
    return f"{num(low, digits)}{DASH}{num(high, digits)}"


def _bytes(v: object) -> str:
    x = _number(v)
    if x is None:
        return DASH
    for unit in ("bytes", "KB", "MB", "GB"):
        if x < 1000 or unit == "GB":
            return f"{x:,.0f} {unit}" if unit == "bytes" else f"{x:,.1f} {unit}"
        x /= 1000
    return DASH  # pragma: no cover


def short(v: object, limit: int = 160) -> str:
    """Readable text of any value (see :func:`_plain`), shortened to ``limit`` characters."""
    text = _plain(v)
    return text if len(text) <= limit else text[: limit - 1] + "\u2026"


def _plain(v: object, depth: int = 0) -> str:
    """Text of a value without JSON punctuation: mappings as "key: value; ...", lists joined
    with commas, floats to four significant digits."""
    if v is None:
        return DASH
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return f"{v:,}"
    if isinstance(v, float):
        return DASH if math.isnan(v) else f"{v:.4g}"
    if isinstance(v, str):
        return v
    if isinstance(v, Mapping):
        if not v:
            return "none"
        inner = "; " if depth == 0 else ", "
        return inner.join(f"{_label(k)} {_plain(x, depth + 1)}" if isinstance(x, Mapping)
                          else f"{_label(k)}: {_plain(x, depth + 1)}" for k, x in v.items())
    if isinstance(v, (list, tuple)):
        if not v:
            return "none"
        if all(isinstance(x, Mapping) for x in v):
            return " | ".join(f"({_plain(x, depth + 1)})" for x in v[:12]) + (
                f" | ... {len(v) - 12} more" if len(v) > 12 else "")
        return ", ".join(_plain(x, depth + 1) for x in v[:30]) + (
            f", ... ({len(v)} in all)" if len(v) > 30 else "")
    return str(v)


_ACRONYMS = {"elbo": "ELBO", "rmse": "RMSE", "bic": "BIC", "vae": "VAE", "em": "EM",
             "cv": "CV", "id": "id"}


def _label(key: object) -> str:
    words = str(key).replace("_", " ").split(" ")
    return " ".join(_ACRONYMS.get(w.lower(), w) for w in words)


_SAME_SIDES = re.compile(r"(?<![\d.])(\d+\.\d+) ([<>]) \1(?![\d.])")


def warning_text(text: object) -> str:
    """A warning as a sentence: first letter capitalised, and a comparison whose two sides
    print alike after rounding ("0.020 > 0.020") said in words."""
    def words(m: re.Match) -> str:
        side = "above" if m.group(2) == ">" else "below"
        return f"{m.group(1)}, just {side} a limit that also rounds to {m.group(1)}"

    out = _SAME_SIDES.sub(words, str(text))
    return out[:1].upper() + out[1:]


def pairs(d: Mapping, limit: int = 30, prefix: str = "", depth: int = 0) -> list[list[str]]:
    """Label / value rows of a mapping: nested mappings become "outer > inner" labels (three
    levels), anything deeper readable text."""
    rows: list[list[str]] = []
    for key, value in d.items():
        if len(rows) >= limit:
            rows.append(["\u2026", "more in the JSON file"])
            break
        name = f"{prefix}{_label(key)}"
        if isinstance(value, int) and not isinstance(value, bool) and "seed" in str(key):
            rows.append([name, str(value)])  # a seed is a name, not a quantity
        elif isinstance(value, Mapping) and value and depth < 2:
            rows.extend(pairs(value, limit - len(rows), f"{name} \u203a ", depth + 1))
        else:
            rows.append([name, short(value, 300)])
    return rows[: limit + 1]


# Data card keys: (label, formatter); None hides a key shown elsewhere in the report.
_CARD = {
    "source": ("table file", None),
    "sha256": ("SHA-256 of the file", lambda v: f"{str(v)[:16]}\u2026"),
    "size_bytes": ("file size", _bytes),
    "n_rows": ("rows", count),
    "n_columns": ("columns", count),
    "n_encoded_features": ("model inputs after encoding", count),
    "label_column": ("label column", str),
    "id_column": ("id column", lambda v: DASH if v is None else str(v)),
    "n_labeled": ("labeled rows in the table", count),
    "labeled_fraction": ("labeled share of the rows", lambda v: percent(v, 1)),
    "imbalance_ratio": ("largest / smallest labeled class",
                        lambda v: f"{num(v, 2)} times"),
    "duplicate_rows": ("duplicate rows", count),
    "duplicate_feature_rows_conflicting_labels": (
        "rows with identical features but different labels", count),
    "duplicate_ids": ("repeated ids", count),
    "leakage_note": ("label leakage check", str),
}
_CARD_HIDDEN = {"imbalance_note", "caution", "recommended_metric"}


def card_rows(card: Mapping) -> list[list[str]]:
    """Label / value rows of the data card's scalar entries, in the card's order."""
    rows = []
    for key, value in card.items():
        if key in _CARD_HIDDEN or not (value is None or isinstance(value, (str, int, float))):
            continue
        if key == "source":
            rows.append(["table file", str(value).replace("\\", "/").rsplit("/", 1)[-1]])
            continue
        label, formatter = _CARD.get(key, (_label(key), None))
        rows.append([label, formatter(value) if formatter else short(value, 300)])
    return rows


def imbalance_text(card: Mapping) -> str:
    """The card's class-balance finding in words, from its ratio and the card's threshold."""
    ratio = _number(card.get("imbalance_ratio"))
    if ratio is None:
        return ""
    from ..data import IMBALANCE_RATIO

    if ratio >= IMBALANCE_RATIO:
        return (f"Imbalanced labels: the largest labeled class has {num(ratio, 1)} times the "
                "rows of the smallest. Read balanced accuracy or macro-F1, not only accuracy, "
                "and check that the small classes get enough labels.")
    return (f"Roughly balanced labels: the largest labeled class has {num(ratio, 2)} times the "
            f"rows of the smallest (the card flags imbalance at {IMBALANCE_RATIO:g} times or "
            "more).")


_COLUMN_FIELDS = (("name", "column", str), ("kind", "kind", str),
                  ("dtype", "stored as", str), ("missing", "missing cells", count),
                  ("missing_fraction", "missing share", lambda v: percent(v, 1)),
                  ("distinct", "distinct values", count))


def columns_table(columns: object, limit: int = 40) -> Table | None:
    """The card's per-column profiles as a table (columns with missing cells first when
    there are more than ``limit``)."""
    if not isinstance(columns, Sequence) or isinstance(columns, str) or not columns:
        return None
    items = [c for c in columns if isinstance(c, Mapping)]
    if not items:
        return None
    fields = [f for f in _COLUMN_FIELDS if any(f[0] in c for c in items)]
    shown = items
    note = f"all {len(items)} columns"
    if len(items) > limit:
        missing = [c for c in items if (_number(c.get("missing")) or 0) > 0]
        shown = (missing or items)[:limit]
        note = (f"{len(shown)} of {len(items)} columns"
                + (" (those with missing cells)" if missing else "") + "; all in data_card.md")
    rows = [[fmt(c.get(key)) if c.get(key) is not None else DASH for key, _, fmt in fields]
            for c in shown]
    return Table([label for _, label, _ in fields], rows, caption=note)
