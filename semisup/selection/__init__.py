"""Which rows to label next: random, representative and uncertainty strategies, and the same
strategies re-weighted towards the pool regions the labels miss (``cover_select``)."""

from __future__ import annotations

from ._cover import cover_select, density_ratio, gap_weights
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
    "cover_select",
    "density_ratio",
    "gap_weights",
    "margins",
    "select_rows",
    "stratified_order",
]
