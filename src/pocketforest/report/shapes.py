"""Shape panels: the forest's partial dependence on one variable beside the equation's.

The forest curve is Friedman's (2001) partial dependence from scikit-learn ``partial_dependence``
(the exact ``recursion`` method for regression forests on numeric columns, ``brute`` on a
sample of discovery rows otherwise). When the discovery step already recorded a curve on the
prediction's scale (``discovery.shapes[var]``: ``grid``, ``pd``, ``scale``), that curve is used as is. The equation's curve is its own partial
dependence on the same grid: the fitted GLM evaluated (through its expression trees) on the same
sample rows with the variable set to each grid value, averaged — so both lines answer the same
question and can be read against each other.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator
from sklearn.inspection import partial_dependence

from ..design import model_frame

GRID = 20
SAMPLE = 150
BRUTE_GRID = 12
BRUTE_SAMPLE = 80
MAX_PANELS = 6
MAX_RECURSION_LEVELS = 10  # 2**10 indicator combinations at most


def material_variables(r, m: dict) -> list[str]:
    """Variables that earn a panel: those with a stored shape, else clearly important ones.

    'Clearly important' is mean importance above twice its standard error (the importance's own
    uncertainty, common practice); when none qualifies the three highest are shown.
    """
    order = [i["feature"] for i in m["importance"]]
    stored = [v for v in order if v in r.discovery.shapes]
    if stored:
        return stored[:MAX_PANELS]
    clear = [i["feature"] for i in m["importance"]
             if i["mean"] > 0 and (i["se"] is None or i["mean"] > 2 * i["se"])]
    return (clear or order[:3])[:MAX_PANELS]


def shape_curves(r, m: dict, variables: list[str]) -> list[dict]:
    rng = np.random.default_rng(int(m.get("seed", 0)))
    disc = r.table.data.iloc[r.splits.discovery].reset_index(drop=True)
    sample = disc.iloc[np.sort(rng.choice(len(disc), min(SAMPLE, len(disc)), replace=False))].reset_index(drop=True)
    kinds = {f.name: f for f in r.table.features}
    out = []
    for var in variables:
        f = kinds[var]
        stored = _stored(r, var)
        grid, forest = stored if stored else _forest_pd(r, disc, sample, f)
        equation = _equation_pd(r, sample, var, grid, f.kind) if r.equation is not None else None
        scale = _scale(r)
        if stored:
            # Centre both lines so their shapes compare (the stored curve comes from a different
            # sample of rows than the equation's, so their levels need not match).
            forest = _centred(forest)
            equation = _centred(equation) if equation is not None else None
            scale = f"{scale[:28]} (centred)"
        out.append({"variable": var, "kind": f.kind, "grid": list(grid), "forest": forest,
                    "equation": equation, "outcomes": _outcomes(r), "scale": scale,
                    "deciles": _deciles(disc[var]) if f.kind == "numeric" else None,
                    "terms": [t for t in r.equation.terms if var in t.variables] if r.equation is not None else [],
                    "source": "discovery step" if stored else "computed for this report"})
    return out


def _centred(curves: list[list[float]]) -> list[list[float]]:
    return [(np.asarray(c, dtype=float) - float(np.mean(c))).tolist() for c in curves]


def _outcomes(r) -> list[str]:
    if r.table.task == "regression":
        return [r.table.target]
    classes = r.classes
    return [classes[1]] if len(classes) == 2 else list(classes)


def _scale(r) -> str:
    if r.table.task == "regression":
        return f"predicted {r.table.target}"[:40]
    return f"P({r.classes[1]})" if len(r.classes) == 2 else "probability"


def _stored(r, var: str):
    """The numeric curve the discovery step recorded for ``var`` (its ``grid``, ``pd`` and ``scale``
    fields, as the manifest writes them), or None when there is none the panel can draw.

    Only a curve on the prediction's own scale (``scale == "value"``, regression) is drawn as is;
    a classification curve is stored on the log-odds scale, while the panel compares
    probabilities, so the report computes those itself.
    """
    s = r.discovery.shapes.get(var)
    if s is None or s.get("kind") != "numeric" or s.get("scale") != "value":
        return None
    grid, vals = s["grid"], np.asarray(s["pd"], dtype=float)
    if vals.ndim == 1:
        vals = vals[None, :]
    if vals.shape[-1] != len(grid) or vals.shape[0] != len(_outcomes(r)):
        return None  # too few distinct values: discovery recorded no curve
    return list(grid), vals.tolist()


def _deciles(col: pd.Series) -> list[float]:
    x = pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)
    x = x[~np.isnan(x)]
    return np.quantile(x, np.linspace(0.1, 0.9, 9)).tolist() if len(x) else []


def _numeric_grid(col: pd.Series, n: int) -> list[float]:
    x = pd.to_numeric(col, errors="coerce").to_numpy(dtype=float)
    x = x[~np.isnan(x)]
    return np.unique(np.quantile(x, np.linspace(0.05, 0.95, n))).tolist()


def _forest_pd(r, disc: pd.DataFrame, sample: pd.DataFrame, f) -> tuple[list, list[list[float]]]:
    features = r.table.features
    if f.kind == "numeric":
        # brute force (classification) predicts sample x grid rows per variable: a coarser grid
        grid = _numeric_grid(disc[f.name], GRID if r.table.task == "regression" else BRUTE_GRID)
    else:
        present = set(disc[f.name].fillna("").astype(str))
        grid = [lv for lv in ([""] + list(f.categories or [])) if lv in present]
    task = r.table.task
    onehot = [i for i, c in enumerate(r.forest.columns) if c.feature == f.name and c.level is not None]
    if task == "regression" and (f.kind == "numeric" or len(onehot) <= MAX_RECURSION_LEVELS):
        # Exact and fast: the recursion method on the forest itself, on the preprocessed columns.
        # A category is its block of indicator columns; of their 0/1 grid only the rows with the
        # indicator of one level set (and every other clear) are real levels.
        prep = r.forest.pipeline.named_steps["prep"]
        Xt = np.asarray(prep.transform(model_frame(sample, features)), dtype=float)
        if f.kind == "numeric":
            j = next(i for i, c in enumerate(r.forest.columns) if c.feature == f.name and c.level is None)
            res = partial_dependence(r.forest.model, Xt, [j], method="recursion", kind="average",
                                     custom_values={j: np.asarray(grid)})
            avg = np.asarray(res["average"], dtype=float)
            return grid, avg.reshape(avg.shape[0], -1).tolist()
        res = partial_dependence(r.forest.model, Xt, onehot, method="recursion", kind="average",
                                 custom_values={j: np.array([0.0, 1.0]) for j in onehot})
        avg = np.asarray(res["average"], dtype=float).reshape(-1)
        combos = np.array(np.meshgrid(*res["grid_values"], indexing="ij")).reshape(len(onehot), -1).T
        levels = [r.forest.columns[j].level for j in onehot]
        values = []
        for lv in grid:
            want = np.array([1.0 if level == lv else 0.0 for level in levels])
            values.append(float(avg[np.flatnonzero((combos == want).all(axis=1))[0]]))
        return grid, [values]
    X = model_frame(sample.iloc[:BRUTE_SAMPLE], features)
    values = np.asarray(grid, dtype=float if f.kind == "numeric" else object)
    res = partial_dependence(r.forest.pipeline, X, [f.onnx_input], method="brute", kind="average",
                             categorical_features=[f.onnx_input] if f.kind == "categorical" else None,
                             custom_values={f.onnx_input: values}, response_method="auto")
    avg = np.asarray(res["average"], dtype=float)
    return grid, avg.reshape(avg.shape[0], -1).tolist()


class EquationEstimator(BaseEstimator):
    """The fitted GLM behind scikit-learn's estimator interface, so ``partial_dependence`` computes
    the equation's curve exactly as it computes the forest's (raw columns in, as in the data)."""

    def __init__(self, equation=None):
        self.equation = equation

    def fit(self, X=None, y=None):
        if self.equation.task != "regression":
            self.classes_ = np.arange(len(self.equation.classes))
        self.fitted_ = True
        return self

    def predict(self, X):
        p = np.asarray(self.equation.predict(X), dtype=float)
        return p if self.equation.task == "regression" else np.argmax(p, axis=1)

    def predict_proba(self, X):
        return np.asarray(self.equation.predict(X), dtype=float)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.estimator_type = "regressor" if self.equation.task == "regression" else "classifier"
        return tags


def _equation_pd(r, sample: pd.DataFrame, var: str, grid: list, kind: str) -> list[list[float]]:
    """The equation's partial dependence on ``var`` over the same sample rows and grid."""
    X = sample[[f.name for f in r.table.features]]
    values = np.asarray(grid, dtype=float if kind == "numeric" else object)
    res = partial_dependence(EquationEstimator(r.equation).fit(), X, [var], method="brute", kind="average",
                             categorical_features=[var] if kind == "categorical" else None,
                             custom_values={var: values}, response_method="auto")
    avg = np.asarray(res["average"], dtype=float)
    return avg.reshape(avg.shape[0], -1).tolist()
