"""Out-of-bag permutation importance per raw column (Breiman 2001).

For each tree, the error on its out-of-bag rows is measured before and after permuting one raw
column among those rows; a categorical column's indicator columns move together, so the column is
judged as the user sees it. Importance is the mean increase over trees, its standard error the
standard deviation over trees divided by the square root of the number of trees.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sklearn.ensemble._forest import _generate_unsampled_indices, _get_n_samples_bootstrap

from .forest import ForestFit


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


def oob_permutation_importance(fit: ForestFit, Xt: np.ndarray, y: np.ndarray, features: list[str],
                               seed: int) -> list[Importance]:
    """Importance of each raw feature; ``Xt`` is the discovery design after preprocessing."""
    forest = fit.model
    rng = np.random.default_rng(seed)
    groups = {f: [i for i, c in enumerate(fit.columns) if c.feature == f] for f in features}
    Xt = np.asarray(Xt, dtype=np.float32)
    if fit.task == "classification":
        y_code = np.searchsorted(forest.classes_, y)
    increases = np.zeros((len(forest.estimators_), len(features)))
    for t, (est, rows) in enumerate(zip(forest.estimators_, oob_rows(forest, len(y)))):
        if len(rows) < 2:
            continue
        Xo = Xt[rows]
        base = _tree_error(est, Xo, y[rows] if fit.task == "regression" else y_code[rows], fit.task)
        perm = rng.permutation(len(rows))
        for j, f in enumerate(features):
            Xp = Xo.copy()
            Xp[:, groups[f]] = Xo[perm][:, groups[f]]
            err = _tree_error(est, Xp, y[rows] if fit.task == "regression" else y_code[rows], fit.task)
            increases[t, j] = err - base
    mean = increases.mean(axis=0)
    se = increases.std(axis=0, ddof=1) / np.sqrt(len(increases))
    out = [Importance(f, float(m), float(s)) for f, m, s in zip(features, mean, se)]
    return sorted(out, key=lambda r: -r.mean)


def _tree_error(est, X: np.ndarray, y: np.ndarray, task: str) -> float:
    """Mean squared error (regression) or share misclassified (classification) of one tree."""
    if task == "regression":
        return float(np.mean((est.predict(X) - y) ** 2))
    return float(np.mean(np.argmax(est.predict_proba(X), axis=1) != y))
