"""Searches for small trees over binned thresholds (tree_search): the exact depth-two solver and
the depth-three dynamic programme against exhaustive enumeration (constructed truth), and
against scikit-learn's greedy CART on the same candidate thresholds (reference library)."""
from __future__ import annotations

import itertools

import numpy as np
import pytest
from sklearn.tree import DecisionTreeRegressor

from pocketforest.tree_search import (bin_design, depth_two, lookahead_tree, optimal_tree, predict_codes,
                                      tree_sse)


def _data(n=90, p=3, q=1, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(size=(n, p)).astype(np.float32)
    Y = np.column_stack([np.sin(4 * X[:, 0]) + X[:, 1] * X[:, 2] + rng.normal(0, 0.1, n) for _ in range(q)])
    return X, Y


def _sse(Y):
    return float(((Y - Y.mean(0)) ** 2).sum()) if len(Y) else 0.0


def _brute(codes, Y, splits, depth, leaves, min_leaf):
    """Least squared error over every tree of at most this depth and leaves (exhaustive)."""
    best = _sse(Y)
    if depth == 0 or leaves < 2:
        return best
    for col, b in splits:
        left = codes[:, col] <= b
        if left.sum() < min_leaf or (~left).sum() < min_leaf:
            continue
        for kl in range(1, leaves):
            c = (_brute(codes[left], Y[left], splits, depth - 1, kl, min_leaf)
                 + _brute(codes[~left], Y[~left], splits, depth - 1, leaves - kl, min_leaf))
            best = min(best, c)
    return best


@pytest.mark.parametrize("q", [1, 3])
def test_depth_two_is_the_exhaustive_optimum(q):
    X, Y = _data(q=q)
    b = bin_design(X, bins=4)
    splits = [(j, t) for j in range(X.shape[1]) for t in range(len(b.edges[j]))]
    d2 = depth_two(b.codes, Y, b.width, min_leaf=4)
    for k in (1, 2, 3, 4):
        # sums of squares of ~90 rows: agreement to rounding of the cumulative sums
        assert d2.cost[k] == pytest.approx(_brute(b.codes, Y, splits, 2, k, 4), rel=1e-9, abs=1e-9)


def test_depth_three_is_the_exhaustive_optimum_and_beats_cart_on_the_same_thresholds():
    X, Y = _data(n=70)
    b = bin_design(X, bins=3)
    splits = [(j, t) for j in range(X.shape[1]) for t in range(len(b.edges[j]))]
    for leaves in (5, 8):
        tree = optimal_tree(b, Y, leaves, min_leaf=3)
        assert tree.leaves() <= leaves and tree.depth() <= 3
        assert tree_sse(tree, Y) == pytest.approx(_brute(b.codes, Y, splits, 3, leaves, 3), rel=1e-9, abs=1e-9)
    # greedy CART grown on the codes sees the same candidate thresholds (midpoints between codes)
    cart = DecisionTreeRegressor(max_depth=3, min_samples_leaf=3, random_state=0).fit(b.codes, Y[:, 0])
    assert tree_sse(optimal_tree(b, Y, 8, 3), Y) <= float(((Y[:, 0] - cart.predict(b.codes)) ** 2).sum()) + 1e-9


def test_lookahead_grows_to_the_budget_and_predicts_leaf_means():
    X, Y = _data(n=200)
    b = bin_design(X, bins=8)
    tree = lookahead_tree(b, Y, 7, min_leaf=5)
    assert tree.leaves() == 7
    out = predict_codes(tree, b.code(X), Y)
    assert _sse(Y) > ((Y - out) ** 2).sum() == pytest.approx(tree_sse(tree, Y), rel=1e-9)

    def leaves(node):
        return [node] if node.column is None else leaves(node.left) + leaves(node.right)
    assert all(len(leaf.rows) >= 5 for leaf in leaves(tree))


def test_thresholds_sit_between_values_and_compare_as_float32():
    X = np.array([[0.1], [0.2], [0.2], [0.3]], dtype=np.float32)
    b = bin_design(X, bins=8)
    assert len(b.edges[0]) == 2 and all(np.float32(t) == t for t in b.edges[0])
    np.testing.assert_array_equal(b.codes[:, 0], [0, 1, 1, 2])
    np.testing.assert_array_equal(b.code(X), b.codes)
