""""Why this score": equation contributions and tree rule paths, computed from the bundle alone.

References: the equation's contributions against the fitted EquationFit's design matrix times
its coefficients (numpy), summed by term; the tree's path against scikit-learn's own
``DecisionTreeRegressor.decision_path`` / ``DecisionTreeClassifier.decision_path`` on the fitted
surrogate (scikit-learn user guide, "Understanding the decision tree structure").
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pocketforest.design import model_frame
from pocketforest.explain import Explainer, equation_columns
from pocketforest.intake import prepare
from pocketforest.pipeline import Settings, distill

from conftest import synthetic_table


@pytest.fixture(scope="module", params=[("regression", 2), ("classification", 3)], ids=["regression", "multiclass"])
def run(request, tmp_path_factory):
    task, k = request.param
    df = synthetic_table(n=400, seed=12, task=task, n_classes=k)
    r = distill(prepare(df, "y", source="e.csv"), Settings(trees=20, seed=4, quiet=True, bootstrap=20))
    return r, r.write(tmp_path_factory.mktemp("explain") / "b")


def _rows(r) -> pd.DataFrame:
    rows = synthetic_table(n=80, seed=99).drop(columns="y")
    rows.loc[::5, "x2"] = np.nan
    rows.loc[1::6, "colour"] = np.nan
    rows.loc[2::7, "site"] = "east"                   # unseen: none of the known levels
    # rows at the tree's numeric splits, where float32 rounding decides
    t = r.tree.model.tree_
    extra = []
    for i in np.flatnonzero(t.children_left != -1)[:10]:
        col = r.forest.columns[t.feature[i]]
        if col.level is None:
            t32 = np.float32(t.threshold[i])
            for x in (float(t32), float(np.nextafter(t32, np.float32(np.inf)))):
                extra.append({**rows.iloc[0].to_dict(), col.feature: x})
    return pd.concat([rows, pd.DataFrame(extra)], ignore_index=True)


def test_contributions_sum_to_the_linear_predictor_and_match_the_fit(run):
    r, path = run
    rows = _rows(r)
    ex = Explainer(path)
    eta, parts = ex.contributions(rows)
    eq = r.equation
    rows32 = rows.copy()
    for c in ("x1", "x2", "x3", "noise"):   # the graph reads numbers as float32, as every ONNX input
        rows32[c] = rows32[c].astype(np.float32).astype(np.float64)
    X = eq.design(rows32)
    coef = np.asarray(eq.coef).reshape(X.shape[1], -1)
    scale = max(1.0, float(np.abs(X[:, :, None] * coef[None]).max()))
    # double precision inside the graph; additions in another order only
    np.testing.assert_allclose(parts.sum(axis=2), eta, rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(eta, X @ coef, rtol=0, atol=1e-12 * scale)
    terms = sorted({c.term for c in eq.columns})
    for b in range(coef.shape[1]):
        np.testing.assert_allclose(parts[:, b, 0], coef[0, b], rtol=0, atol=1e-15 * scale)
        for g, t in enumerate(terms, start=1):
            cols = [1 + j for j, c in enumerate(eq.columns) if c.term == t]
            np.testing.assert_allclose(parts[:, b, g], X[:, cols] @ coef[cols, b], rtol=0, atol=1e-12 * scale)
    frame = ex.equation(rows)
    eta_names, part_names = equation_columns(ex.manifest)
    assert list(frame.columns) == eta_names + part_names and len(part_names) == coef.shape[1] * (1 + len(terms))


def test_tree_paths_are_the_trees_own_decision_paths(run):
    r, path = run
    rows = _rows(r)
    X = np.asarray(r.tree.pipeline.named_steps["prep"].transform(model_frame(rows, r.table.features)), dtype=np.float32)
    want = r.tree.model.decision_path(X).toarray()
    leaf, passed = Explainer(path).leaves(rows, indicator=True)
    np.testing.assert_array_equal(passed, want)
    np.testing.assert_array_equal(leaf, r.tree.model.apply(X))
    texts = Explainer(path).tree(rows)["tree_path"]
    assert all(t.startswith('"') and t.endswith(f"leaf {i}") for t, i in zip(texts, leaf))
