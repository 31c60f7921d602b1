"""One neighbour search per large cell: the cached graph of label spreading against
scikit-learn's ``LabelSpreading(kernel="knn")`` and ``NearestNeighbors``, and the study's
large-cell rule."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_digits
from sklearn.neighbors import NearestNeighbors
from sklearn.semi_supervised import LabelSpreading

from semisup.methods import KNNLabelSpreading, NeighbourCache, get_method
from semisup.study._cell import Cell, CellContext, large_cell, run_cell
from semisup.study._tuning import tune_params


def _partly_labeled(y, n_labels, seed=0):
    rng = np.random.default_rng(seed)
    out = np.full(len(y), -1)
    chosen = rng.choice(len(y), n_labels, replace=False)
    out[chosen] = y[chosen]
    return out


@pytest.mark.parametrize("scaling", ["none", "minmax"])
@pytest.mark.parametrize("k", [3, 7, 20])
def test_cached_graph_spreads_as_sklearn_knn_label_spreading(scaling, k):
    # Reference: scikit-learn's LabelSpreading(kernel="knn") on its digits data (real
    # handwritten digits), through our wrapper without a cache and directly.
    X, y = load_digits(return_X_y=True)
    y_seen = _partly_labeled(y, 100)
    plain = KNNLabelSpreading(n_neighbors=k, scaling=scaling).fit(X, y_seen)
    cache = NeighbourCache(min_neighbors=k)
    cached = KNNLabelSpreading(n_neighbors=k, scaling=scaling, graph_cache=cache).fit(X, y_seen)
    np.testing.assert_allclose(cached.model_.label_distributions_,
                               plain.model_.label_distributions_, rtol=0, atol=1e-12)
    np.testing.assert_allclose(cached.predict_proba(X[:400]), plain.predict_proba(X[:400]),
                               rtol=0, atol=1e-12)
    if scaling == "none":
        ref = LabelSpreading(kernel="knn", n_neighbors=k, alpha=0.2, max_iter=30,
                             tol=1e-3).fit(X, y_seen)
        np.testing.assert_allclose(cached.model_.label_distributions_,
                                   ref.label_distributions_, rtol=0, atol=1e-12)
    # a second fit of the same rows (other labels hidden, other alpha) searches no more
    other = _partly_labeled(y, 60, seed=1)
    KNNLabelSpreading(n_neighbors=k, alpha=0.6, scaling=scaling, graph_cache=cache).fit(X, other)
    assert cache.searches == 1


def test_cache_lists_are_sklearn_nearest_neighbours_and_keyed_by_the_rows():
    # Reference: scikit-learn's NearestNeighbors on the Wisconsin breast cancer table
    # (continuous measurements, so no two rows tie in distance).
    X = load_breast_cancer().data
    cache = NeighbourCache(min_neighbors=20)
    for k in (3, 11, 20):
        got, index = cache.search(X, k)
        want = NearestNeighbors(n_neighbors=k).fit(X).kneighbors(X, return_distance=False)
        np.testing.assert_array_equal(got, want)
    assert cache.searches == 1
    cache.search(X[::-1].copy(), 5)  # other order: other bytes, a new search
    cache.search(X, 25)  # more neighbours than were searched: a new search
    assert cache.searches == 3
    assert len(cache._memo) == 2  # at most max_entries matrices are kept


def test_tuning_a_large_cell_searches_once_per_scaling_and_picks_the_same():
    # Reference: the plain path (scikit-learn's kNN search in every fit) on the breast cancer
    # table; the shared path fits the same rows in another order, so without ties in
    # distance it must find the same scores and parameters with at most two searches.
    data = load_breast_cancer()
    X, y = data.data, data.target
    rng = np.random.default_rng(3)
    order = rng.permutation(len(y))
    lab, unl = order[:40], order[40:]
    method = get_method("label-spreading")
    kw = dict(trials=4, seed=11, max_folds=3, n_classes=2)
    plain, plain_info = tune_params(method, X[lab], y[lab], X[unl], **kw)
    cache = NeighbourCache()
    shared, shared_info = tune_params(method, X[lab], y[lab], X[unl], graph_cache=cache, **kw)
    assert shared == plain
    assert shared_info["best_score"] == pytest.approx(plain_info["best_score"], abs=1e-9)
    # one search per feature scaling tried (4 trials x 2 folds + the final fit share them)
    assert 1 <= cache.searches <= 2


def test_large_cell_rule_and_the_cells_that_follow_it():
    # The rule: the rows a cell may see unlabeled, less its draw, are more than the cap.
    assert large_cell(5_051, 50, 5_000) is True
    assert large_cell(5_050, 50, 5_000) is False
    X, y = load_breast_cancer(return_X_y=True)
    features = {"raw": X.astype(np.float32)}
    labeled = np.arange(0, 100)
    evals = np.arange(100, 200)
    y_all = np.where(np.arange(len(y)) < 200, y, -1)
    ctx = dict(features=features, y=y_all, pools={0: labeled}, evals={0: evals},
               repeat_fold={0: 0}, unlabeled_idx=np.arange(200, len(y)),
               orders={("random", 0): np.arange(100)},
               methods={"label-spreading": get_method("label-spreading")}, n_classes=2,
               seed=0, trials=2, cv_folds=2, transductive=False)
    cell = Cell("label-spreading", 20, 0, "random")
    n_seen = len(y) - 200 + 100
    small = run_cell(CellContext(**ctx, max_unlabeled=n_seen - 20), cell)
    large = run_cell(CellContext(**ctx, max_unlabeled=n_seen - 21), cell)
    assert small["status"] == large["status"] == "ok"
    assert small["shared_graph"] is False and small["n_unlabeled_used"] == n_seen - 20
    assert large["shared_graph"] is True and large["n_unlabeled_used"] == n_seen - 21
