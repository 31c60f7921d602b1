"""Holdout and nested draws: property tests (hypothesis)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from semisup import ConfigError
from semisup.study import default_budgets, nested_draws, split_holdout

class_counts = st.lists(st.integers(1, 40), min_size=2, max_size=6)


def _labels(counts, seed):
    y = np.repeat(np.arange(len(counts)), counts)
    return np.random.default_rng(seed).permutation(y)


@settings(max_examples=60, deadline=None)
@given(counts=class_counts, frac=st.floats(0.1, 0.6), seed=st.integers(0, 10_000))
def test_holdout_is_stratified_disjoint_and_deterministic(counts, frac, seed):
    y = _labels(counts, seed)
    if round(frac * len(y)) >= len(y) - len(counts):
        return
    hold, pool = split_holdout(y, frac, seed)
    assert len(np.intersect1d(hold, pool)) == 0
    assert len(hold) + len(pool) == len(y)
    again = split_holdout(y, frac, seed)
    assert np.array_equal(hold, again[0]) and np.array_equal(pool, again[1])
    for c, n_c in enumerate(counts):
        in_hold = int(np.sum(y[hold] == c))
        assert int(np.sum(y[pool] == c)) >= 1  # every class keeps a row in the pool
        # stratified: within about one row of the class's share (largest remainders; the
        # "keep one in the pool" cap can move a few rows, so allow 2 -- common practice,
        # no source)
        assert abs(in_hold - frac * n_c) <= 2.0


@settings(max_examples=60, deadline=None)
@given(counts=class_counts, seed=st.integers(0, 10_000), data=st.data())
def test_draws_nested_stratified_and_cover_classes(counts, seed, data):
    y_labeled = _labels(counts, seed)
    hold, pool = split_holdout(y_labeled, 0.3, seed) if len(y_labeled) > 2 * len(counts) else (
        np.empty(0, dtype=np.int64), np.arange(len(y_labeled)))
    y_pool = y_labeled[pool]
    budgets = sorted(set(data.draw(st.lists(st.integers(1, len(pool)), min_size=1,
                                            max_size=6))))
    draws = nested_draws(y_pool, budgets, seed)
    previous = None
    shares = np.bincount(y_pool, minlength=len(counts)) / len(y_pool)
    for b in budgets:
        d = draws[b]
        assert len(d) == b and len(np.unique(d)) == b
        # no holdout row in a draw: draws index the pool, which excludes the holdout
        assert len(np.intersect1d(pool[d], hold)) == 0
        if previous is not None:
            assert set(previous) <= set(d)  # nested
        previous = d
        present = np.unique(y_pool[d])
        k = len(counts)
        if b >= k:
            assert len(present) == k  # every class once the budget allows
        got = np.bincount(y_pool[d], minlength=k)
        # stratified: each class within 2 rows of its proportional share (the one-of-each
        # rule can put a class 1 above its share; common practice, no source)
        avail = np.bincount(y_pool, minlength=k)
        assert np.all(np.abs(got - b * shares) <= 2.0 + (got == avail) * b)
    again = nested_draws(y_pool, budgets, seed)
    assert all(np.array_equal(draws[b], again[b]) for b in budgets)  # deterministic


def test_holdout_count_and_bad_values():
    y = _labels([20, 20], 0)
    hold, pool = split_holdout(y, 10, 0)
    assert len(hold) == 10 and np.bincount(y[hold]).tolist() == [5, 5]
    with pytest.raises(ConfigError, match="holdout"):
        split_holdout(y, 40, 0)
    with pytest.raises(ConfigError, match="holdout"):
        split_holdout(y, 1.5, 0)
    with pytest.raises(ConfigError, match="budget 99"):
        nested_draws(y, [5, 99], 0)


def test_default_budgets_geometric_from_two_per_class_to_pool():
    b = default_budgets(10, 280)
    assert b[0] == 20 and b[-1] == 280 and 5 <= len(b) <= 6
    ratios = np.diff(np.log(b))
    assert np.allclose(ratios, ratios.mean(), atol=0.05)  # geometric spacing
    assert default_budgets(10, 15) == [15]
