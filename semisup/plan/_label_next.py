"""Rows to label next: the chosen selection strategy applied to the study's candidates.

The strategies themselves live in :mod:`semisup.selection`; this module only prepares the
candidates, calls ``select_rows`` and shapes the result as ``rank, row_id, reason``. When the
study found the labeled rows unlike the pool (candidates.npz then holds ``cover_score``, each
row's score of looking labeled), the same strategy is applied to the pool re-weighted towards
the regions the labels miss (``semisup.selection.cover_select``); otherwise nothing changes.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping
from typing import NamedTuple

import numpy as np
import pandas as pd

from .._escape import neutralise_frame

__all__ = ["LABEL_NEXT_COLUMNS", "Ranking", "default_select_rows", "rank_rows",
           "selection_phrase"]

log = logging.getLogger(__name__)

LABEL_NEXT_COLUMNS = ["rank", "row_id", "reason"]

SelectFn = Callable[..., object]


class Ranking(NamedTuple):
    """What :func:`rank_rows` returns: the sheet (rank, row_id, reason), the strategy used,
    warnings, and whether the rows were drawn weighted towards the pool regions the labeled
    rows miss (the study flagged them as unlike the pool)."""

    table: pd.DataFrame
    strategy: str
    warnings: list[str]
    weighted_to_pool: bool = False


def selection_phrase(strategy: str, weighted_to_pool: bool = False) -> str:
    """How the rows to label next were chosen, in the words the plan's summary and the report
    both use: ``"random selection"`` or ``"random selection, weighted towards the pool
    regions the labeled rows miss"``."""
    phrase = f"{strategy} selection"
    if weighted_to_pool:
        phrase += ", weighted towards the pool regions the labeled rows miss"
    return phrase


def default_select_rows() -> SelectFn | None:
    """``semisup.selection.select_rows`` if that module provides it, else None."""
    try:
        from ..selection import select_rows  # type: ignore[attr-defined]
    except ImportError:
        return None
    return select_rows


def _empty() -> pd.DataFrame:
    return pd.DataFrame({"rank": pd.Series(dtype=int), "row_id": pd.Series(dtype=str),
                         "reason": pd.Series(dtype=str)})


def rank_rows(
    candidates: Mapping[str, np.ndarray] | None,
    strategy: str,
    n: int,
    *,
    seed: int,
    select_rows: SelectFn | None,
) -> Ranking:
    """Rank up to ``n`` candidate rows with ``strategy``.

    Returns a :class:`Ranking`; its table has columns rank (1 = label first), row_id and
    reason. Falls back to the random strategy when the chosen one needs
    something the candidates lack (model probabilities for uncertainty).
    """
    warnings: list[str] = []
    if n <= 0:
        return Ranking(_empty(), strategy, warnings)
    if candidates is None:
        warnings.append("candidates.npz is missing from the study folder, so no rows can be "
                        "listed in label_next.csv; rerun the study to write it")
        return Ranking(_empty(), strategy, warnings)
    if select_rows is None:
        warnings.append("row selection (semisup.selection.select_rows) is not available in "
                        "this installation; label_next.csv is left empty")
        return Ranking(_empty(), strategy, warnings)
    row_ids = np.asarray(candidates["row_ids"]).astype(str)
    if row_ids.size == 0:
        warnings.append("the study has no unlabeled rows to suggest for labeling")
        return Ranking(_empty(), strategy, warnings)
    Z = candidates.get("Z")
    proba = candidates.get("proba")
    used = strategy
    if used == "uncertainty" and proba is None:
        warnings.append("candidates.npz has no model probabilities ('proba'), so the rows "
                        "are chosen at random instead of by uncertainty")
        used = "random"
    if used == "representative" and Z is None:
        warnings.append("candidates.npz has no representation ('Z'), so the rows are chosen "
                        "at random instead of by representativeness")
        used = "random"
    if Z is None:
        Z = np.zeros((row_ids.size, 1), dtype=np.float32)
    n_take = min(int(n), row_ids.size)
    if n_take < n:
        warnings.append(f"only {row_ids.size} unlabeled rows are available, fewer than the "
                        f"{n} the plan asks for; all are listed")
    cover = candidates.get("cover_score")
    cover_used = bool(cover is not None and len(cover) == row_ids.size
                      and np.all(np.isfinite(cover)))
    if cover_used:
        from ..selection import cover_select

        n_labeled = int(np.asarray(candidates.get("cover_n_labeled", 0)))
        selection = cover_select(used, np.asarray(Z), n_take, scores=np.asarray(cover),
                                 n_labeled=n_labeled, seed=seed,
                                 proba=None if proba is None else np.asarray(proba))
        warnings.append(_cover_line(candidates, used, n_take, n_labeled))
    else:
        selection = select_rows(used, np.asarray(Z), n_take, seed=seed,
                                proba=None if proba is None else np.asarray(proba),
                                exclude=None)
    indices = np.asarray(selection.indices, dtype=int)  # type: ignore[attr-defined]
    reasons = list(selection.reasons)  # type: ignore[attr-defined]
    if len(reasons) != len(indices):
        reasons = [used] * len(indices)
    # Ids like "=HYPERLINK(...)" would run as formulas when an annotator opens the sheet.
    table = neutralise_frame(pd.DataFrame({
        "rank": np.arange(1, len(indices) + 1),
        "row_id": row_ids[indices],
        "reason": [str(r) for r in reasons],
    }))
    log.debug("ranked %d rows with %s", len(table), used)
    return Ranking(table, used, warnings, weighted_to_pool=cover_used)


def _cover_line(candidates: Mapping[str, np.ndarray], used: str, n_take: int,
                n_labeled: int) -> str:
    auc = float(np.asarray(candidates.get("cover_auc", np.nan)))
    shown = f" (two-sample AUC {auc:.2f})" if np.isfinite(auc) else ""
    return (f"the labeled rows are unlike the pool{shown}, so the {n_take} rows to label next "
            f"are chosen by {used} selection weighted towards the pool regions the "
            f"{n_labeled} labels miss (label_next.csv gives each row's weight), so that, once "
            "labeled, the labeled rows look more like the pool")
