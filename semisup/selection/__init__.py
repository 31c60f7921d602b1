"""Which rows to label next: random, representative and uncertainty strategies."""

from __future__ import annotations

from ._strategies import (
    STRATEGIES,
    Selection,
    acquisition_order,
    margins,
    select_rows,
    stratified_order,
)

__all__ = [
    "STRATEGIES",
    "Selection",
    "acquisition_order",
    "margins",
    "select_rows",
    "stratified_order",
]
