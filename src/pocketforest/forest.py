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

from .design import DesignColumn
from .thresholds import snap_tree_thresholds


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


def fit_forest(X: pd.DataFrame, y: np.ndarray, preprocessor, columns: list[DesignColumn], task: str, *,
               trees: int = 500, min_samples_leaf: int = 5, max_features: float | str | None = None,
               seed: int = 0, quiet: bool = False, n_jobs: int | None = -1) -> ForestFit:
    """Fit preprocessing and forest together; grow in chunks so progress can be shown."""
    if task == "regression":
        max_features = max_features if max_features is not None else 1.0 / 3.0
        forest = RandomForestRegressor(n_estimators=0, min_samples_leaf=min_samples_leaf,
                                       max_features=max_features, random_state=seed,
                                       warm_start=True, n_jobs=n_jobs)
    else:
        max_features = max_features if max_features is not None else "sqrt"
        forest = RandomForestClassifier(n_estimators=0, min_samples_leaf=min_samples_leaf,
                                        max_features=max_features, random_state=seed,
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
                "max_features": max_features, "bootstrap": True}
    return ForestFit(pipeline, columns, task, oob, np.asarray(pred), settings)
