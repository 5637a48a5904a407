"""Partial dependence, accumulated local effects and a fast forest predictor.

Everything here works on a generic ``predict(X) -> array`` over the prepared design (numbers
after imputation and one-hot encoding), so the same code serves the forest, a surrogate forest
and the analytic functions the tests use. A variable is a *group* of design columns: one column
for a number, its indicator columns for a category, which always move together.
"""
from __future__ import annotations

from typing import Callable

import numpy as np

from ..forest import tree_average

Predict = Callable[[np.ndarray], np.ndarray]

# Rows x columns of one predict batch; keeps memory flat whatever the design width.
BATCH_CELLS = 4_000_000


def forest_predictor(model, task: str) -> Predict:
    """``predict(X)`` = the mean of the forest's trees (values, or class probabilities), through
    the one deterministic forest average (:func:`pocketforest.forest.tree_average`)."""
    trees = list(model.estimators_)
    return lambda X: tree_average(trees, X, task)


def _batched_means(predict: Predict, background: np.ndarray, cols: list[int], values: np.ndarray) -> np.ndarray:
    """For each row of ``values``: mean prediction over ``background`` with ``cols`` set to it."""
    n, p = background.shape
    g = len(values)
    per = max(1, BATCH_CELLS // max(1, n * p))
    out = []
    for start in range(0, g, per):
        chunk = values[start:start + per]
        X = np.tile(background, (len(chunk), 1))
        X[:, cols] = np.repeat(chunk, n, axis=0)
        pred = np.asarray(predict(X), dtype=np.float64)
        out.append(pred.reshape(len(chunk), n, *pred.shape[1:]).mean(axis=1))
    return np.concatenate(out, axis=0)


def partial_dependence_brute(predict: Predict, background: np.ndarray, cols: list[int],
                             values: np.ndarray) -> np.ndarray:
    """Partial dependence (Friedman 2001, eq. 9) at ``values`` ([g, len(cols)]), averaged over
    ``background`` rows: one predict call per batch, no row loops."""
    values = np.asarray(values, dtype=np.float64).reshape(len(values), len(cols))
    return _batched_means(predict, np.asarray(background, dtype=np.float64), list(cols), values)


def partial_dependence_recursion(model, background: np.ndarray, col: int, grid: np.ndarray) -> np.ndarray:
    """Exact partial dependence of a regression forest on one design column, by scikit-learn's
    tree recursion (the weighted traversal of Friedman 2001, section 8.2)."""
    from sklearn.inspection import partial_dependence
    res = partial_dependence(model, np.asarray(background, dtype=np.float32), [col], method="recursion",
                             custom_values={col: np.asarray(grid, dtype=np.float64)}, kind="average")
    return np.asarray(res["average"][0], dtype=np.float64)


def ale_numeric(predict: Predict, X: np.ndarray, col: int, edges: np.ndarray) -> np.ndarray:
    """First-order accumulated local effect (Apley & Zhu 2020, eq. 15) at ``edges``.

    Each row moves only across the interval it lies in, so the curve never relies on predictions
    far from the data, which is what makes it safer than partial dependence under correlation.
    The result is centred so its mean over the rows is zero.
    """
    X = np.asarray(X, dtype=np.float64)
    x = X[:, col]
    edges = np.asarray(edges, dtype=np.float64)
    k = len(edges) - 1
    idx = np.clip(np.searchsorted(edges, x, side="left") - 1, 0, k - 1)
    lo, hi = X.copy(), X.copy()
    lo[:, col], hi[:, col] = edges[idx], edges[idx + 1]
    both = np.asarray(predict(np.vstack([lo, hi])), dtype=np.float64)
    diff = both[len(X):] - both[:len(X)]
    diff = diff.reshape(len(X), -1)
    counts = np.bincount(idx, minlength=k).astype(float)
    sums = np.stack([np.bincount(idx, weights=diff[:, q], minlength=k) for q in range(diff.shape[1])], axis=1)
    local = np.divide(sums, counts[:, None], out=np.zeros_like(sums), where=counts[:, None] > 0)
    acc = np.vstack([np.zeros((1, local.shape[1])), np.cumsum(local, axis=0)])
    # Centre as in Apley & Zhu: the row-weighted mean of the interval midpoints is zero.
    mids = 0.5 * (acc[1:] + acc[:-1])
    acc = acc - (counts[:, None] * mids).sum(axis=0) / max(counts.sum(), 1.0)
    return acc if acc.shape[1] > 1 else acc[:, 0]


def quantile_grid(x: np.ndarray, points: int = 25, lo: float = 0.025, hi: float = 0.975) -> np.ndarray:
    """Distinct values at evenly spaced quantiles: the grid follows the data, not the range."""
    x = np.asarray(x, dtype=np.float64)
    x = x[np.isfinite(x)]
    return np.unique(np.quantile(x, np.linspace(lo, hi, points)))
