"""k-nearest-neighbour lists searched once and shared by the fits of one study cell.

A cell tunes a graph method with ``trials x folds`` fits and one final fit. On a large table
every one of them spreads labels over the same rows (the draw and the unlabeled rows; a
validation fold's rows only lose their labels), so the exact neighbour search, which is
nearly all of a fit's time (20,000 rows x 56 columns: 99% of a ``label-spreading`` fit), can
be done once per feature scaling and reused. :class:`NeighbourCache` keeps the lists of a
matrix keyed by its bytes, so a fit that sees the same rows in the same order gets them
without searching again; the study hands one cache to the fits of a large cell
(``semisup.study._tuning``), the same way scikit-learn estimators take a ``memory`` cache.
"""

from __future__ import annotations

import hashlib

import numpy as np
from scipy import sparse

__all__ = ["NeighbourCache", "connectivity", "neighbour_sum_proba"]


def connectivity(indices: np.ndarray) -> sparse.csr_matrix:
    """The ``(n, n)`` 0/1 graph whose row ``i`` marks ``indices[i]`` (a row's k nearest
    neighbours, itself included): scikit-learn's ``kneighbors_graph(mode="connectivity")``
    built from given lists."""
    n, k = indices.shape
    return sparse.csr_matrix(
        (np.ones(n * k), indices.ravel(), np.arange(0, n * k + 1, k)), shape=(n, n))


def neighbour_sum_proba(label_distributions: np.ndarray, indices: np.ndarray) -> np.ndarray:
    """Class probabilities of query rows as scikit-learn's ``LabelSpreading(kernel="knn")``
    gives them: the sum of the label distributions of each query row's neighbours
    (``indices``, ``(n_query, k)``), normalised to one."""
    proba = label_distributions[indices].sum(axis=1)
    return proba / proba.sum(axis=1, keepdims=True)


class NeighbourCache:
    """Exact k-nearest-neighbour lists of the matrices it is asked about, searched once each.

    Parameters
    ----------
    min_neighbors : int
        Neighbours searched at least (the largest ``n_neighbors`` a tuning run may ask for),
        so one search serves every trial; a request for more searches again.
    max_entries : int
        Matrices kept (the oldest is dropped beyond it): one per feature scaling of a cell.
    """

    def __init__(self, min_neighbors: int = 20, max_entries: int = 2):
        self.min_neighbors = min_neighbors
        self.max_entries = max_entries
        self._memo: dict[tuple, tuple] = {}
        self.searches = 0

    @staticmethod
    def _key(X: np.ndarray) -> tuple:
        X = np.ascontiguousarray(X)
        digest = hashlib.blake2b(X.view(np.uint8).ravel(), digest_size=16).hexdigest()
        return (X.shape, X.dtype.str, digest)

    def search(self, X: np.ndarray, n_neighbors: int):
        """``(indices, index)``: each row's ``n_neighbors`` nearest rows of ``X`` (itself
        first unless it has duplicates), ``(n, n_neighbors)``, and the fitted
        ``NearestNeighbors`` over ``X`` for queries of other rows."""
        from sklearn.neighbors import NearestNeighbors

        key = self._key(X)
        hit = self._memo.get(key)
        if hit is None or hit[0].shape[1] < n_neighbors:
            k = int(min(max(n_neighbors, self.min_neighbors), X.shape[0]))
            index = NearestNeighbors(n_neighbors=k).fit(X)
            hit = (index.kneighbors(X, k, return_distance=False), index)
            self.searches += 1
            self._memo.pop(key, None)
            while len(self._memo) >= self.max_entries:
                self._memo.pop(next(iter(self._memo)))
            self._memo[key] = hit
        return hit[0][:, :n_neighbors], hit[1]

    def __deepcopy__(self, memo):  # scikit-learn's clone copies parameters: share the cache
        return self

    def __repr__(self) -> str:
        return f"NeighbourCache(entries={len(self._memo)}, searches={self.searches})"
