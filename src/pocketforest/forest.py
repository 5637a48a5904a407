"""Grow the random forest (Breiman 2001) on the discovery rows, with out-of-bag error.

The forest sits in a scikit-learn Pipeline behind the shared preprocessing so that skl2onnx can
convert the whole thing, raw inputs included.
"""
from __future__ import annotations

import sys
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.ensemble import RandomForestClassifier, RandomForestRegressor
from sklearn.metrics import accuracy_score, mean_squared_error, r2_score
from sklearn.pipeline import Pipeline

from .defaults import LEAF_BUDGET, TREES, leaf_cap  # noqa: F401 (re-exported)
from .design import DesignColumn
from .thresholds import snap_tree_thresholds
from .threads import thread_map


@dataclass
class ForestFit:
    pipeline: Pipeline
    columns: list[DesignColumn]
    task: str
    oob: dict[str, float]
    oob_prediction: np.ndarray  # regression: values; classification: probabilities [n, K]
    settings: dict = field(default_factory=dict)

    @property
    def model(self) -> RandomForestRegressor | RandomForestClassifier:
        return self.pipeline.named_steps["forest"]

    @property
    def classes(self) -> list[str] | None:
        return [str(c) for c in self.model.classes_] if self.task == "classification" else None

    def predict_design(self, Xt: np.ndarray, n_jobs: int = -1) -> np.ndarray:
        """Forest output (values, or class probabilities) on an encoded design."""
        return tree_average(self.model.estimators_, Xt, self.task, n_jobs)


#: Trees predicted per round of threads; their outputs are then added in tree order.
TREE_BLOCK = 32
#: Below this many rows, threads cost more than they save (1,000 rows x 100 trees: 8.1 ms on one
#: thread, 6.2 ms on two), so small batches are predicted on one thread; the sum is the same.
SMALL_BATCH = 500


def tree_average(trees: list, Xt: np.ndarray, task: str, n_jobs: int = -1) -> np.ndarray:
    """Mean of the trees' outputs, added in tree order from zero and divided by the tree count.

    That is exactly what scikit-learn's single-threaded ``predict``/``predict_proba`` computes,
    bit for bit; its parallel version adds in whatever order threads finish, which changes the
    last digits from run to run. Trees still predict in parallel threads (they release the GIL).
    The one copy of the forest average: the pipeline, discovery and the tree stage all use it.
    """
    X = np.ascontiguousarray(Xt, dtype=np.float32)
    regression = task == "regression"

    def one(est):
        return est.predict(X, check_input=False) if regression else est.predict_proba(X, check_input=False)

    jobs = 1 if len(X) < SMALL_BATCH else n_jobs
    out = None
    for start in range(0, len(trees), TREE_BLOCK):
        for part in thread_map(one, trees[start:start + TREE_BLOCK], jobs):
            out = part.astype(np.float64) if out is None else out + part
    if out is None:
        raise ValueError("a forest with no trees")
    return out / len(trees)


def fit_forest(X: pd.DataFrame, y: np.ndarray, preprocessor, columns: list[DesignColumn], task: str, *,
               trees: int = TREES, min_samples_leaf: int = 5, max_features: float | str | None = None,
               max_leaves: int | None = None, seed: int = 0, quiet: bool = False,
               n_jobs: int | None = -1) -> ForestFit:
    """Fit preprocessing and forest together; grow in chunks so progress can be shown.

    ``max_leaves``: most leaves per tree; None = :func:`leaf_cap` (keeps forest.onnx small),
    0 = no cap (trees grow until ``min_samples_leaf`` stops them).
    """
    if max_leaves is None:
        n_classes = len(np.unique(y)) if task == "classification" else None
        max_leaves = leaf_cap(trees, n_classes)
    max_leaf_nodes = int(max_leaves) if max_leaves and max_leaves > 0 else None
    if max_leaf_nodes is not None and max_leaf_nodes < 2:
        raise ValueError("max_leaves must be 0 (no cap) or at least 2")
    if task == "regression":
        max_features = max_features if max_features is not None else 1.0 / 3.0
        forest = RandomForestRegressor(n_estimators=0, min_samples_leaf=min_samples_leaf,
                                       max_features=max_features, max_leaf_nodes=max_leaf_nodes, random_state=seed,
                                       warm_start=True, n_jobs=n_jobs)
    else:
        max_features = max_features if max_features is not None else "sqrt"
        forest = RandomForestClassifier(n_estimators=0, min_samples_leaf=min_samples_leaf,
                                        max_features=max_features, max_leaf_nodes=max_leaf_nodes, random_state=seed,
                                        warm_start=True, n_jobs=n_jobs)
    Xt = preprocessor.fit_transform(X)
    chunk = max(1, min(50, trees))
    grown = 0
    while grown < trees:
        grown = min(trees, grown + chunk)
        forest.set_params(n_estimators=grown, oob_score=(grown == trees))
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", message="Some inputs do not have OOB scores")
            forest.fit(Xt, y)
        if not quiet:
            print(f"\rgrowing forest: {grown}/{trees} trees", end="", file=sys.stderr, flush=True)
    if not quiet:
        print(file=sys.stderr)
    for est in forest.estimators_:
        snap_tree_thresholds(est)
    # Parallel prediction adds tree outputs in whatever order threads finish, which changes the
    # last digit from run to run; predicting on one thread keeps results reproducible.
    forest.set_params(n_jobs=1)
    pipeline = Pipeline([("prep", preprocessor), ("forest", forest)])
    # With few trees some rows are in every bootstrap and have no OOB prediction: leave them out.
    if task == "regression":
        pred = forest.oob_prediction_
        ok = np.isfinite(pred)
        oob = {"mse": float(mean_squared_error(y[ok], pred[ok])), "r2": float(r2_score(y[ok], pred[ok]))}
    else:
        pred = forest.oob_decision_function_
        ok = np.all(np.isfinite(pred), axis=1)
        labels = forest.classes_[np.argmax(pred[ok], axis=1)]
        oob = {"error_rate": float(1.0 - accuracy_score(y[ok], labels))}
    oob["rows_with_oob"] = int(ok.sum())
    settings = {"trees": trees, "min_samples_leaf": min_samples_leaf,
                "max_features": max_features, "max_leaf_nodes": max_leaf_nodes, "bootstrap": True}
    return ForestFit(pipeline, columns, task, oob, np.asarray(pred), settings)
