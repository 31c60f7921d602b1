"""Evaluation folds, holdout carving and nested stratified label draws (pure, seeded).

Oliver et al. (2018) ask that the evaluation rows are never used for training or tuning, and
that the labeled sets of one repeat grow by adding rows, so a curve shows what more labels buy
rather than the luck of a new draw. Cross-fitting (each repeat evaluates on its own fold) puts
every labeled row into the evaluation, so the evaluation sample's own noise shows in the
spread between repeats instead of moving every curve together.
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence

import numpy as np

from .._errors import ConfigError
from .._seeding import derive_seed
from ..selection import acquisition_order, stratified_order

__all__ = [
    "NEVER_EVALUATED", "acquisition_orders", "crossfit_folds", "default_budgets",
    "evaluable_folds", "grown_order", "nested_draws", "split_holdout",
]


def _row_key_order(keys: Sequence[str], seed: int) -> np.ndarray:
    """Positions of ``keys`` sorted by a seeded hash of each key (ties by position)."""
    salt = f"{int(seed)}:".encode()
    digests = [hashlib.blake2b(salt + str(k).encode("utf-8"), digest_size=8).digest()
               for k in keys]
    return np.array(sorted(range(len(digests)), key=lambda i: (digests[i], i)), dtype=np.int64)


#: Fold of a labeled row that is never evaluated (its class has a single label): it is a
#: training row of every repeat.
NEVER_EVALUATED = -1


def crossfit_folds(y: np.ndarray, keys: Sequence[str], n_folds: int, seed: int) -> np.ndarray:
    """Stratified fold of every labeled row (``0 .. n_folds - 1``), keyed by row id.

    Within each class (classes in sorted order) rows are ranked by a seeded hash of their id
    and dealt to the folds in turn, continuing from class to class; so every class's count
    differs by at most one between folds, and so do the fold sizes (the allocation of
    scikit-learn's ``StratifiedKFold``). Ranking by id rather than by position keeps a row's
    fold when the table's rows are reordered.

    Rare classes: a class with fewer rows than folds lands in as many folds as it has rows
    (at most one row per fold), so it is evaluated in those repeats and keeps at least one
    training row in every repeat. A class with a single row cannot be both trained on and
    evaluated: its row gets :data:`NEVER_EVALUATED` (``-1``), trains in every repeat and is
    left out of the dealing (the other rows' allocation is ``StratifiedKFold``'s on them).
    """
    y = np.asarray(y)
    if len(keys) != len(y):
        raise ValueError(f"need one key per row; got {len(keys)} keys for {len(y)} rows")
    if n_folds < 2:
        raise ConfigError(f"study option 'folds' must be >= 2; got {n_folds}")
    keys = np.asarray(keys, dtype=object)
    dealt: list[np.ndarray] = []
    folds = np.full(len(y), NEVER_EVALUATED, dtype=np.int64)
    for c in np.unique(y):
        idx = np.flatnonzero(y == c)
        if len(idx) >= 2:
            dealt.append(idx[_row_key_order(keys[idx], seed)])
    order = np.concatenate(dealt) if dealt else np.zeros(0, dtype=np.int64)
    folds[order] = np.arange(len(order)) % n_folds
    return folds


def evaluable_folds(y: np.ndarray, n_folds: int) -> int:
    """How many cross-fit folds the labeled rows ``y`` can fill: ``n_folds``, or fewer when
    the rows of classes with two labels or more are fewer than that (each fold then holds one
    row). Zero when no class has two labels (nothing can be evaluated)."""
    counts = np.unique(np.asarray(y), return_counts=True)[1]
    return int(min(n_folds, counts[counts >= 2].sum()))


def split_holdout(y: np.ndarray, holdout: float | int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Split labeled rows into (holdout, pool) positions, stratified by class.

    Parameters
    ----------
    y : ndarray of shape (n_labeled,)
        Class of each labeled row.
    holdout : float or int
        Fraction of the labeled rows (``0 < holdout < 1``) or a row count (``>= 1``).
    seed : int
        Seed of the split.

    Each class gives ``round(holdout_fraction * n_c)`` rows to the holdout (largest remainders
    fill the exact total), but a class always keeps at least one row in the pool when it has
    one; a class with a single labeled row stays entirely in the pool.
    """
    y = np.asarray(y)
    n = len(y)
    if isinstance(holdout, bool) or not isinstance(holdout, (int, float, np.integer, np.floating)):
        raise ConfigError(f"holdout must be a fraction in (0, 1) or a row count; got {holdout!r}")
    if 0 < holdout < 1:
        n_hold = int(round(float(holdout) * n))
    elif holdout >= 1 and float(holdout).is_integer():
        n_hold = int(holdout)
    else:
        raise ConfigError(f"holdout must be a fraction in (0, 1) or a row count; got {holdout!r}")
    if n_hold >= n:
        raise ConfigError(
            f"holdout {holdout!r} leaves no labeled rows to train on ({n} labeled rows); "
            "use a smaller holdout"
        )
    rng = np.random.default_rng(seed)
    classes, counts = np.unique(y, return_counts=True)
    exact = counts * (n_hold / n)
    take = np.floor(exact).astype(np.int64)
    cap = np.maximum(counts - 1, 0)  # keep one row of each class in the pool
    take = np.minimum(take, cap)
    remainder = exact - take
    while take.sum() < n_hold:
        room = take < cap
        if not room.any():
            break
        score = np.where(room, remainder, -np.inf)
        c = int(np.argmax(score))
        take[c] += 1
        remainder[c] -= 1
    hold: list[np.ndarray] = []
    pool: list[np.ndarray] = []
    for c, k in zip(classes, take, strict=True):
        idx = rng.permutation(np.flatnonzero(y == c))
        hold.append(idx[:k])
        pool.append(idx[k:])
    return np.sort(np.concatenate(hold)), np.sort(np.concatenate(pool))


def nested_draws(
    y_pool: np.ndarray, budgets: Sequence[int], seed: int
) -> dict[int, np.ndarray]:
    """Per budget, the pool positions revealed; each draw contains every smaller one.

    Every prefix of :func:`semisup.selection.stratified_order` is stratified and, once the
    budget reaches the number of classes, holds every class.
    """
    order = stratified_order(np.asarray(y_pool), seed)
    out: dict[int, np.ndarray] = {}
    for b in sorted({int(b) for b in budgets}):
        if b < 1 or b > len(order):
            raise ConfigError(f"budget {b} is outside 1..{len(order)} (the pool size)")
        out[b] = order[:b]
    return out


def default_budgets(n_classes: int, pool_size: int, n_points: int = 6) -> list[int]:
    """A geometric grid from ``2 * n_classes`` up to the pool size (about ``n_points`` values)."""
    if pool_size < 1:
        raise ConfigError("the pool has no labeled rows; label some rows or lower the holdout")
    lo = min(max(2 * n_classes, 1), pool_size)
    if lo >= pool_size:
        return [pool_size]
    grid = np.geomspace(lo, pool_size, n_points)
    return sorted({int(round(v)) for v in grid})


def grown_order(y_pool: np.ndarray, parts: Sequence[tuple[int, int]], seed: int,
                repeat: int) -> np.ndarray:
    """A stratified random order of a pool made of parts: the base rows, then each round's.

    ``parts`` lists ``(round, n_rows)`` in pool order (round 0 is the table's own labeled
    rows). Each part is ordered on its own (:func:`semisup.selection.stratified_order`; the
    base part with the seed a study without rounds uses) and the parts follow each other, so
    a round appended to the pool leaves every earlier prefix, and so every earlier draw, as it
    was.
    """
    y_pool = np.asarray(y_pool)
    if sum(n for _, n in parts) != len(y_pool):
        raise ValueError(f"parts hold {sum(n for _, n in parts)} rows, the pool {len(y_pool)}")
    out: list[np.ndarray] = []
    start = 0
    for rnd, n in parts:
        if n:
            s = derive_seed(seed, "draw", repeat) if rnd == 0 else \
                derive_seed(seed, "draw", repeat, "round", rnd)
            out.append(start + stratified_order(y_pool[start:start + n], s))
        start += n
    return np.concatenate(out) if out else np.zeros(0, dtype=np.int64)


def acquisition_orders(
    features: dict[str, np.ndarray], y: np.ndarray, pools: Sequence[np.ndarray],
    budgets: Sequence[int], strategies: Sequence[str], seed: int,
    parts: Sequence[Sequence[tuple[int, int]]] | None = None,
) -> tuple[dict[tuple[str, int], np.ndarray], str]:
    """Per (strategy, repeat), the order in which the repeat's pool labels are revealed.

    Selection-based strategies use the VAE latent space when the study fitted one, else the
    raw table; returns ``(orders, kind used)``. Every strategy of a repeat starts from the same
    seed, so uncertainty starts from the random draw. ``parts[r]`` (see :func:`grown_order`)
    splits pool ``r`` into the base rows and the rounds' rows; the random strategy keeps the
    draws of a smaller pool as prefixes. The other strategies choose from the whole pool, so
    their draws may change when it grows (the cells' content keys then tell).
    """
    z_kind = "vae" if "vae" in features else "raw"
    orders: dict[tuple[str, int], np.ndarray] = {}
    n_max = max(int(b) for b in budgets) if len(budgets) else 0
    for strategy in strategies:
        for repeat, pool_idx in enumerate(pools):
            if strategy == "random":
                own = parts[repeat] if parts is not None else [(0, len(pool_idx))]
                order = grown_order(y[pool_idx], own, seed, repeat)[:n_max]
            else:
                order, _ = acquisition_order(strategy, features[z_kind][pool_idx], y[pool_idx],
                                             budgets, seed=derive_seed(seed, "draw", repeat),
                                             proba_fn=None)
            orders[(strategy, repeat)] = order
    return orders, z_kind
