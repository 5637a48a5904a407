"""Out-of-bag permutation importance per raw column (Breiman 2001).

For each tree, the error (mean squared error; for classes the Brier score) on its out-of-bag rows is measured before and after permuting one raw
column among those rows; a categorical column's indicator columns move together, so the column is
judged as the user sees it. Importance is the mean increase over trees, its standard error the
standard deviation over trees divided by the square root of the number of trees.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sklearn.ensemble._forest import _generate_unsampled_indices, _get_n_samples_bootstrap

from .forest import ForestFit
from .threads import thread_map


@dataclass(frozen=True)
class Importance:
    feature: str
    mean: float
    se: float

    def to_dict(self) -> dict:
        return {"feature": self.feature, "mean": self.mean, "se": self.se}


def oob_rows(forest, n_rows: int) -> list[np.ndarray]:
    """Rows each tree's bootstrap left out, from the seeds scikit-learn used to draw it.

    These helpers are private to scikit-learn (the ones its own OOB score uses); newer releases
    added a ``sample_weight`` argument, so both signatures are accepted.
    """
    try:
        n_boot = _get_n_samples_bootstrap(n_rows, forest.max_samples, None)
        return [_generate_unsampled_indices(est.random_state, n_rows, n_boot, None) for est in forest.estimators_]
    except TypeError:
        n_boot = _get_n_samples_bootstrap(n_rows, forest.max_samples)
        return [_generate_unsampled_indices(est.random_state, n_rows, n_boot) for est in forest.estimators_]


@dataclass
class Increases:
    """Out-of-bag error increases when each raw feature is permuted, kept two ways.

    ``per_tree`` [trees, features]: each tree's mean increase over its out-of-bag rows (Breiman's
    importance is their mean). ``per_row`` [rows, features]: each row's increase averaged over the
    trees that left it out (NaN for a row no tree left out). Rows, unlike trees, are nearly
    independent draws, so the row-level standard error reflects how much the importance would
    move with new data, which the spread over trees (all grown on the same rows) does not.
    """
    per_tree: np.ndarray
    per_row: np.ndarray


def oob_increases(fit: ForestFit, Xt: np.ndarray, y: np.ndarray, features: list[str],
                  seed: int, n_jobs: int = -1) -> Increases:
    """Every tree's out-of-bag error increase per row and raw feature (``Xt``: discovery design).

    Trees are scored in parallel threads (tree prediction releases the GIL); each tree's
    permutation is drawn up front in tree order and the per-row sums are added in tree order, so
    the numbers do not depend on the threads. Importance (:func:`summarise`) and materiality
    (:mod:`pocketforest.discovery.materiality`) both read this one result.
    """
    forest = fit.model
    rng = np.random.default_rng(seed)
    groups = [[i for i, c in enumerate(fit.columns) if c.feature == f] for f in features]
    Xt = np.ascontiguousarray(Xt, dtype=np.float32)
    target = y if fit.task == "regression" else np.searchsorted(forest.classes_, y)
    jobs = []
    for est, rows in zip(forest.estimators_, oob_rows(forest, len(y))):
        perm = rng.permutation(len(rows)) if len(rows) >= 2 else None
        jobs.append((est, rows, perm))
    results = thread_map(_tree_increases, [(est, Xt, target, rows, perm, groups, fit.task)
                                           for est, rows, perm in jobs], n_jobs)
    per_tree = np.zeros((len(jobs), len(features)))
    sums = np.zeros((len(y), len(features)))
    counts = np.zeros(len(y))
    for t, ((_, rows, _), inc) in enumerate(zip(jobs, results)):
        if inc is None:
            continue
        per_tree[t] = inc.mean(axis=0)
        sums[rows] += inc
        counts[rows] += 1
    with np.errstate(invalid="ignore", divide="ignore"):
        per_row = sums / counts[:, None]
    per_row[counts == 0] = np.nan
    return Increases(per_tree, per_row)


def per_tree_increases(fit: ForestFit, Xt: np.ndarray, y: np.ndarray, features: list[str],
                       seed: int, n_jobs: int = -1) -> np.ndarray:
    """[trees, features] mean out-of-bag increases (see :func:`oob_increases`)."""
    return oob_increases(fit, Xt, y, features, seed, n_jobs).per_tree


def summarise(increases: np.ndarray, features: list[str]) -> list[Importance]:
    """Mean increase over trees and its standard error (sd over trees / sqrt(trees)), sorted."""
    t = len(increases)
    mean = increases.mean(axis=0)
    se = increases.std(axis=0, ddof=1) / np.sqrt(t) if t > 1 else np.full(len(features), np.inf)
    out = [Importance(f, float(m), float(s)) for f, m, s in zip(features, mean, se)]
    return sorted(out, key=lambda r: -r.mean)


def oob_permutation_importance(fit: ForestFit, Xt: np.ndarray, y: np.ndarray, features: list[str],
                               seed: int, n_jobs: int = -1) -> list[Importance]:
    """Importance of each raw feature (Breiman 2001), strongest first."""
    return summarise(per_tree_increases(fit, Xt, y, features, seed, n_jobs), features)


def _tree_increases(est, Xt: np.ndarray, target: np.ndarray, rows: np.ndarray, perm: np.ndarray | None,
                    groups: list[list[int]], task: str) -> np.ndarray | None:
    """Per-row error increase [oob rows, features] of one tree when each feature is shuffled.

    One working copy is shuffled and restored column group by column group instead of copying
    the block once per feature; prediction skips scikit-learn's input checks (the block is
    already float32 and C-ordered), which otherwise cost more than the prediction itself.
    """
    if perm is None:
        return None
    Xo = Xt[rows]
    yo = target[rows]
    base = _row_errors(est, Xo, yo, task)
    shuffled = Xo[perm]
    Xp = Xo.copy()
    out = np.empty((len(rows), len(groups)))
    for j, cols in enumerate(groups):
        Xp[:, cols] = shuffled[:, cols]
        out[:, j] = _row_errors(est, Xp, yo, task) - base
        Xp[:, cols] = Xo[:, cols]
    return out


def _row_errors(est, X: np.ndarray, y: np.ndarray, task: str) -> np.ndarray:
    """Squared error of one tree per row: of its value (regression), or of its class
    probabilities against the one-hot outcome (classification, the Brier score summed over
    classes).

    The Brier score rather than the share misclassified: a permutation that moves probabilities
    without flipping the top class still counts, so small effects show with far fewer rows
    (a proper scoring rule; Brier 1950, Monthly Weather Review 78:1-3).
    """
    if task == "regression":
        return (est.predict(X, check_input=False) - y) ** 2
    proba = est.predict_proba(X, check_input=False)
    proba[np.arange(len(y)), y] -= 1.0
    return np.sum(proba * proba, axis=1)
