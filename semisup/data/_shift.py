"""Do the labeled rows look like the unlabeled pool? A classifier two-sample test.

Lopez-Paz & Oquab (ICLR 2017), "Revisiting classifier two-sample tests": train a classifier
to tell the two samples apart; if they come from one distribution it cannot do better than
chance on rows it was not trained on. Here the rows are "labeled" against "unlabeled", the
classifier is gradient-boosted trees on the encoded features, cross-fitted (every row scored
by a model that never saw it), and the statistic is the area under the ROC curve of those
out-of-fold scores: 0.5 when the labeled rows are a fair sample of the table, towards 1 when
they were picked (the easy, recent or conspicuous rows). Its interval is DeLong's
(DeLong, DeLong & Clarke-Pearson 1988). The columns that drive it are found by permuting
each source column's encoded block in the held-out rows and measuring the AUC lost.

Every estimate of the study assumes the labeled rows were drawn like the rows still to be
labeled; when this test says they were not, curves, plans and pseudo-label accuracies may not
hold for the pool.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

__all__ = ["SHIFT_AUC_MARGIN", "auc_delong", "labeled_pool_shift", "pool_scores",
           "shift_seed", "shift_warning"]

#: The labeled rows are called clearly unlike the pool when the interval's lower end is above
#: 0.5 + this margin (common practice, no source: an AUC of 0.55 is about the smallest
#: separation worth a word; below it the labeled rows are "nearly" a random draw).
SHIFT_AUC_MARGIN = 0.05
#: Unlabeled rows used at most (a seeded sample beyond that), per labeled row and in all.
MAX_POOL_PER_LABELED = 20
MAX_POOL_ROWS = 20_000
#: Columns listed as driving the difference at most.
TOP_COLUMNS = 5


def shift_seed() -> int:
    """The seed of the data card's check (and of :func:`pool_scores` after it, so both use
    the same pool sample, folds and trees)."""
    from .._seeding import derive_rng

    return int(derive_rng(0, "data-card", "shift").integers(2**31))


def _midranks(x: np.ndarray) -> np.ndarray:
    from scipy import stats

    return stats.rankdata(x, method="average")


def auc_delong(scores_pos: np.ndarray, scores_neg: np.ndarray) -> tuple[float, float]:
    """Area under the ROC curve and DeLong's standard error.

    ``scores_pos`` are the scores of the positive rows (here: labeled), ``scores_neg`` of the
    negative ones. The AUC is the Mann-Whitney ``U / (m n)`` with ties counted one half;
    DeLong et al. (1988) give its variance from the structural components
    ``V10_i = mean_j psi(x_i, y_j)`` and ``V01_j = mean_i psi(x_i, y_j)``:
    ``var = s10 / m + s01 / n`` (computed with midranks, Sun & Xu 2014).
    """
    x = np.asarray(scores_pos, dtype=np.float64)
    yv = np.asarray(scores_neg, dtype=np.float64)
    m, n = len(x), len(yv)
    if m < 2 or n < 2:
        raise ValueError(f"need two rows of each sample; got {m} and {n}")
    tz = _midranks(np.concatenate([x, yv]))
    tx, ty = _midranks(x), _midranks(yv)
    auc = float((tz[:m].sum() - m * (m + 1) / 2) / (m * n))
    v10 = (tz[:m] - tx) / n
    v01 = 1.0 - (tz[m:] - ty) / m
    var = float(np.var(v10, ddof=1) / m + np.var(v01, ddof=1) / n)
    return auc, float(np.sqrt(max(var, 0.0)))


def _folds(is_labeled: np.ndarray, n_folds: int, rng: np.random.Generator) -> np.ndarray:
    fold = np.empty(len(is_labeled), dtype=np.int64)
    for value in (True, False):
        rows = np.flatnonzero(is_labeled == value)
        fold[rng.permutation(rows)] = np.arange(len(rows)) % n_folds
    return fold


def labeled_pool_shift(
    X: np.ndarray,
    labeled: np.ndarray,
    *,
    blocks: Sequence[Any] = (),
    seed: int = 0,
    n_folds: int = 5,
    confidence: float = 0.95,
) -> dict[str, Any]:
    """Cross-fitted classifier two-sample test of the labeled rows against the unlabeled ones.

    Parameters
    ----------
    X : ndarray of shape (n_samples, n_features)
        The encoded table.
    labeled : ndarray of bool, shape (n_samples,)
        Which rows are labeled.
    blocks : sequence of FeatureBlock
        Source column of each encoded column (``column``, ``start``, ``stop``), for the
        driving columns; without it each encoded column is its own.
    seed, n_folds, confidence
        Seed of the pool sample, the folds and the trees; number of cross-fit folds; level of
        the interval.

    Returns
    -------
    dict
        ``auc``, ``low``, ``high`` (DeLong interval, clipped to [0, 1]), ``se``,
        ``p_value`` (one-sided, H0: AUC = 0.5), ``n_labeled``, ``n_unlabeled_used``,
        ``clearly_different`` (the interval's lower end above ``0.5 + SHIFT_AUC_MARGIN``),
        ``columns`` (up to five ``{"column", "auc_drop"}``, largest first, positive drops
        only), ``method``; or ``{"checked": False, "reason": ...}`` when a sample has fewer
        than ``n_folds`` rows.
    """
    from threadpoolctl import threadpool_limits

    # One thread: the trees' OpenMP threads on a shared machine cost 10x (DEVELOPERS.md).
    with threadpool_limits(1):
        return _shift(X, labeled, blocks, seed, n_folds, confidence)


def _crossfit(X: np.ndarray, labeled: np.ndarray, rng: np.random.Generator,
              n_folds: int) -> dict[str, Any] | None:
    """The cross-fitted labeled-versus-unlabeled classifier: the rows used (every labeled
    row, a seeded sample of the pool), their folds, out-of-fold scores and fold models.
    None when a sample has fewer than ``n_folds`` rows."""
    from sklearn.ensemble import HistGradientBoostingClassifier

    lab = np.flatnonzero(labeled)
    unl = np.flatnonzero(~labeled)
    if len(lab) < n_folds or len(unl) < n_folds:
        return None
    cap = int(min(MAX_POOL_ROWS, MAX_POOL_PER_LABELED * len(lab)))
    if len(unl) > cap:
        unl = np.sort(rng.choice(unl, cap, replace=False))
    rows = np.concatenate([lab, unl])
    target = np.concatenate([np.ones(len(lab), bool), np.zeros(len(unl), bool)])
    Xs = X[rows]
    fold = _folds(target, n_folds, rng)
    scores = np.empty(len(rows))
    models = []
    for f in range(n_folds):
        train = fold != f
        # Balanced weights: the pool outnumbers the labeled rows up to 20:1 and AUC does not
        # depend on the weighting, but the trees then split on the labeled rows too. With
        # them the scores estimate p_lab / (p_lab + p_pool), the two samples' density ratio
        # in odds form (pool_scores relies on it).
        w = np.where(target[train], 0.5 / target[train].mean(), 0.5 / (~target[train]).mean())
        model = HistGradientBoostingClassifier(max_iter=50, learning_rate=0.1,
                                               max_leaf_nodes=15, min_samples_leaf=20,
                                               random_state=int(rng.integers(2**31)))
        model.fit(Xs[train], target[train], sample_weight=w)
        scores[~train] = model.predict_proba(Xs[~train])[:, 1]
        models.append(model)
    return {"lab": lab, "unl": unl, "rows": rows, "target": target, "Xs": Xs, "fold": fold,
            "scores": scores, "models": models}


def pool_scores(X: np.ndarray, labeled: np.ndarray, *, seed: int = 0,
                n_folds: int = 5) -> np.ndarray | None:
    """Each unlabeled row's score of looking labeled, from the two-sample test's classifier.

    The classifier of :func:`labeled_pool_shift` (same seed, pool sample, folds and trees),
    fitted with balanced weights, so a score ``s`` estimates ``p_lab(x) / (p_lab(x) +
    p_pool(x))`` and ``s / (1 - s)`` the density ratio of the labeled rows to the pool
    (Sugiyama, Suzuki & Kanamori 2012, "Density ratio estimation in machine learning",
    ch. 4: probabilistic classification). A sampled pool row gets the score of the fold
    model that did not see it; a row outside the sample the mean of the fold models (none saw
    it). The trees' scores are shrunk (50 small trees, out of fold): where labeled and pool
    rows mix they sit far below the ratio's value, so they are recalibrated by Platt scaling
    (Platt 1999: a logistic regression of the sample on the score's logit, balanced weights)
    fitted on the cross-fitted scores of every row used.

    Returns
    -------
    ndarray of shape (n_unlabeled,) or None
        Scores of the rows where ``labeled`` is False, in row order; None when a sample has
        fewer than ``n_folds`` rows.
    """
    from threadpoolctl import threadpool_limits

    X = np.asarray(X, dtype=np.float32)
    labeled = np.asarray(labeled, dtype=bool)
    with threadpool_limits(1):
        fit = _crossfit(X, labeled, np.random.default_rng(seed), n_folds)
        if fit is None:
            return None
        unl_all = np.flatnonzero(~labeled)
        out = np.empty(len(unl_all))
        sampled = np.isin(unl_all, fit["unl"])
        out[sampled] = fit["scores"][len(fit["lab"]):]
        rest = unl_all[~sampled]
        if len(rest):
            out[~sampled] = np.mean([m.predict_proba(X[rest])[:, 1] for m in fit["models"]],
                                    axis=0)
        return _platt(fit["scores"], fit["target"], out)


def _logit(p: np.ndarray) -> np.ndarray:
    p = np.clip(p, 1e-4, 1 - 1e-4)
    return np.log(p / (1 - p))


def _platt(scores: np.ndarray, target: np.ndarray, new: np.ndarray) -> np.ndarray:
    """Platt scaling (Platt 1999) of ``new`` fitted on the out-of-fold ``scores`` against
    ``target``, both samples weighted equally (the density-ratio reading needs it)."""
    from sklearn.linear_model import LogisticRegression

    w = np.where(target, 0.5 / target.mean(), 0.5 / (~target).mean())
    cal = LogisticRegression(C=1e4).fit(_logit(scores)[:, None], target, sample_weight=w)
    return cal.predict_proba(_logit(new)[:, None])[:, 1]


def _shift(X, labeled, blocks, seed, n_folds, confidence) -> dict[str, Any]:
    from scipy import stats

    X = np.asarray(X, dtype=np.float32)
    labeled = np.asarray(labeled, dtype=bool)
    rng = np.random.default_rng(seed)
    fit = _crossfit(X, labeled, rng, n_folds)
    if fit is None:
        n_lab = int(labeled.sum())
        return {"checked": False,
                "reason": f"{n_lab} labeled and {len(labeled) - n_lab} unlabeled rows; the "
                          f"test needs at least {n_folds} of each"}
    lab, unl, target, Xs = fit["lab"], fit["unl"], fit["target"], fit["Xs"]
    fold, scores, models = fit["fold"], fit["scores"], fit["models"]
    groups = ([(b.column, b.start, b.stop) for b in blocks] if blocks
              else [(str(j), j, j + 1) for j in range(X.shape[1])])
    columns: dict[str, list[int]] = {}
    for name, start, stop in groups:
        columns.setdefault(str(name), []).extend(range(start, stop))
    auc, se = auc_delong(scores[target], scores[~target])
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    low, high = max(0.0, auc - z * se), min(1.0, auc + z * se)
    p_value = float(stats.norm.sf((auc - 0.5) / se)) if se > 0 else float(auc <= 0.5)
    drops = []
    for name, cols in columns.items():
        permuted = scores.copy()
        for f, model in enumerate(models):
            held = np.flatnonzero(fold == f)
            Xp = Xs[held].copy()
            Xp[:, cols] = Xp[rng.permutation(len(held))][:, cols]
            permuted[held] = model.predict_proba(Xp)[:, 1]
        drops.append((auc - auc_delong(permuted[target], permuted[~target])[0], name))
    drops.sort(key=lambda d: -d[0])
    top = [{"column": name, "auc_drop": round(float(d), 4)}
           for d, name in drops[:TOP_COLUMNS] if d > 0]
    return {
        "checked": True,
        "method": (f"classifier two-sample test (Lopez-Paz & Oquab 2017): gradient-boosted "
                   f"trees told labeled from unlabeled rows, {n_folds}-fold cross-fitted; "
                   f"AUC with DeLong's {confidence:.0%} interval; columns by the AUC lost when "
                   "each is permuted in the held-out rows"),
        "auc": round(auc, 4), "low": round(low, 4), "high": round(high, 4),
        "se": round(se, 5), "p_value": p_value,
        "n_labeled": int(len(lab)), "n_unlabeled_used": int(len(unl)),
        "clearly_different": bool(low > 0.5 + SHIFT_AUC_MARGIN),
        "columns": top,
    }


def shift_warning(shift: dict[str, Any] | None) -> str | None:
    """One warning line when the labeled rows clearly differ from the pool, else None."""
    if not shift or not shift.get("checked") or not shift.get("clearly_different"):
        return None
    cols = ", ".join(repr(c["column"]) for c in shift.get("columns", [])[:3])
    driven = f", mostly through {cols}" if cols else ""
    return (f"the labeled rows are unlike the unlabeled pool (classifier two-sample test: AUC "
            f"{shift['auc']:.2f}, 95% interval {shift['low']:.2f}-{shift['high']:.2f}; 0.5 "
            f"means alike){driven}: accuracies, curves, the plan and pseudo-labels are "
            "measured on rows like the labeled ones and may not hold for the pool; the "
            "plan's rows to label next are weighted towards the pool regions the labels "
            "miss, and rows drawn at random from the pool check the estimates")
