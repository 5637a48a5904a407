"""Float32 split semantics shared by scikit-learn, ONNX and the printed code (METHODS.md trap)."""
from __future__ import annotations

import numpy as np
from sklearn.tree import DecisionTreeRegressor

from pocketforest.thresholds import double_split, snap_tree_thresholds


def test_snapping_keeps_every_prediction_and_makes_thresholds_float32():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(3000, 3))
    y = X[:, 0] + rng.normal(size=3000)
    tree = DecisionTreeRegressor(max_depth=10, random_state=0).fit(X, y)
    before = tree.predict(X)
    snap_tree_thresholds(tree)
    np.testing.assert_array_equal(tree.predict(X), before)
    thr = tree.tree_.threshold[tree.tree_.children_left != -1]
    np.testing.assert_array_equal(thr.astype(np.float32).astype(np.float64), thr)


def test_double_comparison_agrees_with_float32_rounding_at_the_edges():
    rng = np.random.default_rng(1)
    for t in np.concatenate([rng.normal(size=300), [0.0, 1.0, -2.5, 1e-30]]).astype(np.float32):
        op, bound = double_split(float(t))
        edges = [bound, np.nextafter(bound, -np.inf), np.nextafter(bound, np.inf), float(t),
                 float(np.nextafter(t, np.float32(np.inf)))]
        for x in edges:
            want = np.float32(x) <= t
            got = x <= bound if op == "<=" else x < bound
            assert want == got, (t, x)
