"""One cell: tune, fit and evaluate one method at one budget, repeat and strategy.

``run_cell`` is a pure function of the shared :class:`CellContext` and the cell key, so the
same cell gives the same numbers on any worker of any backend.
"""

from __future__ import annotations

import hashlib
import json
import logging
import sys
import time
import traceback
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .._seeding import derive_seed
from ..methods import NeighbourCache, align_proba
from ._metrics import holdout_metrics
from ._representations import method_features
from ._tuning import fit_method, tune_params

__all__ = ["CELL_CODE_VERSION", "Cell", "CellContext", "cell_key", "cell_seed", "large_cell",
           "run_cell"]

#: Version of what a cell computes (this module, _tuning.py, _metrics.py): raise it when a
#: change there changes a cell's numbers, so stored cells are measured again.
CELL_CODE_VERSION = 1
#: Version of what a large cell (:func:`large_cell`) does differently; in the key of such
#: cells only, so the cells of small tables keep their keys.
LARGE_CELL_VERSION = 1

log = logging.getLogger(__name__)


@dataclass(frozen=True, order=True)
class Cell:
    """Key of one cell."""

    method: str
    n_labels: int
    repeat: int
    strategy: str


def cell_seed(study_seed: int, cell: Cell) -> int:
    return derive_seed(study_seed, cell.method, cell.n_labels, cell.repeat, cell.strategy)


@dataclass
class CellContext:
    """Everything a worker needs; shipped once per worker (or scattered once on Dask).

    ``features[kind]`` holds every row of the table (and of a test file) in representation
    ``kind`` (raw / vae / mixture); repeat ``r`` trains on draws from ``pools[f]`` and is
    evaluated on ``evals[f]`` with ``f = repeat_fold[r]``; ``orders[(strategy, repeat)]`` is
    the acquisition order into that pool.
    """

    features: dict[str, np.ndarray]
    y: np.ndarray
    pools: dict[int, np.ndarray]
    evals: dict[int, np.ndarray]
    repeat_fold: dict[int, int]
    unlabeled_idx: np.ndarray
    orders: dict[tuple[str, int], np.ndarray]
    methods: dict[str, Any]
    n_classes: int
    seed: int
    trials: int
    cv_folds: int
    max_unlabeled: int
    transductive: bool
    extra: dict[str, Any] = field(default_factory=dict)


def _unlabeled_rows(ctx: CellContext, fold: int, draw: np.ndarray,
                    seed: int) -> tuple[np.ndarray, bool]:
    """Rows a semi-supervised method sees without labels: the unlabeled rows, the pool rows not
    in the draw (labels not yet bought) and, when transductive, the evaluation rows; capped and
    seeded. Returns ``(rows, capped)``; ``capped`` is :func:`large_cell`'s rule."""
    not_drawn = np.setdiff1d(ctx.pools[fold], draw, assume_unique=True)
    parts = [ctx.unlabeled_idx, not_drawn]
    if ctx.transductive:
        parts.append(ctx.evals[fold])
    rows = np.sort(np.concatenate(parts))
    capped = large_cell(len(rows) + len(draw), len(draw), ctx.max_unlabeled)
    if capped:
        rng = np.random.default_rng(derive_seed(seed, "unlabeled-sample"))
        rows = np.sort(rng.choice(rows, size=ctx.max_unlabeled, replace=False))
    return rows, capped


def large_cell(n_seen: int, n_labels: int, max_unlabeled: int) -> bool:
    """The large-cell rule: more rows to see unlabeled (``n_seen``, the fold's set of
    :func:`_unlabeled_rows` before the draw of ``n_labels`` rows is taken out) than the cap
    ``max_unlabeled``. Such a cell fits its folds, trials and final model on the same rows in
    the same order and searches each neighbour graph once (``semisup.study._tuning``); below
    the cap a cell runs as it always did, so small tables keep their numbers."""
    return n_seen - n_labels > max_unlabeled


def _array_digest(h, a: np.ndarray) -> None:
    a = np.ascontiguousarray(a, dtype=np.int64)
    h.update(str(a.shape).encode())
    h.update(a.tobytes())


def _method_identity(method: Any) -> list[str]:
    def where(fn: Any) -> str:
        return f"{getattr(fn, '__module__', '')}.{getattr(fn, '__qualname__', repr(fn))}"

    return [method.name, method.representation, str(bool(method.semi_supervised)),
            json.dumps(method.default_params, sort_keys=True, default=str),
            where(method.search_space), where(method.build)]


def _seen_unlabeled_digest(ctx: CellContext, fold: int, memo: dict) -> tuple[str, int]:
    """Digest and size of the rows a semi-supervised cell of ``fold`` may see unlabeled
    before its draw is taken out and the cap applied (see :func:`_unlabeled_rows`): the
    unlabeled rows, the fold's pool and, when transductive, its evaluation rows, as one
    sorted set."""
    if fold not in memo:
        parts = [ctx.unlabeled_idx, ctx.pools[fold]]
        if ctx.transductive:
            parts.append(ctx.evals[fold])
        h = hashlib.sha256(f"{ctx.transductive}:{ctx.max_unlabeled}".encode())
        seen = np.unique(np.concatenate(parts))
        _array_digest(h, seen)
        memo[fold] = (h.hexdigest(), len(seen))
    return memo[fold]


def _draw(ctx: CellContext, cell: Cell, fold: int) -> np.ndarray:
    """The cell's training rows: the first ``n_labels`` of its repeat's acquisition order into
    the fold's pool (what :func:`run_cell` trains on and :func:`cell_key` hashes)."""
    return ctx.pools[fold][ctx.orders[(cell.strategy, cell.repeat)][: cell.n_labels]]


def cell_key(ctx: CellContext, cell: Cell, representation_key: str,
             class_names: list[str], memo: dict | None = None) -> str:
    """A digest of everything the cell's numbers depend on.

    The method's identity and the code version, the representation's own key, the classes,
    the tuning settings, the cell's seed, the training rows and their labels, the evaluation
    rows and their labels, and for a semi-supervised method the rows it sees unlabeled (the
    fold's set less the draw, capped with the cell's seed: the set's digest, the cap and the
    draw decide them). A stored cell with the same key measures the same thing and is kept;
    any difference runs it again, so "unchanged" is checked, never assumed. ``memo`` keeps
    the per-fold digests between calls.
    """
    fold = ctx.repeat_fold[cell.repeat]
    method = ctx.methods[cell.method]
    seed = cell_seed(ctx.seed, cell)
    draw = _draw(ctx, cell, fold)
    eval_idx = ctx.evals[fold]
    h = hashlib.sha256()
    h.update(json.dumps([CELL_CODE_VERSION, _method_identity(method), representation_key,
                         list(class_names), ctx.n_classes, ctx.trials, ctx.cv_folds, seed,
                         cell.n_labels]).encode("utf-8"))
    for part in (draw, ctx.y[draw], eval_idx, ctx.y[eval_idx]):
        _array_digest(h, part)
    if method.semi_supervised:
        digest, n_seen = _seen_unlabeled_digest(ctx, fold, {} if memo is None else memo)
        h.update(digest.encode())
        if large_cell(n_seen, cell.n_labels, ctx.max_unlabeled):
            h.update(f"large-cell:{LARGE_CELL_VERSION}".encode())
    return h.hexdigest()


def run_cell(ctx: CellContext, cell: Cell) -> dict[str, Any]:
    """Run one cell and return its store row; exceptions become ``failed`` rows.

    BLAS / OpenMP pools are limited to one thread while the cell runs, so a cell gives the same
    numbers in this process, a pool worker or a Dask worker.
    """
    from threadpoolctl import threadpool_limits

    torch = sys.modules.get("torch")  # loaded when a method or the coordinator needed it
    if torch is not None and torch.get_num_threads() != 1:
        torch.set_num_threads(1)
    with threadpool_limits(limits=1):
        return _run_cell(ctx, cell)


def _run_cell(ctx: CellContext, cell: Cell) -> dict[str, Any]:
    from ..methods import MethodUnavailable

    start = time.perf_counter()
    seed = cell_seed(ctx.seed, cell)
    row: dict[str, Any] = {
        "method": cell.method, "n_labels": cell.n_labels, "repeat": cell.repeat,
        "strategy": cell.strategy, "seed": seed, "status": "ok", "error": None,
        "tune_seconds": 0.0, "fit_seconds": 0.0,
    }
    try:
        fold = ctx.repeat_fold[cell.repeat]
        eval_idx = ctx.evals[fold]
        row["fold"], row["n_eval"] = int(fold), int(len(eval_idx))
        method = ctx.methods[cell.method]
        # the repeat's own draw of the unsupervised stage (study/_representations.py)
        X = method_features(ctx.features, method.representation, cell.repeat)
        draw = _draw(ctx, cell, fold)
        X_lab, y_lab = X[draw], ctx.y[draw]
        cache = None
        if method.semi_supervised:
            unl, large = _unlabeled_rows(ctx, fold, draw, seed)
            X_unl = X[unl]
            if large:  # one neighbour search per scaling for the whole cell
                cache = NeighbourCache()
        else:
            X_unl = None
        row["n_unlabeled_used"] = 0 if X_unl is None else int(len(X_unl))
        row["shared_graph"] = cache is not None
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            t0 = time.perf_counter()
            params, info = tune_params(
                method, X_lab, y_lab, X_unl, trials=ctx.trials,
                seed=derive_seed(seed, "tuning"), max_folds=ctx.cv_folds,
                n_classes=ctx.n_classes, graph_cache=cache,
            )
            t1 = time.perf_counter()
            est = fit_method(method, params, seed, X_lab, y_lab, X_unl, graph_cache=cache)
            proba = align_proba(est.predict_proba(X[eval_idx]), est.classes_, ctx.n_classes)
            t2 = time.perf_counter()
        row["params"] = params
        row["tuning"] = info
        row["tune_seconds"] = t1 - t0
        row["fit_seconds"] = t2 - t1
        row.update(holdout_metrics(ctx.y[eval_idx], proba, ctx.n_classes))
        row.pop("n_holdout", None)
    except MethodUnavailable as exc:
        row["status"] = "skipped"
        row["error"] = str(exc) or type(exc).__name__
    except Exception as exc:  # noqa: BLE001  (a failing cell is recorded; the study goes on)
        row["status"] = "failed"
        row["error"] = f"{type(exc).__name__}: {exc}"
        log.debug("cell %s failed:\n%s", cell, traceback.format_exc())
    row["seconds"] = time.perf_counter() - start
    return row
