"""Which rows to label next: random, representative (k-means in the representation), uncertainty.

Pure functions: every call takes the candidate rows' representation ``Z`` (and, for
uncertainty, the current model's class probabilities) and a seed, and returns the chosen row
positions with a short human-readable reason for each.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from .._errors import ConfigError

__all__ = [
    "STRATEGIES",
    "Selection",
    "acquisition_order",
    "margins",
    "select_rows",
    "stratified_order",
]

#: Strategies the toolkit knows.
STRATEGIES = ("random", "representative", "uncertainty")


@dataclass(frozen=True)
class Selection:
    """Rows chosen to label, best first.

    Attributes
    ----------
    indices : ndarray of shape (n_chosen,), int64
        Positions into the candidate rows (the rows of ``Z``).
    reasons : list of str
        Why each row was chosen, same order as ``indices``.
    """

    indices: np.ndarray
    reasons: list[str]

    def __len__(self) -> int:
        return int(len(self.indices))


def _check_strategy(strategy: str) -> None:
    if strategy not in STRATEGIES:
        raise ConfigError(
            f"unknown selection strategy {strategy!r}; allowed: {', '.join(STRATEGIES)}"
        )


def margins(proba: np.ndarray) -> np.ndarray:
    """Difference between the two largest class probabilities of each row (small = unsure)."""
    proba = np.asarray(proba, dtype=float)
    if proba.ndim != 2 or proba.shape[1] == 0:
        raise ConfigError(f"proba must be 2-D (n_rows, n_classes); got shape {proba.shape}")
    if proba.shape[1] == 1:
        return np.ones(proba.shape[0])
    top2 = -np.partition(-proba, 1, axis=1)[:, :2]
    return top2[:, 0] - top2[:, 1]


def _available(n_rows: int, exclude: Sequence[int] | np.ndarray | None) -> np.ndarray:
    mask = np.ones(n_rows, dtype=bool)
    if exclude is not None and len(exclude):
        mask[np.asarray(exclude, dtype=np.int64)] = False
    return np.flatnonzero(mask)


def _select_random(avail: np.ndarray, n: int, seed: int) -> Selection:
    rng = np.random.default_rng(seed)
    chosen = rng.permutation(avail)[:n]
    return Selection(chosen.astype(np.int64), ["random draw"] * len(chosen))


def _select_representative(Z: np.ndarray, avail: np.ndarray, n: int, seed: int,
                           sample_weight: np.ndarray | None = None) -> Selection:
    """k-means (k = n, at most the rows left) in Z; rows nearest each centre, round-robin.

    ``sample_weight`` (one per row of ``avail``) weighs the rows in k-means and orders the
    clusters by their weight instead of their size."""
    from sklearn.cluster import KMeans

    Zc = np.asarray(Z, dtype=float)[avail]
    k = min(n, len(avail))
    if k == 0:
        return Selection(np.empty(0, dtype=np.int64), [])
    km = KMeans(n_clusters=k, n_init=3, random_state=seed).fit(Zc, sample_weight=sample_weight)
    dist = np.linalg.norm(Zc - km.cluster_centers_[km.labels_], axis=1)
    # Per cluster: its members sorted by distance to the centre (nearest first).
    members = []
    for c in range(k):
        idx = np.flatnonzero(km.labels_ == c)
        members.append(idx[np.argsort(dist[idx], kind="stable")])
    # Clusters visited largest (heaviest) first so the first rows stand for the most rows.
    mass = [len(m) if sample_weight is None else float(np.sum(sample_weight[m]))
            for m in members]
    order = sorted(range(k), key=lambda c: (-mass[c], c))
    chosen: list[int] = []
    reasons: list[str] = []
    rank = 0
    while len(chosen) < n:
        took = False
        for c in order:
            if rank < len(members[c]) and len(chosen) < n:
                chosen.append(int(avail[members[c][rank]]))
                reasons.append(f"cluster {c}, rank {rank}")
                took = True
        if not took:
            break
        rank += 1
    return Selection(np.asarray(chosen, dtype=np.int64), reasons)


def _select_uncertainty(proba: np.ndarray, avail: np.ndarray, n: int, seed: int) -> Selection:
    m = margins(proba)[avail]
    # Ties broken by a seeded random key so equal margins do not favour low row numbers.
    tie = np.random.default_rng(seed).random(len(avail))
    order = np.lexsort((tie, m))[:n]
    return Selection(avail[order].astype(np.int64), [f"margin {m[i]:.2f}" for i in order])


def select_rows(
    strategy: str,
    Z: np.ndarray,
    n: int,
    *,
    seed: int,
    proba: np.ndarray | None = None,
    exclude: Sequence[int] | np.ndarray | None = None,
) -> Selection:
    """Choose ``n`` rows of ``Z`` to label next.

    Parameters
    ----------
    strategy : {"random", "representative", "uncertainty"}
        ``random``: uniform draw. ``representative``: k-means with ``n`` clusters in ``Z`` and
        the rows nearest each centre, spread round-robin over the clusters. ``uncertainty``:
        the rows whose two most probable classes are closest (smallest margin).
    Z : ndarray of shape (n_rows, n_dims)
        Representation of the candidate rows.
    n : int
        Rows to choose (fewer when fewer are available).
    seed : int
        Seed for every random choice.
    proba : ndarray of shape (n_rows, n_classes), optional
        Current model's class probabilities for the candidates (needed by ``uncertainty``).
    exclude : sequence of int, optional
        Row positions that may not be chosen (already labeled).
    """
    _check_strategy(strategy)
    Z = np.asarray(Z)
    if Z.ndim != 2:
        raise ConfigError(f"Z must be 2-D (n_rows, n_dims); got shape {Z.shape}")
    if n < 0:
        raise ConfigError(f"n must be >= 0; got {n}")
    avail = _available(Z.shape[0], exclude)
    n = min(int(n), len(avail))
    if n == 0:
        return Selection(np.empty(0, dtype=np.int64), [])
    if strategy == "random":
        return _select_random(avail, n, seed)
    if strategy == "representative":
        return _select_representative(Z, avail, n, seed)
    if proba is None:
        raise ConfigError("strategy 'uncertainty' needs proba (the model's class probabilities)")
    proba = np.asarray(proba)
    if proba.shape[0] != Z.shape[0]:
        raise ConfigError(
            f"proba has {proba.shape[0]} rows but Z has {Z.shape[0]}; give one row per candidate"
        )
    return _select_uncertainty(proba, avail, n, seed)


def stratified_order(y: np.ndarray, seed: int) -> np.ndarray:
    """A seeded order of all rows whose every prefix is stratified by ``y``.

    The first ``n_classes`` positions hold one row of each class (in random order), so any
    prefix at least that long has every class. After that each next row comes from the class
    furthest below its share ``k * n_c / n`` (ties broken at random). Budget ``b`` takes the
    first ``b`` rows, so draws are nested by construction.
    """
    y = np.asarray(y)
    rng = np.random.default_rng(seed)
    classes, counts = np.unique(y, return_counts=True)
    shares = counts / counts.sum()
    queues = [rng.permutation(np.flatnonzero(y == c)) for c in classes]
    taken = np.zeros(len(classes), dtype=np.int64)
    order: list[int] = []
    for c in rng.permutation(len(classes)):
        order.append(int(queues[c][0]))
        taken[c] = 1
    tie = rng.random(len(classes))
    while len(order) < len(y):
        k = len(order) + 1
        deficit = k * shares - taken
        deficit[taken >= counts] = -np.inf
        best = np.flatnonzero(deficit == deficit.max())
        c = best[np.argmax(tie[best])] if len(best) > 1 else best[0]
        order.append(int(queues[c][taken[c]]))
        taken[c] += 1
        tie = rng.random(len(classes))
    return np.asarray(order, dtype=np.int64)


def acquisition_order(
    strategy: str,
    Z_pool: np.ndarray,
    y_pool: np.ndarray,
    budgets: Sequence[int],
    *,
    seed: int,
    proba_fn: Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray] | None = None,
) -> tuple[np.ndarray, list[str]]:
    """The order in which a simulated annotator reveals pool labels under ``strategy``.

    Budget ``b`` uses the first ``b`` rows of the order, so the draws of one repeat are nested.

    ``random``: :func:`stratified_order` (stratified, every class present once the budget allows).
    ``representative``: :func:`select_rows` on the whole pool (needs no labels).
    ``uncertainty``: starts from the smallest budget's stratified draw, then grows budget by
    budget, each batch choosing the smallest-margin rows under ``proba_fn(Z_labeled, y_labeled,
    Z_pool)`` (by default a logistic regression fitted on the labels revealed so far).

    Returns
    -------
    order : ndarray of shape (max(budgets),), int64
        Positions into the pool.
    reasons : list of str
        Why each row was revealed.
    """
    _check_strategy(strategy)
    Z_pool = np.asarray(Z_pool)
    y_pool = np.asarray(y_pool)
    budgets = sorted({int(b) for b in budgets})
    n_max = min(max(budgets), len(y_pool)) if budgets else 0
    if strategy == "random":
        order = stratified_order(y_pool, seed)[:n_max]
        return order, ["stratified random draw"] * len(order)
    if strategy == "representative":
        sel = select_rows("representative", Z_pool, n_max, seed=seed)
        return sel.indices, sel.reasons
    fn = proba_fn or _logreg_proba
    first = min(budgets[0], n_max)
    order = list(stratified_order(y_pool, seed)[:first])
    reasons = ["stratified random draw (first batch)"] * len(order)
    for step, b in enumerate(budgets[1:]):
        b = min(b, n_max)
        need = b - len(order)
        if need <= 0:
            continue
        labeled = np.asarray(order, dtype=np.int64)
        proba = fn(Z_pool[labeled], y_pool[labeled], Z_pool)
        sel = select_rows("uncertainty", Z_pool, need, seed=seed + step + 1, proba=proba,
                          exclude=labeled)
        order.extend(int(i) for i in sel.indices)
        reasons.extend(sel.reasons)
    return np.asarray(order, dtype=np.int64), reasons


def _logreg_proba(Z_lab: np.ndarray, y_lab: np.ndarray, Z_all: np.ndarray) -> np.ndarray:
    """Class probabilities from a logistic regression on the labels revealed so far."""
    from sklearn.linear_model import LogisticRegression
    from sklearn.preprocessing import StandardScaler

    if len(np.unique(y_lab)) < 2:
        return np.full((len(Z_all), 1), 1.0)
    scaler = StandardScaler().fit(Z_lab)
    model = LogisticRegression(max_iter=500).fit(scaler.transform(Z_lab), y_lab)
    return model.predict_proba(scaler.transform(Z_all))
