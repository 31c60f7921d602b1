"""Equal-budget hyperparameter tuning inside one labeled draw (optuna, seeded TPE sampler).

Oliver et al. (2018) point out that tuning on a validation set larger than the labeled
training set flatters every method; here every method gets the same number of trials and is
validated only by cross-validation inside its own labeled draw. Semi-supervised methods still
see the unlabeled rows during cross-validation, and a validation fold's rows are added to them
with their labels hidden (they are features the method could see anyway).

A large cell (``graph_cache`` given; see ``semisup.study._cell``) fits every fold, trial and
the final model on the same rows in the same order, ``[draw | unlabeled rows]``, with a
validation fold's labels hidden in place, so the graph methods take their neighbour lists
from one shared :class:`~semisup.methods.NeighbourCache` instead of searching in every fit.
"""

from __future__ import annotations

import logging
from typing import Any

import numpy as np

from ..methods import align_proba

__all__ = ["cv_splits", "fit_method", "tune_params"]

log = logging.getLogger(__name__)


def cv_splits(
    y: np.ndarray, max_folds: int, seed: int
) -> tuple[list[tuple[np.ndarray, np.ndarray]], str]:
    """Stratified folds that cope with classes of one label.

    Classes with at least two labels are split into ``k = min(max_folds, smallest such class)``
    stratified folds; rows of single-label classes stay in every training part (a class with one
    label cannot be both trained on and validated). With no class of two labels the list is
    empty and the caller uses the default parameters. Returns ``(folds, note)``.
    """
    from sklearn.model_selection import StratifiedKFold

    y = np.asarray(y)
    classes, counts = np.unique(y, return_counts=True)
    multi = classes[counts >= 2]
    if len(multi) == 0 or len(y) < 3:
        return [], "tuning skipped: no class has two labels; default parameters used"
    k = int(min(max_folds, counts[counts >= 2].min()))
    splittable = np.flatnonzero(np.isin(y, multi))
    fixed = np.flatnonzero(~np.isin(y, multi))
    skf = StratifiedKFold(n_splits=k, shuffle=True, random_state=seed)
    folds = []
    for tr, va in skf.split(np.zeros(len(splittable)), y[splittable]):
        folds.append((np.sort(np.concatenate([splittable[tr], fixed])), splittable[va]))
    note = f"{k}-fold stratified cross-validation inside the draw"
    if len(fixed):
        note += f"; {len(fixed)} single-label class row(s) kept in every training part"
    return folds, note


def fit_method(method: Any, params: dict, seed: int, X_lab, y_lab, X_unl, *,
               graph_cache: Any = None):
    """Build and fit ``method``; semi-supervised methods also get ``X_unl`` with ``y == -1``
    (after the labeled rows). An estimator that takes a ``graph_cache`` gets the given one."""
    est = method.build(dict(params), seed)
    if graph_cache is not None and "graph_cache" in est.get_params(deep=False):
        est.set_params(graph_cache=graph_cache)
    if method.semi_supervised and X_unl is not None and len(X_unl):
        X = np.concatenate([X_lab, X_unl])
        y = np.concatenate([y_lab, np.full(len(X_unl), -1, dtype=np.int64)])
    else:
        X, y = X_lab, y_lab
    est.fit(X, y)
    return est


def _fold_score(method, params, seed, X_lab, y_lab, X_unl, tr, va, n_classes,
                graph_cache=None) -> float:
    if graph_cache is not None and method.semi_supervised:
        # the rows of the final fit in its order, the validation labels hidden in place
        est = method.build(dict(params), seed)
        if "graph_cache" in est.get_params(deep=False):
            est.set_params(graph_cache=graph_cache)
        y_seen = y_lab.copy()
        y_seen[va] = -1
        n_unl = 0 if X_unl is None else len(X_unl)
        est.fit(X_lab if X_unl is None else np.concatenate([X_lab, X_unl]),
                np.concatenate([y_seen, np.full(n_unl, -1, dtype=np.int64)]))
    else:
        X_extra = X_lab[va] if X_unl is None else np.concatenate([X_unl, X_lab[va]])
        est = fit_method(method, params, seed, X_lab[tr], y_lab[tr], X_extra)
    proba = align_proba(est.predict_proba(X_lab[va]), est.classes_, n_classes)
    acc = float(np.mean(np.argmax(proba, axis=1) == y_lab[va]))
    p_true = np.clip(proba[np.arange(len(va)), y_lab[va]], 1e-15, 1.0)
    # Accuracy first; mean log-loss breaks the ties that tiny validation folds produce.
    return acc - 1e-3 * float(-np.log(p_true).mean())


def tune_params(
    method: Any,
    X_lab: np.ndarray,
    y_lab: np.ndarray,
    X_unl: np.ndarray | None,
    *,
    trials: int,
    seed: int,
    max_folds: int,
    n_classes: int,
    graph_cache: Any = None,
) -> tuple[dict, dict]:
    """Best parameters for ``method`` on this draw after ``trials`` optuna trials.

    The first trial is always the method's default parameters. With ``graph_cache`` every
    fold's fit sees ``[X_lab | X_unl]`` in that order (validation labels hidden) and graph
    methods share the cache's neighbour lists (a large cell; pass the same cache to
    :func:`fit_method` for the final fit). Returns ``(params, info)`` with
    ``info`` holding the note on folds, trials run/failed and the best cross-validated score.
    """
    params = dict(method.default_params)
    folds, note = cv_splits(y_lab, max_folds, seed)
    info: dict[str, Any] = {"note": note, "trials": 0, "failed_trials": 0, "best_score": None}
    if trials <= 1 or not folds:
        if trials <= 1 and folds:
            info["note"] = "tuning off (trials = 1); default parameters used"
        return params, info
    import optuna

    optuna.logging.set_verbosity(optuna.logging.ERROR)

    def score(p: dict) -> float:
        return float(np.mean([
            _fold_score(method, p, seed, X_lab, y_lab, X_unl, tr, va, n_classes, graph_cache)
            for tr, va in folds
        ]))

    # Trial 0: the default parameters (evaluated directly so they are exactly the defaults).
    candidates: list[tuple[float, int, dict]] = []
    failed = 0
    try:
        candidates.append((score(params), 0, params))
    except Exception as exc:  # noqa: BLE001  (a failing trial is counted, tuning goes on)
        failed += 1
        log.debug("default parameters of %s failed in CV: %s", method.name, exc)

    def objective(trial: optuna.Trial) -> float:
        p = dict(method.search_space(trial))
        trial.set_user_attr("params", p)
        return score(p)

    sampler = optuna.samplers.TPESampler(seed=seed)
    study = optuna.create_study(direction="maximize", sampler=sampler)
    study.optimize(objective, n_trials=trials - 1, catch=(Exception,), gc_after_trial=False)
    for t in study.trials:
        if t.state == optuna.trial.TrialState.COMPLETE:
            candidates.append((float(t.value), t.number + 1, t.user_attrs["params"]))
        else:
            failed += 1
    info["trials"] = trials
    info["failed_trials"] = failed
    if candidates:
        best_score, best_number, best_params = max(candidates, key=lambda c: (c[0], -c[1]))
        info["best_score"] = best_score
        info["best_trial"] = best_number
        params = {**method.default_params, **best_params}
    return params, info
