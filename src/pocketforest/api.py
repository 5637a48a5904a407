"""Three-line use from a notebook: fit on a DataFrame, look at the result, write or load a bundle.

    import pocketforest as pf
    result = pf.fit(df, target="outcome", random_state=1)
    result.write("exports/outcome");  pf.load_bundle("exports/outcome").predict(new_rows)
"""
from __future__ import annotations

import os
from typing import Sequence

import numpy as np
import pandas as pd

from .defaults import TREES


def fit(data: pd.DataFrame | str | os.PathLike, target: str, *, task: str = "auto",
        categorical: Sequence[str] = (), ignore: Sequence[str] = (), random_state: int = 0,
        n_trees: int = TREES, tree_depth: int | None = None, tree_leaves: int | None = None,
        split: tuple[float, float, float] | None = None, quiet: bool = True, decimal_comma: bool = False):
    """Run the whole job on a DataFrame (or a data file) and return the :class:`Distillation`.

    ``decimal_comma``: a data file's numbers are written 6,8 (and a .csv is semicolon-separated),
    as ``--decimal-comma`` on the command line.

    ``n_trees`` defaults to :data:`pocketforest.defaults.TREES`, the same forest as the command line's.
    """
    from .intake import load, prepare
    from .pipeline import Settings, distill
    if isinstance(data, pd.DataFrame):
        table = prepare(data, target, task=task, categorical=categorical, ignore=ignore, source="<DataFrame>")
    else:
        table = load(data, target, task=task, categorical=categorical, ignore=ignore, decimal_comma=decimal_comma)
    settings = Settings(trees=n_trees, tree_depth=tree_depth, tree_leaves=tree_leaves, seed=random_state,
                        split=split, quiet=quiet)
    return distill(table, settings)


class Bundle:
    """A written bundle, scored through onnxruntime only (no fitting libraries needed)."""

    def __init__(self, path: str | os.PathLike):
        from .scoring.bundle_io import read_manifest
        self.path = str(path)
        self.manifest = read_manifest(path)
        self._scorers: dict = {}
        self._explainer = None

    @property
    def task(self) -> str:
        return self.manifest["task"]

    @property
    def classes(self) -> list[str] | None:
        return self.manifest.get("classes")

    def predict(self, data: pd.DataFrame, model: str = "forest") -> np.ndarray:
        """Regression: values. Classification: labels (see :meth:`predict_proba`)."""
        out = self._run(data, model)
        return out["prediction"] if self.task == "regression" else out["label"]

    def predict_proba(self, data: pd.DataFrame, model: str = "forest") -> np.ndarray:
        if self.task != "classification":
            raise ValueError("predict_proba is for classification bundles")
        return self._run(data, model)["probabilities"]

    def explain(self, data: pd.DataFrame, model: str | None = None) -> pd.DataFrame:
        """Why each row scores as it does: for the equation the linear predictor and each term's
        contribution on the link scale (intercept included; they add up to it), for the tree the
        leaf and the rules the row followed. ``model``: "equation", "tree" or None for both (the
        tree alone when the bundle has no equation). Rows keep ``data``'s index; the columns are those ``score --explain`` writes."""
        from .scoring.explain import Explainer
        if model not in (None, "equation", "tree"):
            raise ValueError("explain takes model='equation', 'tree' or None (both); the forest has no short reason")
        if self._explainer is None:
            self._explainer = Explainer(self.path, self.manifest)
        from .scoring.bundle_io import models_of
        typed = self._typed(data)
        parts = []
        if model == "equation" or (model is None and "equation" in models_of(self.manifest)):
            parts.append(self._explainer.equation(typed))
        if model in (None, "tree"):
            parts.append(self._explainer.tree(typed))
        return pd.concat(parts, axis=1)

    def _typed(self, data: pd.DataFrame) -> pd.DataFrame:
        from .scoring.score import features_of
        from .intake.coerce import coerce_for_scoring
        return coerce_for_scoring(data, features_of(self.manifest), source="<DataFrame>")

    def _run(self, data: pd.DataFrame, model: str) -> dict:
        from .scoring.runtime import Scorer
        if model not in self._scorers:
            self._scorers[model] = Scorer(self.path, model, self.manifest)
        return self._scorers[model].run(self._typed(data))


def load_bundle(path: str | os.PathLike) -> Bundle:
    return Bundle(path)
