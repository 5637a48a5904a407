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
        """Forest output (values, or class probabilities) on an encoded design.

        Trees predict in parallel threads, but their outputs are added in tree order, from zero,
        then divided by the tree count: exactly what scikit-learn's single-threaded
        ``predict``/``predict_proba`` computes, bit for bit (its parallel version adds in
        whatever order threads finish, which changes the last digits from run to run).
        """
        X = np.ascontiguousarray(Xt, dtype=np.float32)
        regression = self.task == "regression"
        trees = self.model.estimators_

        def one(est):
            return est.predict(X, check_input=False) if regression else est.predict_proba(X, check_input=False)

        out = np.zeros(len(X) if regression else (len(X), len(self.model.classes_)), dtype=np.float64)
        block = 32
        for start in range(0, len(trees), block):
            for part in thread_map(one, trees[start:start + block], n_jobs):
                out += part
        out /= len(trees)
        return out


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
