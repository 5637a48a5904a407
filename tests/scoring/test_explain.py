""""Why this score": equation contributions and tree rule paths, computed from the bundle alone.

References: the equation's contributions against the fitted EquationFit's design matrix times
its coefficients (numpy), summed by term; the tree's path against scikit-learn's own
``DecisionTreeRegressor.decision_path`` / ``DecisionTreeClassifier.decision_path`` on the fitted
surrogate (scikit-learn user guide, "Understanding the decision tree structure").
"""
from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

import pocketforest as pf
from pocketforest.design import model_frame
from pocketforest.scoring.bundle_io import read_manifest
from pocketforest.scoring.explain import Explainer, equation_columns

from conftest import run_cli, synthetic_table


@pytest.fixture(params=["regression", "multiclass"])
def run(request, fitted):
    return fitted[request.param]


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
    assert all(t.endswith(f"leaf {i}") for t, i in zip(texts, leaf))
    assert any('colour = red' in t or 'colour != red' in t for t in texts)   # plain words stay bare


def test_score_explain_writes_contributions_that_sum_to_the_linear_predictor(run, tmp_path):
    r, path = run
    rows = _rows(r)
    rows.insert(0, "id", range(len(rows)))
    rows.to_csv(tmp_path / "rows.csv", index=False)
    out = tmp_path / "why.csv"
    p = run_cli("score", str(path), str(tmp_path / "rows.csv"), "--model", "equation", "--explain",
                "--keep", "id", "--out", str(out), "-q")
    assert p.returncode == 0, p.stderr
    got = pd.read_csv(out)
    assert got["id"].tolist() == list(range(len(rows)))
    m = read_manifest(path)
    eta_names, part_names = equation_columns(m)
    blocks = len(eta_names)
    parts = got[part_names].to_numpy().reshape(len(got), blocks, -1)
    eta = got[eta_names].to_numpy()
    # the CSV holds each double to 17 significant digits; the sum is in another order only
    np.testing.assert_allclose(parts.sum(axis=2), eta, rtol=0, atol=1e-12 * max(1.0, np.abs(parts).max()))
    if m["task"] == "regression":
        # prediction is the same double eta rounded once to float32: half a float32 ulp
        np.testing.assert_allclose(got["prediction"], eta[:, 0], rtol=2.0 ** -23, atol=1e-30)
    else:
        full = np.column_stack([np.zeros(len(got)), eta])
        p = np.exp(full - full.max(1, keepdims=True))
        p /= p.sum(1, keepdims=True)
        # probabilities are float32 roundings of the graph's double softmax: one float32 ulp at 1
        np.testing.assert_allclose(got[[f"prob_{c}" for c in m["classes"]]], p, rtol=0, atol=2.0 ** -23)


def test_score_explain_tree_and_the_api_agree(run, tmp_path):
    r, path = run
    rows = _rows(r)
    rows.to_csv(tmp_path / "rows.csv", index=False)
    p = run_cli("score", str(path), str(tmp_path / "rows.csv"), "--model", "tree", "--explain", "-q")
    assert p.returncode == 0, p.stderr
    got = pd.read_csv(io.StringIO(p.stdout), keep_default_na=False)
    api = pf.load_bundle(path).explain(rows)
    np.testing.assert_array_equal(got["tree_leaf"], api["tree_leaf"])
    assert got["tree_path"].tolist() == api["tree_path"].tolist()
    eta_names, part_names = equation_columns(read_manifest(path))
    assert list(api.columns) == eta_names + part_names + ["tree_leaf", "tree_path"]


def test_the_forest_has_no_short_reason(run, tmp_path):
    _, path = run
    (tmp_path / "rows.csv").write_text("x1,x2\n0.1,0.2\n")
    p = run_cli("score", str(path), str(tmp_path / "rows.csv"), "--model", "forest", "--explain")
    assert p.returncode == 2 and p.stderr.startswith("error:") and "--model equation" in p.stderr
